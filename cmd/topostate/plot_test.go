package main

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// topostate plot through the command line: the exit codes (0 ok, 1
// failure, 2 usage) and the files it reports.
func TestPlotCommand(t *testing.T) {
	dir := t.TempDir()
	cohort, db, out := filepath.Join(dir, "cohort"), filepath.Join(dir, "w.duckdb"), filepath.Join(dir, "figs")
	call := func(args ...string) (int, string, string) {
		var so, se bytes.Buffer
		code := run(append([]string{"topostate"}, args...), strings.NewReader(""), &so, &se)
		return code, so.String(), se.String()
	}
	if code, _, se := call("simulate", "--out", cohort, "--subjects", "6", "--regions", "8", "--timepoints", "120", "--seed", "3"); code != 0 {
		t.Fatalf("simulate: %d %s", code, se)
	}
	if code, _, se := call("ingest", "--input", cohort, "--db", db, "--window", "20", "--states", "2", "--analysis", "t", "-q"); code != 0 {
		t.Fatalf("ingest: %d %s", code, se)
	}
	cases := []struct {
		name string
		args []string
		code int
		say  string
	}{
		{"no --out", []string{"plot", "--db", db}, exitUsage, "--out FOLDER is required"},
		{"bad format", []string{"plot", "--db", db, "--out", out, "--format", "gif"}, exitUsage, `--format "gif"`},
		{"unknown analysis", []string{"plot", "--db", db, "--out", out, "--analysis", "x"}, exitUsage, `no such analysis "x"`},
		{"unknown group column", []string{"plot", "--db", db, "--out", out, "--group", "shift"}, exitUsage, `no column "shift"`},
		{"missing warehouse", []string{"plot", "--db", filepath.Join(dir, "none.duckdb"), "--out", out}, exitFailure, "none.duckdb"},
		{"svg only", []string{"plot", "--db", db, "--out", out, "--format", "svg"}, exitOK, "6 figure files"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			code, so, se := call(c.args...)
			if code != c.code || !strings.Contains(so+se, c.say) {
				t.Errorf("exit %d, want %d; output %q %q, want %q", code, c.code, so, se, c.say)
			}
		})
	}
	// k was fixed (--states 2): no elbow figure, and a note says why.
	code, so, se := call("plot", "--db", db, "--out", out, "--analysis", "t")
	if code != 0 || !strings.Contains(se, "no elbow curve") {
		t.Fatalf("plot: %d %s %s", code, so, se)
	}
	for _, name := range []string{"betti0", "betti1", "occupancy", "dwell", "transitions", "centroids"} {
		for _, ext := range []string{".png", ".svg"} {
			p := filepath.Join(out, name+ext)
			if st, err := os.Stat(p); err != nil || st.Size() == 0 || !strings.Contains(so, p) {
				t.Errorf("%s: %v (listed: %v)", p, err, strings.Contains(so, p))
			}
		}
	}
	if _, err := os.Stat(filepath.Join(out, "elbow.png")); err == nil {
		t.Error("elbow figure drawn for a fixed k")
	}
	// A Fisher-z analysis beside it: --analysis picks it, and the
	// centroids are labelled in z.
	if code, _, se := call("ingest", "--input", cohort, "--db", db, "--window", "20", "--states", "2", "--fisher-z", "--analysis", "z", "-q"); code != 0 {
		t.Fatalf("ingest: %d %s", code, se)
	}
	if code, _, se := call("plot", "--db", db, "--out", out); code != exitUsage || !strings.HasPrefix(se, `plot: no analysis chosen: the warehouse holds 2 analyses: 1 ("t"), 2 ("z")`) {
		t.Errorf("two analyses without --analysis: %d %s", code, se)
	}
	zdir := filepath.Join(dir, "z")
	if code, _, se := call("plot", "--db", db, "--out", zdir, "--analysis", "z", "--format", "svg"); code != 0 {
		t.Fatalf("plot z: %d %s", code, se)
	}
	b, err := os.ReadFile(filepath.Join(zdir, "centroids.svg"))
	if err != nil || !strings.Contains(string(b), "Fisher z") || strings.Contains(string(b), ">correlation r<") {
		t.Errorf("Fisher-z centroids not labelled in z (%v)", err)
	}
}

