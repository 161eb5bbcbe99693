package main

import (
	"database/sql"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/topostate/topostate/compute"
)

// surrogateRows reads surrogate_tests of a warehouse, one string per row in
// stored order (analysis_id left out), to compare files.
func surrogateRows(t *testing.T, path string) []string {
	t.Helper()
	db, err := sql.Open("duckdb", path+"?access_mode=READ_ONLY")
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	rows, err := db.Query(`SELECT statistic, coalesce(state, 0), observed, null_mean, null_sd, n_surrogates, n_exceed, p, fit_windows, restarts
		FROM surrogate_tests ORDER BY statistic, state NULLS FIRST`)
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	var out []string
	for rows.Next() {
		var st string
		var state, n, exceed, fw, rs int
		var obs, mean, sd, p float64
		if err := rows.Scan(&st, &state, &obs, &mean, &sd, &n, &exceed, &p, &fw, &rs); err != nil {
			t.Fatal(err)
		}
		out = append(out, fmt.Sprintf("%s %d %v %v %v %d %d %v %d %d", st, state, obs, mean, sd, n, exceed, p, fw, rs))
	}
	return out
}

func sameRows(t *testing.T, what string, a, b []string) {
	t.Helper()
	if len(a) == 0 || strings.Join(a, "\n") != strings.Join(b, "\n") {
		t.Errorf("%s: surrogate rows differ:\n%s\nvs\n%s", what, strings.Join(a, "\n"), strings.Join(b, "\n"))
	}
}

