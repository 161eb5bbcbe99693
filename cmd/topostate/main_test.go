package main

import (
	"bytes"
	"context"
	"database/sql"
	"fmt"
	"io"
	"io/fs"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"sort"
	"strings"
	"testing"
	"time"

	"github.com/topostate/topostate/schema"
)

// The tests in this package run the real topostate binary as a
// subprocess, as a user or a script would: exit codes, standard output
// and standard error are what they see. TestMain builds it once.
var (
	testTmp    string // removed after the tests
	bin        string // the built binary
	baselineDB string // a warehouse holding one analysis, "baseline", of testdata/good/cohort; copy before use
	goodCohort = filepath.Join("..", "..", "testdata", "good", "cohort")
)

// baseIngest is the ingest call every corpus case starts from; the good
// cohort has 3 series of 12 time points, so 3 x 8 = 24 windows.
const baseIngest = "ingest --input {cohort} --db {db} --window 5 --states 2 -q"

func TestMain(m *testing.M) {
	os.Exit(testMain(m))
}

func testMain(m *testing.M) int {
	if os.Getenv(asCommandEnv) != "" { // this process is the topostate command (stages_test.go)
		return run(append([]string{"topostate"}, os.Args[1:]...), os.Stdin, os.Stdout, os.Stderr)
	}
	if path := os.Getenv(holdLockEnv); path != "" {
		return holdLock(path) // this process is a lock holder (query_test.go)
	}
	tmp, err := os.MkdirTemp("", "topostate-cli-test-")
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	defer os.RemoveAll(tmp)
	testTmp = tmp
	if err := build(tmp); err != nil { // query_test.go's warehouse, in tmp/cohort and tmp/w.duckdb
		fmt.Fprintln(os.Stderr, "building the test warehouse:", err)
		return 1
	}
	bin = filepath.Join(tmp, "topostate")
	goTool := filepath.Join(runtime.GOROOT(), "bin", "go")
	if _, err := os.Stat(goTool); err != nil {
		goTool = "go"
	}
	build := exec.Command(goTool, "build", "-o", bin, ".")
	build.Stdout, build.Stderr = os.Stderr, os.Stderr
	if err := build.Run(); err != nil {
		fmt.Fprintln(os.Stderr, "building topostate:", err)
		return 1
	}
	baselineDB = filepath.Join(tmp, "baseline.duckdb")
	abs, _ := filepath.Abs(goodCohort)
	r := runCmd(nil, cmdOpts{args: expand(baseIngest+" --analysis baseline", abs, baselineDB)})
	if r.code != 0 {
		fmt.Fprintf(os.Stderr, "baseline ingest failed (exit %d): %s\n", r.code, r.stderr)
		return 1
	}
	return m.Run()
}

// expand splits a command template at spaces and fills {cohort}, {db} and
// {base} (baseIngest).
func expand(tmpl, cohort, db string) []string {
	tmpl = strings.ReplaceAll(tmpl, "{base}", baseIngest)
	var args []string
	for _, f := range strings.Fields(tmpl) {
		f = strings.ReplaceAll(f, "{cohort}", cohort)
		f = strings.ReplaceAll(f, "{db}", db)
		args = append(args, f)
	}
	return args
}

type cmdOpts struct {
	args    []string
	stdin   string
	env     []string      // added to the environment
	timeout time.Duration // default 2 minutes: a hang fails instead of blocking the suite
}

type result struct {
	code           int
	stdout, stderr string
	maxRSSKiB      int64
	elapsed        time.Duration
}

// runCmd runs the binary to completion. t may be nil (TestMain).
func runCmd(t *testing.T, o cmdOpts) result {
	if t != nil {
		t.Helper()
	}
	if o.timeout == 0 {
		o.timeout = 2 * time.Minute
	}
	ctx, cancel := context.WithTimeout(context.Background(), o.timeout)
	defer cancel()
	cmd := exec.CommandContext(ctx, bin, o.args...)
	cmd.Env = append(os.Environ(), o.env...)
	cmd.Stdin = strings.NewReader(o.stdin)
	var out, errb bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errb
	start := time.Now()
	err := cmd.Run()
	r := result{stdout: out.String(), stderr: errb.String(), elapsed: time.Since(start)}
	if ctx.Err() != nil {
		if t != nil {
			t.Fatalf("topostate %s did not finish within %v (a hang); stderr: %s", strings.Join(o.args, " "), o.timeout, r.stderr)
		}
		r.code = -1
		return r
	}
	if cmd.ProcessState == nil {
		if t != nil {
			t.Fatalf("topostate %s: %v", strings.Join(o.args, " "), err)
		}
		r.code = -1
		return r
	}
	r.code = cmd.ProcessState.ExitCode()
	r.maxRSSKiB = maxRSSKiB(cmd.ProcessState)
	return r
}

// copyDB copies the baseline warehouse to a fresh path in dir.
func copyDB(t *testing.T, dir string) string {
	t.Helper()
	p := filepath.Join(dir, "w.duckdb")
	copyFile(t, baselineDB, p)
	return p
}

