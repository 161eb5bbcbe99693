package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// topostate report through the command line: exit codes (0 ok, 1 failure,
// 2 usage), the file written, and the caution of the program in it.
func TestReportCommand(t *testing.T) {
	dir := t.TempDir()
	out := filepath.Join(dir, "sub", "report.html")
	for _, c := range []struct {
		name   string
		args   []string
		code   int
		stdout string
		stderr string
	}{
		{"no --out", []string{"report", "--db", warehouse}, exitUsage, "", "--out FILE is required"},
		{"unknown analysis", []string{"report", "--db", warehouse, "--out", out, "--analysis", "x"}, exitUsage, "", `no such analysis "x"`},
		{"unknown group column", []string{"report", "--db", warehouse, "--out", out, "--group", "shift"}, exitUsage, "", `no column "shift"`},
		{"bad --n-perm", []string{"report", "--db", warehouse, "--out", out, "--n-perm", "0"}, exitUsage, "", "--n-perm 0"},
		{"bad --curve-n-perm", []string{"report", "--db", warehouse, "--out", out, "--curve-n-perm", "0"}, exitUsage, "", "--curve-n-perm 0"},
		{"an argument", []string{"report", "--db", warehouse, "--out", out, "extra"}, exitUsage, "", "takes no arguments"},
		{"missing warehouse", []string{"report", "--db", filepath.Join(dir, "none.duckdb"), "--out", out}, exitFailure, "", "none.duckdb"},
		{"ok", []string{"report", "--db", warehouse, "--out", out, "--n-perm", "99", "--curve-n-perm", "99"}, exitOK, "(1 group contrast)", ""},
	} {
		t.Run(c.name, func(t *testing.T) {
			code, stdout, stderr := topostate(c.args...)
			if code != c.code || !strings.Contains(stdout, c.stdout) || !strings.Contains(stderr, c.stderr) {
				t.Errorf("exit %d (want %d)\nstdout: %s\nstderr: %s", code, c.code, stdout, stderr)
			}
		})
	}
	b, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	page := string(b)
	for _, want := range []string{caution, `<section id="dynamics">`, "<svg ", "state_dwell_by_group", "--param n_perm=99"} {
		if !strings.Contains(page, want) {
			t.Errorf("report lacks %q", want)
		}
	}
	// No temporary file is left beside it.
	if ents, _ := os.ReadDir(filepath.Dir(out)); len(ents) != 1 {
		t.Errorf("%d files beside the report", len(ents))
	}
}