// The labels of the figures through the binary: with --group site every
// legend of groups is titled "group (site)" and the transition panels
// read "site = 1 (n=...)", not a bare "1" beside states 1..3; the
// regions' names from the series files' header label the centroid axes
// when they fit (8 regions here), and numbers with a note when the
// analysis has too many regions to name.
func TestPlotLabels(t *testing.T) {
	topostate := func(args ...string) (int, string, string) { // the built binary
		r := runCmd(t, cmdOpts{args: args})
		return r.code, r.stdout, r.stderr
	}
	dir := t.TempDir()
	cohort, db := filepath.Join(dir, "cohort"), filepath.Join(dir, "w.duckdb")
	if code, _, se := topostate("simulate", "--out", cohort, "--subjects", "9", "--regions", "8", "--timepoints", "150", "--seed", "5"); code != 0 {
		t.Fatalf("simulate: %d %s", code, se)
	}
	// A site column (1, 2, 3) beside the groups.
	pt := filepath.Join(cohort, "participants.tsv")
	b, err := os.ReadFile(pt)
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimRight(string(b), "\n"), "\n")
	for i := range lines {
		if i == 0 {
			lines[i] += "\tsite"
		} else {
			lines[i] += "\t" + string(rune('1'+i%3))
		}
	}
	if err := os.WriteFile(pt, []byte(strings.Join(lines, "\n")+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if code, _, se := topostate("ingest", "--input", cohort, "--db", db, "--window", "20", "--states", "3", "--analysis", "few", "-q"); code != 0 {
		t.Fatalf("ingest: %d %s", code, se)
	}
	out := filepath.Join(dir, "figs")
	if code, _, se := topostate("plot", "--db", db, "--out", out, "--group", "site", "--format", "svg"); code != 0 {
		t.Fatalf("plot: %d %s", code, se)
	}
	read := func(name string) string {
		b, err := os.ReadFile(filepath.Join(out, name+".svg"))
		if err != nil {
			t.Fatal(err)
		}
		return string(b)
	}
	for name, want := range map[string][]string{
		"betti0":      {">group (site)<", ">1 (n=3)<"},
		"betti1":      {">group (site)<"},
		"occupancy":   {">group (site)<", ">3 (n=3)<"},
		"dwell":       {">group (site)<"},
		"transitions": {">site = 1 (n=3)<", ">site = 3 (n=3)<"},
		"centroids":   {">node001<", ">node008<", "regions named as in table regions"},
	} {
		svg := read(name)
		for _, w := range want {
			if !strings.Contains(svg, w) {
				t.Errorf("%s.svg lacks %s", name, w)
			}
		}
	}
	// The default column "group": the legend title is "group".
	out = filepath.Join(dir, "figs-group")
	if code, _, se := topostate("plot", "--db", db, "--out", out, "--format", "svg"); code != 0 {
		t.Fatalf("plot: %d %s", code, se)
	}
	if svg := read("occupancy"); !strings.Contains(svg, ">group<") || !strings.Contains(svg, ">A (n=5)<") {
		t.Error("occupancy.svg: no legend title 'group' over A (n=5)")
	}
	// 24 regions: numbered, and the subtitle says why.
	cohort2, out := filepath.Join(dir, "cohort24"), filepath.Join(dir, "figs24")
	if code, _, se := topostate("simulate", "--out", cohort2, "--subjects", "4", "--regions", "24", "--timepoints", "150", "--seed", "5"); code != 0 {
		t.Fatalf("simulate: %d %s", code, se)
	}
	if code, _, se := topostate("ingest", "--input", cohort2, "--db", db, "--window", "30", "--states", "2", "--analysis", "many", "-q"); code != 0 {
		t.Fatalf("ingest: %d %s", code, se)
	}
	if code, _, se := topostate("plot", "--db", db, "--analysis", "many", "--out", out, "--format", "svg"); code != 0 {
		t.Fatalf("plot: %d %s", code, se)
	}
	if svg := read("centroids"); strings.Contains(svg, ">node001<") || !strings.Contains(svg, "24 regions are too many to name on the axes") || !strings.Contains(svg, ">22<") {
		t.Error("centroids.svg of 24 regions: names drawn, or no note, or no numbers")
	}
}