func copyFile(t *testing.T, from, to string) {
	t.Helper()
	b, err := os.ReadFile(from)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(to, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

// copyTree copies a folder of regular files (the committed cohorts hold
// nothing else).
func copyTree(t *testing.T, from, to string) {
	t.Helper()
	err := filepath.WalkDir(from, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(from, p)
		dst := filepath.Join(to, rel)
		if d.IsDir() {
			return os.MkdirAll(dst, 0o755)
		}
		in, err := os.Open(p)
		if err != nil {
			return err
		}
		defer in.Close()
		out, err := os.Create(dst)
		if err != nil {
			return err
		}
		if _, err := io.Copy(out, in); err != nil {
			out.Close()
			return err
		}
		return out.Close()
	})
	if err != nil {
		t.Fatal(err)
	}
}

// snapshot reads every table of a warehouse through a read-only handle:
// its columns and all its rows, sorted, one string per table. When only is
// not 0, tables with an analysis_id column keep only that analysis's rows.
// Two snapshots are equal when the contents are equal; the file's bytes
// may differ after DuckDB has opened it, so bytes are not compared.
func snapshot(t *testing.T, path string, only int) map[string]string {
	t.Helper()
	db, err := schema.Open(path, true, nil)
	if err != nil {
		t.Fatalf("read-only open of %s: %v", path, err)
	}
	defer db.Close()
	tables := queryStrings(t, db, `SELECT table_name FROM information_schema.tables WHERE table_schema = 'main' ORDER BY 1`)
	snap := map[string]string{}
	for _, tb := range tables {
		cols := queryStrings(t, db, `SELECT column_name || ' ' || data_type FROM information_schema.columns
			WHERE table_schema = 'main' AND table_name = ? ORDER BY ordinal_position`, tb)
		q := "SELECT * FROM " + schema.Quote(tb)
		if only != 0 && hasAnalysisID(cols) {
			q += fmt.Sprintf(" WHERE analysis_id = %d", only)
		}
		rows, err := db.Query(q + " ORDER BY ALL")
		if err != nil {
			t.Fatalf("%s: %v", q, err)
		}
		var sb strings.Builder
		if only == 0 {
			sb.WriteString(strings.Join(cols, ", ") + "\n")
		}
		vals := make([]any, len(cols))
		ptrs := make([]any, len(cols))
		for i := range vals {
			ptrs[i] = &vals[i]
		}
		for rows.Next() {
			if err := rows.Scan(ptrs...); err != nil {
				t.Fatal(err)
			}
			for i, v := range vals {
				if i > 0 {
					sb.WriteByte('\t')
				}
				fmt.Fprintf(&sb, "%v", v)
			}
			sb.WriteByte('\n')
		}
		if err := rows.Err(); err != nil {
			t.Fatal(err)
		}
		rows.Close()
		snap[tb] = sb.String()
	}
	return snap
}

func hasAnalysisID(cols []string) bool {
	for _, c := range cols {
		if strings.HasPrefix(c, "analysis_id ") {
			return true
		}
	}
	return false
}

func queryStrings(t *testing.T, db *sql.DB, q string, args ...any) []string {
	t.Helper()
	rows, err := db.Query(q, args...)
	if err != nil {
		t.Fatalf("%s: %v", q, err)
	}
	defer rows.Close()
	var out []string
	for rows.Next() {
		var s string
		if err := rows.Scan(&s); err != nil {
			t.Fatal(err)
		}
		out = append(out, s)
	}
	return out
}

// openSnapshotHandle opens a read-only handle and holds the file open
// until closed.
func openSnapshotHandle(t *testing.T, path string) *sql.DB {
	t.Helper()
	db, err := schema.Open(path, true, nil)
	if err != nil {
		t.Fatalf("read-only open of %s: %v", path, err)
	}
	return db
}

// querySQL runs one query read-only and returns its single value as text.
func querySQL(t *testing.T, path, q string) string {
	t.Helper()
	db, err := schema.Open(path, true, nil)
	if err != nil {
		t.Fatalf("read-only open of %s: %v", path, err)
	}
	defer db.Close()
	var v any
	if err := db.QueryRow(q).Scan(&v); err != nil {
		t.Fatalf("%s: %v", q, err)
	}
	return fmt.Sprintf("%v", v)
}

// sameSnapshot reports the tables whose contents differ.
func sameSnapshot(t *testing.T, what string, want, got map[string]string) {
	t.Helper()
	var names []string
	for n := range want {
		names = append(names, n)
	}
	for n := range got {
		if _, ok := want[n]; !ok {
			names = append(names, n)
		}
	}
	sort.Strings(names)
	for _, n := range names {
		w, g := want[n], got[n]
		if w == g {
			continue
		}
		t.Errorf("%s: table %s changed: %d lines before, %d after\n-want %.300q\n+got  %.300q",
			what, n, strings.Count(w, "\n"), strings.Count(g, "\n"), w, g)
	}
}

// orphanRows counts rows whose analysis_id names no committed analysis,
// over every table that has the column: a partial analysis would show here.
func orphanRows(t *testing.T, path string) int {
	t.Helper()
	db, err := schema.Open(path, true, nil)
	if err != nil {
		t.Fatalf("read-only open of %s: %v", path, err)
	}
	defer db.Close()
	tables := queryStrings(t, db, `SELECT table_name FROM information_schema.columns
		WHERE table_schema = 'main' AND column_name = 'analysis_id' AND table_name NOT IN ('analyses', 'dropped_analyses')`)
	total := 0
	for _, tb := range tables {
		var n int
		q := fmt.Sprintf(`SELECT count(*) FROM %s WHERE analysis_id NOT IN (SELECT analysis_id FROM analyses)`, schema.Quote(tb))
		if err := db.QueryRow(q).Scan(&n); err != nil {
			t.Fatalf("%s: %v", q, err)
		}
		if n > 0 {
			t.Errorf("table %s has %d rows of no committed analysis", tb, n)
		}
		total += n
	}
	return total
}
