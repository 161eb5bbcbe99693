//go:build unix

package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// More regression tests of issue 13's classes (data safety), through the
// real binary: exit code, message, and every file the command was not
// asked to write byte-identical afterwards (hashTree, sameTree).

// TestReservedAnalysisNames (class 9): a name that reads as an id or the
// keyword latest, an empty or blank name, surrounding spaces and control
// characters are refused by ingest and stage merge before anything is
// computed or opened (exit 2), and the warehouse is byte-identical.
func TestReservedAnalysisNames(t *testing.T) {
	tmp := t.TempDir()
	db := copyDB(t, tmp)
	abs, _ := filepath.Abs(goodCohort)
	work := filepath.Join(tmp, "work")
	mustRun(t, append([]string{"stage", "plan", "--work", work, "--shards", "1"}, expand("--input {cohort} --window 5 --states 2", abs, "")...)...)
	mustRun(t, "stage", "sample", "--work", work, "--shard", "1/1", "-q")
	mustRun(t, "stage", "fit", "--work", work, "-q")
	mustRun(t, "stage", "compute", "--work", work, "--shard", "1/1", "-q")
	before := hashTree(t, tmp)
	for _, c := range []struct{ name, want string }{
		{"2", "reads as an analysis id"},
		{"007", "reads as an analysis id"},
		{"-1", "reads as an analysis id"},
		{"latest", "latest names the newest analysis"},
		{"LATEST", "latest names the newest analysis"},
		{"", "cannot be empty"},
		{"   ", "is blank"},
		{" rest", "leading or trailing spaces"},
		{"rest ", "leading or trailing spaces"},
		{"rest\x1b[2J", "holds a control character"},
		{"two\nlines", "holds a control character"},
	} {
		for _, args := range [][]string{
			append(expand(baseIngest, abs, db), "--analysis", c.name),
			{"stage", "merge", "--work", work, "--db", db, "-q", "--analysis", c.name},
		} {
			r := runCmd(t, cmdOpts{args: args})
			if r.code != 2 || !strings.Contains(r.stderr, c.want) || r.stdout != "" {
				t.Errorf("%s --analysis %q: exit %d (want 2), stderr %q (want %q)", args[0], c.name, r.code, r.stderr, c.want)
			}
			if strings.ContainsAny(r.stderr, "\x1b") {
				t.Errorf("%s --analysis %q: the control character was printed raw", args[0], c.name)
			}
		}
	}
	sameTree(t, "after the refused names", before, hashTree(t, tmp), nil)
	// A name with a digit and a letter is a name.
	if r := runCmd(t, cmdOpts{args: append(expand(baseIngest, abs, db), "--analysis", "2b")}); r.code != 0 {
		t.Errorf("--analysis 2b: exit %d: %s", r.code, r.stderr)
	}
}

// TestControlCharactersEscaped (class 9): names and input folders stored
// by another client (or an older version) with control characters print
// escaped in info and in the list of analyses of a failed lookup.
func TestControlCharactersEscaped(t *testing.T) {
	tmp := t.TempDir()
	db := copyDB(t, tmp)
	// (An UPDATE of the key-holding row trips DuckDB's index limits: the
	// row is written anew.)
	execSQL(t, db, "CREATE TEMP TABLE a AS SELECT * REPLACE ('bad' || chr(27) || '[31mred' AS name, 'in' || chr(10) || 'put' AS input_dir) FROM analyses",
		"DELETE FROM analyses", "INSERT INTO analyses SELECT * FROM a", "CHECKPOINT")
	for _, args := range [][]string{
		{"info", "--db", db},
		{"query", "--db", db, "subject_features", "--param", "analysis=nothing"},
	} {
		r := runCmd(t, cmdOpts{args: args})
		out := r.stdout + r.stderr
		if strings.Contains(out, "\x1b") || strings.Contains(out, "in\nput") {
			t.Errorf("%s printed a control character raw:\n%q", args[0], out)
		}
		if !strings.Contains(out, `bad\x1b[31mred`) {
			t.Errorf("%s: the name is not shown escaped:\n%q", args[0], out)
		}
	}
}

// readFileString is os.ReadFile for messages.
func readFileString(t *testing.T, p string) string {
	t.Helper()
	b, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}
