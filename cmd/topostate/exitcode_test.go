//go:build unix

package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestExitCodesAndStreams checks the contract scripts rely on: exit code 0
// on success, 1 when the run fails, 2 when the command is called wrongly
// (Go's flag package exits with 2 on a bad flag, and grep and diff use 2
// for trouble: common practice, no formal source); results on standard
// output, messages on standard error, never mixed.
func TestExitCodesAndStreams(t *testing.T) {
	tmp := t.TempDir()
	abs, _ := filepath.Abs(goodCohort)
	newDB := filepath.Join(tmp, "new.duckdb")
	tests := []struct {
		name      string
		args      []string
		exit      int
		stdout    string // substring; "" means standard output must be empty
		stderr    string // substring; "" means standard error must be empty
		noFileArg string // this path must not exist afterwards
	}{
		{"help", []string{"--help"}, 0, "ingest", "", ""},
		{"command help", []string{"drop", "--help"}, 0, "--analysis", "", ""},
		{"version", []string{"--version"}, 0, "topostate version", "", ""},
		{"info", []string{"info", "--db", baselineDB}, 0, "baseline", "", ""},
		{"ingest", expand(baseIngest, abs, newDB), 0, "written to " + newDB, "", ""},
		{"unknown command", []string{"frobnicate"}, 2, "", `no command "frobnicate"`, ""},
		{"unknown flag", []string{"info", "--frob"}, 2, "", "see 'topostate info --help'", ""},
		{"unknown global flag", []string{"--frob"}, 2, "", "see 'topostate --help'", ""},
		{"required flag missing", []string{"simulate"}, 2, "", "--out FOLDER is required", ""},
		{"no input", []string{"ingest", "--db", filepath.Join(tmp, "x.duckdb")}, 2, "", "--input is required", filepath.Join(tmp, "x.duckdb")},
		{"info on a missing file", []string{"info", "--db", filepath.Join(tmp, "none.duckdb")}, 1, "", "none.duckdb", filepath.Join(tmp, "none.duckdb")},
		{"bad cohort", expand(baseIngest, filepath.Join(abs, "..", "..", "bad", "series-ragged-row", "cohort"), filepath.Join(tmp, "b.duckdb")),
			1, "", ":6: row has a different number of cells", filepath.Join(tmp, "b.duckdb")},
		// Refused after the file was opened (and so created): it is removed again.
		{"usage error after opening a new file", expand(baseIngest+" --states 10", abs, filepath.Join(tmp, "c.duckdb")),
			2, "", "--states 10 is more than the 6 windows", filepath.Join(tmp, "c.duckdb")},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r := runCmd(t, cmdOpts{args: tc.args})
			if r.code != tc.exit {
				t.Errorf("exit %d, want %d\nstdout: %s\nstderr: %s", r.code, tc.exit, r.stdout, r.stderr)
			}
			check := func(stream, got, want string) {
				switch {
				case want == "" && got != "":
					t.Errorf("standard %s should be empty:\n%s", stream, got)
				case want != "" && !strings.Contains(got, want):
					t.Errorf("standard %s lacks %q:\n%s", stream, want, got)
				}
			}
			check("output", r.stdout, tc.stdout)
			check("error", r.stderr, tc.stderr)
			if tc.noFileArg != "" {
				for _, p := range []string{tc.noFileArg, tc.noFileArg + ".wal"} {
					if _, err := os.Stat(p); err == nil {
						t.Errorf("%s exists after a failed run", p)
					}
				}
			}
		})
	}
}
