//go:build unix

package main

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// twoAnalyses returns a warehouse holding "baseline" (id 1) and "second"
// (id 2, another window) of the good cohort, and the number of rows of
// analysis 2 over every table, counted before any drop.
func twoAnalyses(t *testing.T) (db string, rows2 int) {
	t.Helper()
	tmp := t.TempDir()
	db = copyDB(t, tmp)
	abs, _ := filepath.Abs(goodCohort)
	if r := runCmd(t, cmdOpts{args: expand(baseIngest+" --analysis second --window 6", abs, db)}); r.code != 0 {
		t.Fatalf("second ingest: exit %d\n%s", r.code, r.stderr)
	}
	h := openSnapshotHandle(t, db)
	defer h.Close()
	for _, tb := range queryStrings(t, h, `SELECT table_name FROM information_schema.columns
		WHERE table_schema = 'main' AND column_name = 'analysis_id'`) {
		var n int
		if err := h.QueryRow(fmt.Sprintf(`SELECT count(*) FROM "%s" WHERE analysis_id = 2`, tb)).Scan(&n); err != nil {
			t.Fatal(err)
		}
		rows2 += n
	}
	return db, rows2
}

// TestDrop removes one analysis and checks, table for table, that exactly
// its rows went: the warehouse then equals the one that held the other
// analysis alone. Without --yes the command asks on standard input and
// removes nothing unless the answer is y.
func TestDrop(t *testing.T) {
	baseline := snapshot(t, baselineDB, 0)
	refused := []struct {
		name   string
		args   []string // after drop --db FILE
		stdin  string
		exit   int
		stderr []string
	}{
		{"answer n", []string{"--analysis", "second"}, "n\n", 1,
			[]string{`drop analysis 2 ("second", 3 series) from`, "[y/N]", "not confirmed; nothing was removed"}},
		{"no answer", []string{"--analysis", "second"}, "", 1, []string{"[y/N]", "not confirmed"}},
		{"answer yess", []string{"--analysis", "second"}, "yess\n", 1, []string{"not confirmed"}},
		{"unknown name", []string{"--analysis", "third", "--yes"}, "", 2,
			[]string{`no such analysis "third"`, `holds: 1 ("baseline"), 2 ("second")`}},
		{"no name", []string{"--yes"}, "", 2, []string{"--analysis is required"}},
		{"stray argument", []string{"--analysis", "second", "--yes", "now"}, "", 2, []string{"drop takes no arguments"}},
	}
	db, rows2 := twoAnalyses(t)
	before := snapshot(t, db, 0)
	for _, c := range refused {
		t.Run(c.name, func(t *testing.T) {
			r := runCmd(t, cmdOpts{args: append([]string{"drop", "--db", db}, c.args...), stdin: c.stdin})
			if r.code != c.exit {
				t.Errorf("exit %d, want %d; stderr: %s", r.code, c.exit, r.stderr)
			}
			for _, s := range c.stderr {
				if !strings.Contains(r.stderr, s) {
					t.Errorf("standard error lacks %q: %s", s, r.stderr)
				}
			}
			if r.stdout != "" {
				t.Errorf("standard output: %s", r.stdout)
			}
			sameSnapshot(t, c.name, before, snapshot(t, db, 0))
		})
	}

	t.Run("missing file", func(t *testing.T) {
		p := filepath.Join(t.TempDir(), "none.duckdb")
		r := runCmd(t, cmdOpts{args: []string{"drop", "--db", p, "--analysis", "x", "--yes"}})
		if r.code != 1 || !strings.Contains(r.stderr, "does not exist") {
			t.Errorf("exit %d: %s", r.code, r.stderr)
		}
		if _, err := os.Stat(p); err == nil {
			t.Error("drop created the file it was asked to drop from")
		}
	})

	t.Run("answer y", func(t *testing.T) {
		r := runCmd(t, cmdOpts{args: []string{"drop", "--db", db, "--analysis", "second"}, stdin: "y\n"})
		if r.code != 0 {
			t.Fatalf("exit %d: %s", r.code, r.stderr)
		}
		want := fmt.Sprintf(`dropped analysis "second" (id 2): %d rows from`, rows2)
		if !strings.Contains(r.stdout, want) {
			t.Errorf("standard output %q lacks %q", r.stdout, want)
		}
		// Everything but analysis 2 stays; nothing of it remains but the
		// record of the drop, which keeps id 2 from being given out again.
		after := snapshot(t, db, 0)
		if got := querySQL(t, db, `SELECT analysis_id || ' ' || name || ' ' || rows_removed FROM dropped_analyses`); got != fmt.Sprintf("2 second %d", rows2) {
			t.Errorf("dropped_analyses holds %q", got)
		}
		delete(after, "dropped_analyses")
		delete(baseline, "dropped_analyses")
		sameSnapshot(t, "after dropping second", baseline, after)
		// The name is free again.
		abs, _ := filepath.Abs(goodCohort)
		if r := runCmd(t, cmdOpts{args: expand(baseIngest+" --analysis second", abs, db)}); r.code != 0 {
			t.Fatalf("ingest under the dropped name: exit %d\n%s", r.code, r.stderr)
		}
		if got := querySQL(t, db, `SELECT analysis_id FROM analyses WHERE name = 'second'`); got != "3" {
			t.Errorf("the new analysis got id %s; a dropped id (2) must not be reused", got)
		}
	})

	t.Run("yes, the other one", func(t *testing.T) {
		db, _ := twoAnalyses(t)
		keep := snapshot(t, db, 2)
		r := runCmd(t, cmdOpts{args: []string{"drop", "--db", db, "--analysis", "baseline", "--yes"}})
		if r.code != 0 || r.stderr != "" {
			t.Fatalf("exit %d: %s", r.code, r.stderr)
		}
		sameSnapshot(t, "analysis 2 after dropping baseline", keep, snapshot(t, db, 2))
		if got := querySQL(t, db, `SELECT string_agg(name, ',') FROM analyses`); got != "second" {
			t.Errorf("analyses left: %s, want second", got)
		}
		if orphanRows(t, db) != 0 {
			t.Error("rows of the dropped analysis remain")
		}
		for _, tb := range []string{"inputs", "subjects", "regions", "state_sequence", "filtration_events"} {
			if n := querySQL(t, db, fmt.Sprintf(`SELECT count(*) FROM %s WHERE analysis_id = 1`, tb)); n != "0" {
				t.Errorf("%s still has %s rows of analysis 1", tb, n)
			}
		}
	})
}
