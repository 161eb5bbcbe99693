package main

import (
	"path/filepath"
	"strings"
	"testing"

	"github.com/topostate/topostate/queries"
)

// A group value that no subject has is refused in every bundled group
// query (and in a user's SQL calling the macro), with the values present
// and the case-only match; never rows of n = 0 with exit 0 (issue: a
// mistyped group value).
func TestGroupValueTypoRefused(t *testing.T) {
	all, err := queries.List(queries.FS)
	if err != nil {
		t.Fatal(err)
	}
	groupQueries := 0
	for _, q := range all {
		if _, ok := q.Param("group_a"); !ok {
			continue
		}
		groupQueries++
		t.Run(q.Name, func(t *testing.T) {
			code, stdout, stderr := topostate("query", "--db", warehouse, q.Name, "--param", "group_a=b", "--param", "group_b=A", "-f", "csv", "--param", "n_perm=99")
			if _, ok := q.Param("n_perm"); !ok {
				code, stdout, stderr = topostate("query", "--db", warehouse, q.Name, "--param", "group_a=b", "--param", "group_b=A", "-f", "csv")
			}
			if code != 2 || stdout != "" ||
				!strings.Contains(stderr, "group_a value 'b' matches no subject") ||
				!strings.Contains(stderr, "the values there are: A, B") ||
				!strings.Contains(stderr, "did you mean 'B'?") {
				t.Errorf("exit %d\nstdout: %s\nstderr: %s", code, stdout, stderr)
			}
			code, _, stderr = topostate("query", "--db", warehouse, q.Name, "--param", "group_a=A", "--param", "group_b=Z")
			if code != 2 || !strings.Contains(stderr, "group_b value 'Z'") || strings.Contains(stderr, "did you mean") {
				t.Errorf("group_b=Z: exit %d: %s", code, stderr)
			}
		})
	}
	if groupQueries < 4 {
		t.Errorf("%d bundled group queries; expected at least 4", groupQueries)
	}
	code, _, stderr := topostate("query", "--db", warehouse, "--sql",
		"SELECT count(*) FROM subject_groups(1, 'group', 'a', 'B')")
	if code != 2 || !strings.Contains(stderr, "did you mean 'A'?") {
		t.Errorf("own SQL: exit %d: %s", code, stderr)
	}
	// The right values still work.
	code, stdout, stderr := topostate("query", "--db", warehouse, "transitions_by_group", "--param", "group_a=B", "--param", "group_b=A", "-f", "csv")
	if code != 0 || !strings.Contains(stdout, "group,from_state") {
		t.Errorf("B vs A: exit %d: %s %s", code, stdout, stderr)
	}
}

// One rule for which analysis a command uses (queries.FindAnalysis): the
// only one when the warehouse holds one; with several, --analysis is
// required and the refusal lists them; an id, a name or latest otherwise.
// Every command names the analysis it used; query does so on standard
// error, so standard output stays plain CSV.
func TestOneAnalysisRule(t *testing.T) {
	db, _ := twoAnalyses(t) // 1 "baseline", 2 "second"
	out := t.TempDir()
	run := func(args ...string) result { return runCmd(t, cmdOpts{args: args}) }

	// Several analyses, none named: every command refuses and lists them.
	for _, args := range [][]string{
		{"query", "--db", db, "subject_features", "-f", "csv"},
		{"query", "--db", db, "--sql", "SELECT getvariable('analysis') AS a"},
		{"plot", "--db", db, "--out", out},
		{"report", "--db", db, "--out", filepath.Join(out, "r.html")},
	} {
		r := run(args...)
		if r.code != exitUsage || r.stdout != "" || !strings.Contains(r.stderr, `holds 2 analyses: 1 ("baseline"), 2 ("second")`) {
			t.Errorf("%v: exit %d\nstdout: %s\nstderr: %s", args, r.code, r.stdout, r.stderr)
		}
	}
	// query names the analysis on standard error; standard output is the
	// CSV alone, with the second analysis's rows.
	for _, given := range [][]string{{"--analysis", "second"}, {"--analysis", "2"}, {"--analysis", "latest"}, {"--param", "analysis=second"}} {
		r := run(append([]string{"query", "--db", db, "subject_features", "-f", "csv"}, given...)...)
		if r.code != 0 || !strings.Contains(r.stderr, `query: analysis 2 ("second"), one of 2 in the warehouse`) ||
			!strings.HasPrefix(r.stdout, "subject_id,") {
			t.Errorf("%v: exit %d\nstdout: %s\nstderr: %s", given, r.code, r.stdout, r.stderr)
		}
	}
	// In --sql, getvariable('analysis') holds the resolved id as an
	// INTEGER however it was given.
	for _, v := range []string{"second", "2", "latest"} {
		r := run("query", "--db", db, "--analysis", v, "-f", "csv", "--sql",
			"SELECT getvariable('analysis') AS a, typeof(getvariable('analysis')) AS t, count(*) AS n FROM analyses WHERE analysis_id = getvariable('analysis')")
		if r.code != 0 || r.stdout != "a,t,n\n2,INTEGER,1\n" {
			t.Errorf("--sql with analysis %s: exit %d\nstdout: %q\nstderr: %s", v, r.code, r.stdout, r.stderr)
		}
	}
	r := run("query", "--db", db, "--analysis", "third", "subject_features")
	if r.code != exitUsage || !strings.Contains(r.stderr, `no such analysis "third"`) {
		t.Errorf("unknown analysis: exit %d: %s", r.code, r.stderr)
	}
	// plot and export name the analysis they used; export without
	// --analysis writes (and names) every analysis.
	r = run("plot", "--db", db, "--out", filepath.Join(out, "fig"), "--analysis", "1", "--format", "svg")
	if r.code != 0 || !strings.Contains(r.stdout, `for analysis 1 ("baseline")`) {
		t.Errorf("plot: exit %d\n%s\n%s", r.code, r.stdout, r.stderr)
	}
	r = run("export", "--db", db, "--out", filepath.Join(out, "e1"), "--tables", "analyses", "--analysis", "latest")
	if r.code != 0 || !strings.Contains(r.stdout, `analysis 2 ("second")`) {
		t.Errorf("export latest: exit %d\n%s\n%s", r.code, r.stdout, r.stderr)
	}
	r = run("export", "--db", db, "--out", filepath.Join(out, "e2"), "--tables", "analyses")
	if r.code != 0 || !strings.Contains(r.stdout, `every analysis (rows carry analysis_id): 1 ("baseline"), 2 ("second")`) {
		t.Errorf("export all: exit %d\n%s\n%s", r.code, r.stdout, r.stderr)
	}
	// One analysis: it is used without being named, and named in the output.
	r = run("query", "--db", baselineDB, "subject_features", "-f", "csv")
	if r.code != 0 || !strings.Contains(r.stderr, `query: analysis 1 ("baseline"), the only analysis in the warehouse`) {
		t.Errorf("one analysis: exit %d\n%s", r.code, r.stderr)
	}
}
