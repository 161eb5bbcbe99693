package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// ingest --states-from with --states-db: the states of the test warehouse's
// analysis placed on the same cohort in a new file; mismatches and misuse
// exit 2 and leave no new file behind.
func TestIngestStatesFromCommand(t *testing.T) {
	cohort := filepath.Join(filepath.Dir(warehouse), "cohort")
	dir := t.TempDir()
	for _, c := range []struct {
		name   string
		args   []string
		code   int
		stdout string
		stderr string
	}{
		{"other file", []string{"--window", "20", "--grid", "-0.5:1:16"}, 0, `reused from analysis "cmdtest" (id 1)`, ""},
		{"window differs", []string{"--window", "25"}, 2, "", "window is 25 here but 20"},
		{"fitting option", []string{"--window", "20", "--states", "3"}, 2, "", "--states fits states"},
		{"unknown analysis", []string{"--window", "20", "--states-from", "nope"}, 2, "", `no such analysis`},
		{"missing file", []string{"--window", "20", "--states-db", filepath.Join(dir, "none.duckdb")}, 2, "", "--states-db"},
	} {
		t.Run(c.name, func(t *testing.T) {
			db := filepath.Join(dir, strings.ReplaceAll(c.name, " ", "-")+".duckdb")
			args := append([]string{"ingest", "-q", "--input", cohort, "--db", db, "--states-from", "cmdtest", "--states-db", warehouse}, c.args...)
			code, stdout, stderr := topostate(args...)
			if code != c.code || !strings.Contains(stdout, c.stdout) || !strings.Contains(stderr, c.stderr) {
				t.Fatalf("exit %d (want %d)\nstdout: %s\nstderr: %s", code, c.code, stdout, stderr)
			}
			if _, err := os.Stat(db); (err == nil) != (c.code == 0) {
				t.Errorf("exit %d, file %s: %v", code, db, err)
			}
		})
	}
	code, _, stderr := topostate("ingest", "-q", "--input", cohort, "--db", filepath.Join(dir, "x.duckdb"), "--states-db", warehouse)
	if code != 2 || !strings.Contains(stderr, "give --states-from NAME too") {
		t.Errorf("--states-db alone: exit %d, %s", code, stderr)
	}
}