// TestSurrogatesCommand runs the surrogate test through the real binary on
// a generated 3-state cohort (invented data): ingest --surrogates, the
// surrogates subcommand on the stored analysis (same rows whatever
// --workers, refusals that leave the file as it was), and the staged
// pipeline with a surrogate stage in two shards (same rows as ingest).
func TestSurrogatesCommand(t *testing.T) {
	tmp := t.TempDir()
	cohort := filepath.Join(tmp, "cohort")
	spec := compute.CohortSpec{Subjects: 6, Regions: 8, Timepoints: 200, States: 3, TR: 1.5, Stickiness: 0.97, Seed: 23}
	if _, err := writeSynthetic(cohort, spec, map[string]string{"A": "day", "B": "night"}, "score"); err != nil {
		t.Fatal(err)
	}
	opts := []string{"--input", cohort, "--window", "20", "--states", "3", "--restarts", "2", "--grid", "-0.5:1:16", "--seed", "9"}
	single := filepath.Join(tmp, "single.duckdb")
	r := runCmd(t, cmdOpts{args: append([]string{"ingest", "-q", "--db", single, "--analysis", "a", "--surrogates", "19", "--workers", "2"}, opts...)})
	if r.code != 0 || !strings.Contains(r.stdout, "than in 19 stationary surrogates: p = ") {
		t.Fatalf("ingest --surrogates: exit %d\n%s%s", r.code, r.stdout, r.stderr)
	}
	fromIngest := surrogateRows(t, single)
	// 3 states: cluster_quality, window_variability, betti_distance, mean_dwell, mean_dwell x 3.
	if len(fromIngest) != 7 {
		t.Fatalf("%d surrogate rows, want 7:\n%s", len(fromIngest), strings.Join(fromIngest, "\n"))
	}
	for _, row := range fromIngest {
		if !strings.Contains(row, " 19 ") || !strings.HasSuffix(row, " 2000 2") {
			t.Errorf("row %q: want N = 19, the default 2000 fitting windows and 2 restarts", row)
		}
	}

	// An analysis without a test, then the test added with another worker count.
	r = runCmd(t, cmdOpts{args: append([]string{"ingest", "-q", "--db", filepath.Join(tmp, "later.duckdb"), "--analysis", "a"}, opts...)})
	if r.code != 0 {
		t.Fatalf("ingest: %s", r.stderr)
	}
	later := filepath.Join(tmp, "later.duckdb")
	if r := runCmd(t, cmdOpts{args: []string{"info", "--db", later}}); !strings.Contains(r.stdout, "no surrogate test") || !strings.Contains(r.stdout, "--analysis 1 --n 99") {
		t.Errorf("info without a test (want the command naming the analysis by id):\n%s", r.stdout)
	}
	// The command info suggests names the analysis by id; an id, a name or
	// nothing (the only analysis) pick it, as in every command.
	r = runCmd(t, cmdOpts{args: []string{"surrogates", "-q", "--db", later, "--analysis", "1", "--n", "19", "--workers", "1"}})
	if r.code != 0 || !strings.Contains(r.stdout, "states more distinct") {
		t.Fatalf("surrogates: exit %d\n%s%s", r.code, r.stdout, r.stderr)
	}
	sameRows(t, "surrogates --workers 1 vs ingest --workers 2", fromIngest, surrogateRows(t, later))
	if r := runCmd(t, cmdOpts{args: []string{"info", "--db", later}}); !strings.Contains(r.stdout, "states more distinct (windows cluster more tightly) than in 19 stationary surrogates: p = ") {
		t.Errorf("info:\n%s", r.stdout)
	}
	if r := runCmd(t, cmdOpts{args: []string{"query", "surrogate_summary", "--db", later}}); r.code != 0 || !strings.Contains(r.stdout, "states more distinct") {
		t.Errorf("query surrogate_summary: exit %d\n%s%s", r.code, r.stdout, r.stderr)
	}

	// Refusals: each leaves the rows as they were.
	f := filepath.Join(cohort, "sub-002", "func", "sub-002_task-rest_timeseries.tsv")
	orig, err := os.ReadFile(f)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name  string
		args  []string
		edit  func()
		code  int
		wants []string
	}{
		{"again without --replace", []string{"--n", "19"}, nil, 2, []string{"already has a surrogate test", "--replace"}},
		{"too few surrogates", []string{"--n", "5", "--replace"}, nil, 2, []string{"at least 19"}},
		{"no such analysis", []string{"--n", "19", "--analysis", "b"}, nil, 2, []string{`"b"`, "no such analysis"}},
		{"a series changed", []string{"--n", "19", "--replace"}, func() {
			os.WriteFile(f, []byte(strings.Replace(string(orig), "\n", "\n", 1)+"\n"), 0o644)
		}, 1, []string{"sub-002_task-rest_timeseries.tsv", "changed since the analysis"}},
		{"a series missing", []string{"--n", "19", "--replace"}, func() { os.Remove(f) }, 1, []string{"sub-002"}},
	} {
		if c.edit != nil {
			c.edit()
		}
		args := append([]string{"surrogates", "-q", "--db", later, "--analysis", "a"}, c.args...)
		if c.args[len(c.args)-1] == "b" || (len(c.args) > 2 && c.args[2] == "--analysis") {
			args = append([]string{"surrogates", "-q", "--db", later}, c.args...)
		}
		r := runCmd(t, cmdOpts{args: args})
		ok := r.code == c.code
		for _, w := range c.wants {
			ok = ok && strings.Contains(r.stderr, w)
		}
		if !ok {
			t.Errorf("%s: exit %d (want %d), stderr:\n%s", c.name, r.code, c.code, r.stderr)
		}
		sameRows(t, c.name+": rows after the refusal", fromIngest, surrogateRows(t, later))
		os.WriteFile(f, orig, 0o644)
	}
	// --replace computes the same rows again.
	if r := runCmd(t, cmdOpts{args: []string{"surrogates", "-q", "--db", later, "--analysis", "a", "--n", "19", "--replace"}}); r.code != 0 || !strings.Contains(r.stdout, "replacing 7 rows") {
		t.Errorf("--replace: exit %d\n%s%s", r.code, r.stdout, r.stderr)
	}
	sameRows(t, "--replace", fromIngest, surrogateRows(t, later))

	// The staged pipeline: surrogate runs in two shards, merged in order.
	work := filepath.Join(tmp, "work")
	merged := filepath.Join(tmp, "merged.duckdb")
	mustRun(t, append([]string{"stage", "plan", "--work", work, "--shards", "2", "--surrogates", "19"}, opts...)...)
	shards(t, 2, "stage", "sample", "-q", "--work", work)
	mustRun(t, "stage", "fit", "-q", "--work", work)
	shards(t, 2, "stage", "compute", "-q", "--work", work)
	if code, _, stderr := command("stage", "merge", "--work", work, "--db", merged); code != 1 || !strings.Contains(stderr, "stage surrogates --shard 1/2 has not finished") {
		t.Errorf("merge before the surrogate stage: exit %d: %s", code, stderr)
	}
	shards(t, 2, "stage", "surrogates", "-q", "--work", work)
	mustRun(t, "stage", "merge", "-q", "--work", work, "--db", merged, "--analysis", "a")
	sameRows(t, "staged pipeline vs ingest", fromIngest, surrogateRows(t, merged))
}
