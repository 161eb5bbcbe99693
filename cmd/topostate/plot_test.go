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
	if code, _, se := call("plot", "--db", db, "--out", out); code != exitUsage || !strings.Contains(se, `holds 2 analyses: 1 ("t"), 2 ("z")`) {
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
