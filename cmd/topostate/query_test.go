package main

import (
	"bufio"
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/ingest"
	"github.com/topostate/topostate/schema"
)

const holdLockEnv = "TOPOSTATE_CMD_TEST_HOLD_LOCK"

var warehouse string

// The package's TestMain (main_test.go) calls build to make one small
// warehouse from an invented cohort (groups A and B, covariates age and
// score) for the command tests. Started with holdLockEnv set, the test
// binary instead runs holdLock: it holds a write lock on a file (see
// TestQueryWhileAnotherProcessWrites).
func holdLock(path string) int {
	db, err := schema.Open(path, false, nil)
	if err != nil {
		fmt.Println("error:", err)
		return 1
	}
	fmt.Println("locked")
	io.Copy(io.Discard, os.Stdin)
	db.Close()
	return 0
}

func build(dir string) error {
	cohort := filepath.Join(dir, "cohort")
	spec := compute.CohortSpec{Subjects: 10, Regions: 8, Timepoints: 140, States: 2, TR: 2,
		Stickiness: 0.9, GroupEffect: 0.05, Offset: 500, Seed: 3}
	if _, err := writeSynthetic(cohort, spec, map[string]string{"A": "A", "B": "B"}, "score"); err != nil {
		return err
	}
	warehouse = filepath.Join(dir, "w.duckdb")
	o := ingest.Defaults()
	o.Input, o.Window, o.States, o.Restarts, o.Grid, o.Analysis = cohort, 20, 2, 2, "-0.5:1:16", "cmdtest"
	_, err := ingest.IntoFile(context.Background(), warehouse, o, nil)
	return err
}

// topostate runs the program with args and returns its exit code and
// outputs.
func topostate(args ...string) (code int, stdout, stderr string) {
	var out, errb bytes.Buffer
	code = run(append([]string{"topostate"}, args...), strings.NewReader(""), &out, &errb)
	return code, out.String(), errb.String()
}

func TestQueryCommand(t *testing.T) {
	out := filepath.Join(t.TempDir(), "r.parquet")
	for _, c := range []struct {
		name   string
		args   []string
		code   int
		stdout string // substring expected on standard output
		stderr string // substring expected on standard error
	}{
		{"list", []string{"query", "--list"}, 0, "state_dwell_by_group", ""},
		{"macros", []string{"query", "--macros"}, 0, "CREATE OR REPLACE TEMP MACRO bh_adjust", ""},
		{"show", []string{"query", "--show", "transitions_by_group"}, 0, "-- name: transitions_by_group", ""},
		{"bundled, options after NAME", []string{"query", "--db", warehouse, "state_dwell_by_group", "--param", "group_a=B", "--param", "group_b=A", "--format", "csv"}, 0, "state,measure,group_a,n_a", ""},
		{"parameters before and after NAME", []string{"query", "--param", "group_a=B", "--db", warehouse, "transitions_by_group", "--param", "group_b=A", "-f", "tsv"}, 0, "group\tfrom_state", ""},
		{"own SQL with a parameter", []string{"query", "--db", warehouse, "--sql", "SELECT getvariable('who') AS who, ks_pvalue_exact(3, 3, 1.0) AS p", "--param", "who=a,b", "--format", "json"}, 0, `"who": "a,b", "p": 0.1`, ""},
		{"parquet needs --out", []string{"query", "--db", warehouse, "subject_features", "--format", "parquet"}, 2, "", "needs --out"},
		{"parquet", []string{"query", "--db", warehouse, "subject_features", "--format", "parquet", "--out", out}, 0, "", "wrote 10 rows to " + out},
		{"missing parameter", []string{"query", "--db", warehouse, "state_dwell_by_group", "--param", "group_a=B"}, 2, "", "parameter group_b: required"},
		{"unknown query", []string{"query", "--db", warehouse, "dwell"}, 2, "", "no bundled query"},
		{"two sources", []string{"query", "--db", warehouse, "subject_features", "--sql", "SELECT 1"}, 2, "", "give one bundled query NAME"},
		{"bad param syntax", []string{"query", "--db", warehouse, "subject_features", "--param", "analysis"}, 2, "", "want KEY=VALUE"},
		{"no such file", []string{"query", "--db", filepath.Join(t.TempDir(), "none.duckdb"), "subject_features"}, 1, "", "no such file"},
		{"SQL error", []string{"query", "--db", warehouse, "--sql", "SELECT * FROM nowhere"}, 1, "", "nowhere"},
		{"function error", []string{"query", "--db", warehouse, "--sql", "SELECT ks_pvalue_exact(0, 1, 0.5)"}, 1, "", "sample sizes must be >= 1"},
	} {
		t.Run(c.name, func(t *testing.T) {
			code, stdout, stderr := topostate(c.args...)
			if code != c.code || !strings.Contains(stdout, c.stdout) || !strings.Contains(stderr, c.stderr) {
				t.Errorf("exit %d (want %d)\nstdout: %s\nstderr: %s", code, c.code, stdout, stderr)
			}
		})
	}
	// The CSV of the group query reads back with one row per state and
	// measure, every subject of group A or B counted.
	_, stdout, _ := topostate("query", "--db", warehouse, "state_dwell_by_group", "--param", "group_a=B", "--param", "group_b=A", "-f", "csv")
	recs, err := csv.NewReader(strings.NewReader(stdout)).ReadAll()
	if err != nil || len(recs) != 5 {
		t.Fatalf("%d records, %v:\n%s", len(recs), err, stdout)
	}
	// A file query with a header declaring its parameter and default.
	file := filepath.Join(t.TempDir(), "mine.sql")
	os.WriteFile(file, []byte("-- name: mine\n-- description: test\n-- param: k integer = 4\nSELECT getvariable('k') * 2 AS twice;\n"), 0o644)
	code, stdout, stderr := topostate("query", "--db", warehouse, "--file", file, "-f", "json")
	var got []map[string]any
	if code != 0 || json.Unmarshal([]byte(stdout), &got) != nil || len(got) != 1 || got[0]["twice"] != 8.0 {
		t.Errorf("file query: exit %d, %s %s", code, stdout, stderr)
	}
}

