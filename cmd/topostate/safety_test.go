//go:build unix

package main

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"

	"github.com/topostate/topostate/schema"
)

// Regression tests of issue 13's classes (data safety): each runs the real
// binary and checks the exit code, the message, and that every file the
// command was not asked to write is byte-identical afterwards.

// hashTree returns the SHA-256 of every regular file under dir, by path
// relative to dir.
func hashTree(t *testing.T, dir string) map[string]string {
	t.Helper()
	out := map[string]string{}
	err := filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() || !d.Type().IsRegular() {
			return err
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		sum := sha256.Sum256(b)
		rel, _ := filepath.Rel(dir, p)
		out[rel] = hex.EncodeToString(sum[:])
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// sameTree fails unless every file of before is in after with the same
// bytes; files in after only are allowed when allowNew says so.
func sameTree(t *testing.T, what string, before, after map[string]string, allowNew func(string) bool) {
	t.Helper()
	for p, h := range before {
		if g, ok := after[p]; !ok {
			t.Errorf("%s: %s was removed", what, p)
		} else if g != h {
			t.Errorf("%s: %s was changed", what, p)
		}
	}
	for p := range after {
		if _, ok := before[p]; !ok && (allowNew == nil || !allowNew(p)) {
			t.Errorf("%s: %s was created", what, p)
		}
	}
}

// TestRaceFirstIngest: several first ingests into the same new file at
// once. One holds DuckDB's lock; the others are refused with "in use" (or
// run after it). No run may remove a file it did not create or that holds
// a committed analysis: every run that exits 0 has its analysis in the file.
func TestRaceFirstIngest(t *testing.T) {
	abs, _ := filepath.Abs(goodCohort)
	for _, sub := range []string{"ingest", "merge"} {
		t.Run(sub, func(t *testing.T) {
			tmp := t.TempDir()
			db := filepath.Join(tmp, "new.duckdb")
			var argsOf func(i int) []string
			if sub == "ingest" {
				argsOf = func(i int) []string {
					return expand(baseIngest+" --analysis run"+string(rune('a'+i)), abs, db)
				}
			} else {
				work := filepath.Join(tmp, "work")
				mustRun(t, append([]string{"stage", "plan", "--work", work, "--shards", "1"}, expand("--input {cohort} --window 5 --states 2", abs, "")...)...)
				mustRun(t, "stage", "sample", "--work", work, "--shard", "1/1", "-q")
				mustRun(t, "stage", "fit", "--work", work, "-q")
				mustRun(t, "stage", "compute", "--work", work, "--shard", "1/1", "-q")
				argsOf = func(i int) []string {
					return []string{"stage", "merge", "--work", work, "--db", db, "-q", "--analysis", "run" + string(rune('a'+i))}
				}
			}
			const n = 4
			res := make([]*background, n)
			for i := range res {
				res[i] = start(t, argsOf(i), "1500ms")
			}
			var wg sync.WaitGroup
			codes := make([]int, n)
			for i, bg := range res {
				wg.Add(1)
				go func() { defer wg.Done(); codes[i] = bg.wait().ExitCode() }()
			}
			wg.Wait()
			won := 0
			for i, bg := range res {
				name := "run" + string(rune('a'+i))
				switch codes[i] {
				case 0:
					won++
					if got := querySQL(t, db, `SELECT count(*) FROM analyses WHERE name = '`+name+`'`); got != "1" {
						t.Errorf("%s exited 0 but its analysis is not in the file (%s)", name, got)
					}
				case 1:
					if !strings.Contains(bg.stderr.String(), "in use by another process") {
						t.Errorf("%s failed without saying the file is in use:\n%s", name, bg.stderr.String())
					}
				default:
					t.Errorf("%s: exit %d\n%s", name, codes[i], bg.stderr.String())
				}
			}
			if won == 0 {
				t.Fatal("no run succeeded")
			}
			if got := querySQL(t, db, `SELECT count(*) FROM analyses`); got != strings.TrimSpace(string(rune('0'+won))) {
				t.Errorf("%s analyses in the file, %d runs reported success", got, won)
			}
		})
	}
}

// TestReadOnlyOutputsNeverClobber: query, report, plot and export refuse an
// output that is the warehouse or its .wal by any name (the path itself, a
// symbolic link, a dangling link to the .wal, a hard link) with exit 2, and
// a query that fails leaves an existing --out file as it was. Every file
// in the folder is byte-identical afterwards.
func TestReadOnlyOutputsNeverClobber(t *testing.T) {
	tmp := t.TempDir()
	db := copyDB(t, tmp)
	must := func(err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
	}
	must(os.Symlink(db, filepath.Join(tmp, "link.csv")))
	must(os.Symlink(db+".wal", filepath.Join(tmp, "wallink.csv")))
	must(os.Link(db, filepath.Join(tmp, "hard.csv")))
	must(os.Mkdir(filepath.Join(tmp, "figs"), 0o755))
	must(os.Symlink(db, filepath.Join(tmp, "figs", "betti0.png")))
	must(os.Mkdir(filepath.Join(tmp, "exp"), 0o755))
	must(os.Symlink(db, filepath.Join(tmp, "exp", "analyses.parquet")))
	must(os.WriteFile(filepath.Join(tmp, "old.csv"), []byte("earlier results\n"), 0o644))
	before := hashTree(t, tmp)
	sql := "SELECT count(*) FROM analyses"
	for _, c := range []struct {
		args []string
		code int
		want string
	}{
		{[]string{"query", "--db", db, "--sql", sql, "--out", db}, 2, "is the warehouse"},
		{[]string{"query", "--db", db, "--sql", sql, "--out", filepath.Join(tmp, "link.csv")}, 2, "is the warehouse"},
		{[]string{"query", "--db", db, "--sql", sql, "--out", filepath.Join(tmp, "wallink.csv")}, 2, "is the warehouse"},
		{[]string{"query", "--db", db, "--sql", sql, "--out", filepath.Join(tmp, "hard.csv")}, 2, "is the warehouse"},
		{[]string{"query", "--db", db, "--sql", sql, "--out", db + ".wal"}, 2, "is the warehouse"},
		{[]string{"query", "--db", db, "--sql", sql, "--format", "parquet", "--out", filepath.Join(tmp, ".", "w.duckdb")}, 2, "is the warehouse"},
		{[]string{"report", "--db", db, "--out", db}, 2, "is the warehouse"},
		{[]string{"report", "--db", db, "--out", filepath.Join(tmp, "link.csv")}, 2, "is the warehouse"},
		{[]string{"plot", "--db", db, "--out", filepath.Join(tmp, "figs")}, 2, "is the warehouse"},
		{[]string{"export", "--db", db, "--out", filepath.Join(tmp, "exp")}, 2, "is the warehouse"},
		// A failing query keeps the earlier --out file.
		{[]string{"query", "--db", db, "--sql", "SELECT no_such_column FROM analyses", "--out", filepath.Join(tmp, "old.csv")}, 1, "no_such_column"},
		{[]string{"query", "--db", db, "--sql", "SELECT 1/0::INTEGER, error('stop here')", "--format", "csv", "--out", filepath.Join(tmp, "old.csv")}, 1, "stop here"},
	} {
		r := runCmd(t, cmdOpts{args: c.args})
		if r.code != c.code || !strings.Contains(r.stderr, c.want) {
			t.Errorf("topostate %s: exit %d (want %d), stderr:\n%s", strings.Join(c.args, " "), r.code, c.code, r.stderr)
		}
	}
	sameTree(t, "after the refused outputs", before, hashTree(t, tmp), nil)
}

// TestSQLCannotWrite: on the read-only warehouse, --sql statements that
// write files are refused before they run (COPY ... TO, EXPORT DATABASE,
// ATTACH read-write, INSTALL/LOAD, persistent secrets, SET of settings,
// PREPARE/EXECUTE, CALL, EXPLAIN ANALYZE of a COPY, a COPY after a
// harmless statement), and nothing appears in the folder. Reading the
// user's own CSV and Parquet files, temporary macros, SET VARIABLE and a
// read-only ATTACH keep working.
func TestSQLCannotWrite(t *testing.T) {
	tmp := t.TempDir()
	db := copyDB(t, tmp)
	other := filepath.Join(tmp, "other.duckdb")
	copyFile(t, baselineDB, other)
	cov := filepath.Join(tmp, "cov.csv")
	if err := os.WriteFile(cov, []byte("subject_id,score\nsub-01,1.5\nsub-02,2.5\nsub-03,4\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	pq := filepath.Join(tmp, "cov.parquet")
	if r := runCmd(t, cmdOpts{args: []string{"query", "--db", db, "--sql", "SELECT * FROM read_csv('" + cov + "')", "--format", "parquet", "--out", pq}}); r.code != 0 {
		t.Fatalf("writing the covariate Parquet file: exit %d\n%s", r.code, r.stderr)
	}
	before := hashTree(t, tmp)
	out := func(name string) string { return filepath.Join(tmp, name) }
	for _, s := range []string{
		"COPY (SELECT 1) TO '" + out("x.csv") + "'",
		"COPY analyses TO '" + out("x.parquet") + "' (FORMAT parquet)",
		"EXPORT DATABASE '" + out("dump") + "'",
		"ATTACH '" + out("new.duckdb") + "' AS n (READ_WRITE)",
		"ATTACH '" + out("new.duckdb") + "' AS n",
		"INSTALL json",
		"LOAD parquet",
		"SET temp_directory = '" + out("tmpdir") + "'",
		"SET enable_external_access = false",
		"SET lock_configuration = false",
		"RESET lock_configuration",
		"PRAGMA enable_profiling",
		"CREATE PERSISTENT SECRET s (TYPE S3, KEY_ID 'a', SECRET 'b')",
		"PREPARE p AS COPY (SELECT 1) TO '" + out("p.csv") + "'",
		"CALL checkpoint()",
		"CHECKPOINT",
		"EXPLAIN ANALYZE COPY (SELECT 1) TO '" + out("e.csv") + "'",
		"SELECT 1; COPY (SELECT 2) TO '" + out("y.csv") + "'",
		"SELECT 1 /* ; */; -- ;\n COPY (SELECT 2) TO '" + out("z.csv") + "'",
		"SELECT E'\\'; COPY (SELECT 3) TO ''" + out("q.csv") + "''; --'",
		"CREATE TABLE main.t AS SELECT 1",
		"CREATE MACRO m(a) AS a",
	} {
		r := runCmd(t, cmdOpts{args: []string{"query", "--db", db, "--sql", s}})
		if r.code == 0 || r.stdout != "" {
			t.Errorf("--sql %q: exit %d, stdout %q", s, r.code, r.stdout)
		}
		if strings.Contains(r.stderr, "panic") {
			t.Errorf("--sql %q panicked:\n%s", s, r.stderr)
		}
	}
	sameTree(t, "after the refused statements", before, hashTree(t, tmp), nil)

	for _, c := range []struct{ sql, want string }{
		{"SELECT sum(score) FROM read_csv('" + cov + "')", "8"},
		{"SELECT sum(score) FROM read_parquet('" + pq + "')", "8"},
		{"SELECT count(*) FROM subjects s JOIN read_csv('" + cov + "') c USING (subject_id)", "3"},
		{"CREATE TEMP MACRO twice(a) AS 2 * a; SET VARIABLE k = 4; SELECT twice(getvariable('k'))", "8"},
		{"ATTACH '" + other + "' AS o (READ_ONLY); SELECT count(*) FROM o.analyses", "1"},
		{"WITH x AS (SELECT 5 AS v) SELECT v FROM x", "5"},
	} {
		r := runCmd(t, cmdOpts{args: []string{"query", "--db", db, "--format", "csv", "--sql", c.sql}})
		lines := strings.Split(strings.TrimSpace(r.stdout), "\n")
		if r.code != 0 || len(lines) != 2 || strings.TrimSpace(lines[1]) != c.want {
			t.Errorf("--sql %q: exit %d, stdout %q (want %s), stderr:\n%s", c.sql, r.code, r.stdout, c.want, r.stderr)
		}
	}
	sameTree(t, "after the allowed statements", before, hashTree(t, tmp), nil)
}

// execSQL runs statements on a warehouse opened for writing, as another
// DuckDB client of the user would.
func execSQL(t *testing.T, path string, stmts ...string) {
	t.Helper()
	db, err := schema.Open(path, false, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	for _, s := range stmts {
		if _, err := db.Exec(s); err != nil {
			t.Fatalf("%s: %v", s, err)
		}
	}
}

// TestDurableCommit: with the checkpoint failing after the COMMIT (as a
// full disk makes it fail; a test hook, as the crash tests use), ingest
// must not report success: exit 1, nothing on standard output, and a
// message saying where the analysis is. A later command completes it.
func TestDurableCommit(t *testing.T) {
	tmp := t.TempDir()
	db := copyDB(t, tmp)
	abs, _ := filepath.Abs(goodCohort)
	r := runCmd(t, cmdOpts{args: expand(baseIngest+" --analysis second", abs, db), env: []string{"TOPOSTATE_TEST_FAIL_CHECKPOINT=1"}})
	if r.code != 1 || r.stdout != "" || !strings.Contains(r.stderr, "not written into the database file") || !strings.Contains(r.stderr, ".wal") {
		t.Errorf("ingest with a failing checkpoint: exit %d\nstdout: %s\nstderr: %s", r.code, r.stdout, r.stderr)
	}
	if r := runCmd(t, cmdOpts{args: []string{"upgrade", "--db", db}}); r.code != 0 {
		t.Errorf("upgrade after the failed checkpoint: exit %d: %s", r.code, r.stderr)
	}
	if got := querySQL(t, db, `SELECT count(*) FROM analyses WHERE name = 'second'`); got != "1" {
		t.Errorf("the committed analysis is not in the file after completing: %s", got)
	}
	if _, err := os.Stat(db + ".wal"); err == nil {
		t.Errorf("%s.wal left after completing", db)
	}
}

// TestDropOwnTablesOnly: drop deletes rows only from topostate's own
// tables (the DDL's list): a user's table with an analysis_id column keeps
// its rows, and a user's view with that column does not stop it.
func TestDropOwnTablesOnly(t *testing.T) {
	tmp := t.TempDir()
	db := copyDB(t, tmp)
	execSQL(t, db,
		`CREATE TABLE my_notes (analysis_id INTEGER, note VARCHAR)`,
		`INSERT INTO my_notes VALUES (1, 'keep me')`,
		`CREATE VIEW my_view AS SELECT analysis_id, name FROM analyses`)
	r := runCmd(t, cmdOpts{args: []string{"drop", "--db", db, "--analysis", "baseline", "--yes"}})
	if r.code != 0 {
		t.Fatalf("drop beside a user's view and table: exit %d: %s", r.code, r.stderr)
	}
	if got := querySQL(t, db, `SELECT count(*) FROM my_notes WHERE analysis_id = 1`); got != "1" {
		t.Errorf("drop deleted rows of a user's table (%s left)", got)
	}
	if got := querySQL(t, db, `SELECT count(*) FROM analyses`); got != "0" {
		t.Errorf("%s analyses after the drop", got)
	}
	if got := querySQL(t, db, `SELECT count(*) FROM my_view`); got != "0" {
		t.Errorf("the user's view reads %s rows", got)
	}
}

// TestLayout1 uses a layout-1 file (the baseline with its recorded layout
// set back to 1; main's layout-1 DDL is the same as these tables, see
// schema/testdata/layout1.sql and schema's TestUpgradeLayout1 for added
// tables and columns). Read-only commands refuse it with what to do and
// leave it byte-identical; upgrade, and any writing command, upgrade it.
func TestLayout1(t *testing.T) {
	tmp := t.TempDir()
	db := copyDB(t, tmp)
	execSQL(t, db, `UPDATE schema_version SET version = 1`, `CHECKPOINT`)
	before := hashTree(t, tmp)
	for _, args := range [][]string{
		{"info", "--db", db},
		{"query", "--db", db, "--sql", "SELECT 1"},
		{"export", "--db", db, "--out", filepath.Join(tmp, "x")},
		{"report", "--db", db, "--out", filepath.Join(tmp, "r.html")},
		{"plot", "--db", db, "--out", filepath.Join(tmp, "p")},
	} {
		r := runCmd(t, cmdOpts{args: args})
		if r.code != 1 || !strings.Contains(r.stderr, "topostate upgrade --db") || strings.Contains(r.stderr, "Binder Error") {
			t.Errorf("%s on a layout-1 file: exit %d: %s", args[0], r.code, r.stderr)
		}
	}
	sameTree(t, "read-only commands on a layout-1 file", before, hashTree(t, tmp), nil)
	abs, _ := filepath.Abs(goodCohort)
	r := runCmd(t, cmdOpts{args: expand(baseIngest+" --analysis second", abs, db)})
	if r.code != 0 {
		t.Fatalf("ingest into a layout-1 file: exit %d: %s", r.code, r.stderr)
	}
	if got := querySQL(t, db, `SELECT max(version) FROM schema_version`); got != strconv.Itoa(schema.Version) {
		t.Errorf("layout %s after an ingest, want %d", got, schema.Version)
	}
	r = runCmd(t, cmdOpts{args: []string{"upgrade", "--db", db}})
	if r.code != 0 || !strings.Contains(r.stdout, "nothing to do") {
		t.Errorf("upgrade of a file of the current layout: exit %d: %s%s", r.code, r.stdout, r.stderr)
	}
	db2 := filepath.Join(tmp, "second.duckdb")
	copyFile(t, baselineDB, db2)
	execSQL(t, db2, `UPDATE schema_version SET version = 1`, `CHECKPOINT`)
	r = runCmd(t, cmdOpts{args: []string{"upgrade", "--db", db2}})
	if r.code != 0 || !strings.Contains(r.stdout, fmt.Sprintf("from layout version 1 to %d", schema.Version)) {
		t.Errorf("upgrade: exit %d: %s%s", r.code, r.stdout, r.stderr)
	}
	if r := runCmd(t, cmdOpts{args: []string{"info", "--db", db2}}); r.code != 0 {
		t.Errorf("info after upgrade: exit %d: %s", r.code, r.stderr)
	}
}