func TestExportCommand(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "export")
	code, stdout, stderr := topostate("export", "--db", warehouse, "--out", dir, "--format", "csv", "--tables", "state_metrics,subjects", "--analysis", "cmdtest")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	for _, f := range []string{"state_metrics.csv", "subjects.csv", "data_dictionary.csv"} {
		if _, err := os.Stat(filepath.Join(dir, f)); err != nil || !strings.Contains(stdout, f) {
			t.Errorf("%s: %v\n%s", f, err, stdout)
		}
	}
	b, _ := os.ReadFile(filepath.Join(dir, "data_dictionary.csv"))
	if !strings.Contains(string(b), "state_metrics,mean_dwell_seconds,DOUBLE,true,") || !strings.Contains(string(b), ",seconds\n") {
		t.Errorf("dictionary:\n%s", b)
	}
	for _, c := range []struct {
		args []string
		code int
		want string
	}{
		{[]string{"export", "--db", warehouse, "--out", dir, "--tables", "nope"}, 2, `no table "nope"`},
		{[]string{"export", "--db", warehouse, "--out", dir, "--format", "xlsx"}, 2, "want parquet or csv"},
		{[]string{"export", "--db", warehouse, "--out", dir, "--analysis", "other"}, 2, "no such analysis"},
	} {
		code, _, stderr := topostate(c.args...)
		if code != c.code || !strings.Contains(stderr, c.want) {
			t.Errorf("%v: exit %d, %s", c.args, code, stderr)
		}
	}
}

// query on a file that another process is writing: exit 1 at once with a
// message saying so (DuckDB's lock is per process, hence a real second
// process: this test binary started again).
func TestQueryWhileAnotherProcessWrites(t *testing.T) {
	path := filepath.Join(t.TempDir(), "busy.duckdb")
	b, err := os.ReadFile(warehouse)
	if err != nil {
		t.Fatal(err)
	}
	os.WriteFile(path, b, 0o644)
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	cmd.Env = append(os.Environ(), holdLockEnv+"="+path)
	stdin, _ := cmd.StdinPipe()
	stdoutPipe, _ := cmd.StdoutPipe()
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	defer func() {
		stdin.Close()
		cmd.Wait()
	}()
	if line, _ := bufio.NewReader(stdoutPipe).ReadString('\n'); strings.TrimSpace(line) != "locked" {
		t.Fatalf("writer process: %q", line)
	}
	code, _, stderr := topostate("query", "--db", path, "subject_features")
	if code != 1 || !strings.Contains(stderr, "in use by another process") {
		t.Errorf("exit %d: %s", code, stderr)
	}
	code, _, stderr = topostate("export", "--db", path, "--out", t.TempDir())
	if code != 1 || !strings.Contains(stderr, "in use by another process") {
		t.Errorf("export: exit %d: %s", code, stderr)
	}
}
