package main

import (
	"bytes"
	"database/sql"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	"github.com/topostate/topostate/compute"
)

// asCommandEnv makes the test binary act as the topostate command (see
// TestMain), so the stages run as separate processes without a second build.
const asCommandEnv = "TOPOSTATE_CMD_TEST_AS_COMMAND"

// command runs topostate args as a separate process.
func command(args ...string) (code int, stdout, stderr string) {
	cmd := exec.Command(os.Args[0], args...)
	cmd.Env = append(os.Environ(), asCommandEnv+"=1")
	var out, errb bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errb
	err := cmd.Run()
	code = cmd.ProcessState.ExitCode()
	if err != nil && code == 0 {
		code = -1
	}
	return code, out.String(), errb.String()
}

// shards runs one stage for shards 1..n as n processes at once, as a
// scheduler's array job would.
func shards(t *testing.T, n int, args ...string) {
	t.Helper()
	var wg sync.WaitGroup
	fails := make([]string, n)
	for i := 1; i <= n; i++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			a := append(append([]string{}, args...), "--shard", fmt.Sprintf("%d/%d", i, n), "--workers", "1")
			if code, _, stderr := command(a...); code != 0 {
				fails[i-1] = fmt.Sprintf("%v: exit %d: %s", a, code, stderr)
			}
		}()
	}
	wg.Wait()
	for _, f := range fails {
		if f != "" {
			t.Fatal(f)
		}
	}
}

func mustRun(t *testing.T, args ...string) string {
	t.Helper()
	code, stdout, stderr := command(args...)
	if code != 0 {
		t.Fatalf("%v: exit %d\n%s%s", args, code, stdout, stderr)
	}
	return stdout
}

// sameAnalysis compares every table of analysis 1 in two warehouse files
// row for row (EXCEPT ALL both ways, so duplicates count), all columns but
// analyses.created_at; each table in nonEmpty must have rows.
func sameAnalysis(t *testing.T, a, b string, nonEmpty ...string) {
	t.Helper()
	db, err := sql.Open("duckdb", "")
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if _, err := db.Exec(fmt.Sprintf(`ATTACH '%s' AS a (READ_ONLY); ATTACH '%s' AS b (READ_ONLY)`, a, b)); err != nil {
		t.Fatal(err)
	}
	for _, table := range []string{"analyses", "inputs", "excluded_inputs", "subjects", "regions", "elbow", "state_centroids",
		"state_sequence", "state_metrics", "subject_dynamics", "transitions", "betti_curves", "filtration_events", "state_networks",
		"surrogate_tests", "covariates", "core_betti_curves"} {
		cols := "*"
		if table == "analyses" {
			cols = "* EXCLUDE (created_at)"
		}
		q := fmt.Sprintf(`SELECT (SELECT count(*) FROM (SELECT %[2]s FROM a.%[1]s EXCEPT ALL SELECT %[2]s FROM b.%[1]s))
			+ (SELECT count(*) FROM (SELECT %[2]s FROM b.%[1]s EXCEPT ALL SELECT %[2]s FROM a.%[1]s)),
			(SELECT count(*) FROM a.%[1]s), (SELECT count(*) FROM b.%[1]s)`, table, cols)
		var diff, na, nb int
		if err := db.QueryRow(q).Scan(&diff, &na, &nb); err != nil {
			t.Fatalf("%s: %v", table, err)
		}
		if diff != 0 || na != nb || (na == 0 && (table != "elbow" && table != "excluded_inputs" && table != "surrogate_tests" || contains(nonEmpty, table))) {
			t.Errorf("%s: %d differing rows; %d rows in %s, %d in %s", table, diff, na, filepath.Base(a), nb, filepath.Base(b))
		}
	}
}

func contains(s []string, v string) bool {
	for _, x := range s {
		if x == v {
			return true
		}
	}
	return false
}

// TestStagesEqualIngest runs the staged pipeline as separate processes,
// three shards side by side, on a generated cohort (invented data) with a
// dropped constant region, a skipped bad series and a capped fitting sample,
// and checks that the merged warehouse equals a single-process ingest with
// the same seed, table for table and row for row. Then the same with
// --states-from, and the refusals.
func TestStagesEqualIngest(t *testing.T) {
	tmp := t.TempDir()
	cohort := filepath.Join(tmp, "cohort")
	spec := compute.CohortSpec{Subjects: 16, Regions: 10, Timepoints: 150, States: 3, TR: 2,
		Stickiness: 0.93, GroupEffect: 0.04, Offset: 300, Seed: 17}
	if _, err := writeSynthetic(cohort, spec, map[string]string{"A": "day", "B": "night"}, "score"); err != nil {
		t.Fatal(err)
	}
	// Region 4 constant everywhere (dropped), sub-005 ragged (skipped).
	for i := 1; i <= spec.Subjects; i++ {
		f := filepath.Join(cohort, fmt.Sprintf("sub-%03d", i), "func", fmt.Sprintf("sub-%03d_task-rest_timeseries.tsv", i))
		b, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		lines := strings.Split(strings.TrimSuffix(string(b), "\n"), "\n")
		for r := 1; r < len(lines); r++ {
			cells := strings.Split(lines[r], "\t")
			cells[3] = "42"
			lines[r] = strings.Join(cells, "\t")
		}
		if i == 5 {
			lines = append(lines, "1\t2")
		}
		os.WriteFile(f, []byte(strings.Join(lines, "\n")+"\n"), 0o644)
	}
	opts := []string{"--input", cohort, "--window", "16", "--states-min", "2", "--states-max", "5", "--restarts", "2",
		"--fit-windows", "150", "--grid", "-0.5:1:16", "--seed", "5", "--constant-region", "drop", "--on-bad-subject", "skip"}
	single := filepath.Join(tmp, "single.duckdb")
	if code, _, stderr := topostate(append([]string{"ingest", "-q", "--db", single, "--analysis", "cohort"}, opts...)...); code != 0 {
		t.Fatalf("ingest: exit %d: %s", code, stderr)
	}

	work := filepath.Join(tmp, "work")
	merged := filepath.Join(tmp, "merged.duckdb")
	mustRun(t, append([]string{"stage", "plan", "--work", work, "--shards", "3"}, opts...)...)
	// Refusals before the stages have run.
	for _, c := range []struct {
		args []string
		code int
		want string
	}{
		{append([]string{"stage", "plan", "--work", work, "--shards", "3"}, opts...), 2, "is not empty"},
		{[]string{"stage", "sample", "--work", work, "--shard", "1/4"}, 2, "has 3 shards"},
		{[]string{"stage", "sample", "--work", work, "--shard", "0/3"}, 2, "want i/n"},
		{[]string{"stage", "sample", "--work", filepath.Join(tmp, "none"), "--shard", "1/3"}, 2, "no manifest.json"},
		{[]string{"stage", "fit", "--work", work}, 1, "stage sample --shard 1/3 has not finished"},
		{[]string{"stage", "compute", "--work", work, "--shard", "1/3"}, 1, "stage fit has not finished"},
		{[]string{"stage", "merge", "--work", work, "--db", merged}, 1, "stage fit has not finished"},
	} {
		if code, _, stderr := command(c.args...); code != c.code || !strings.Contains(stderr, c.want) {
			t.Errorf("%v: exit %d (want %d): %s", c.args[:2], code, c.code, stderr)
		}
	}
	if _, err := os.Stat(merged); err == nil {
		t.Error("a failed merge left a warehouse file")
	}
	shards(t, 3, "stage", "sample", "-q", "--work", work)
	mustRun(t, "stage", "fit", "-q", "--work", work)
	shards(t, 3, "stage", "compute", "-q", "--work", work)
	out := mustRun(t, "stage", "merge", "-q", "--work", work, "--db", merged, "--analysis", "cohort")
	if !strings.Contains(out, `analysis "cohort" (id 1)`) || !strings.Contains(out, "1 excluded") {
		t.Errorf("merge printed:\n%s", out)
	}
	sameAnalysis(t, single, merged, "elbow", "excluded_inputs")
	// Merging again under the same name is refused.
	code, _, stderr := command("stage", "merge", "--work", work, "--db", merged, "--analysis", "cohort")
	if code != 1 || !strings.Contains(stderr, "already exists") {
		t.Errorf("merging twice under one name: exit %d: %s", code, stderr)
	}

	// The work folder itself is queryable: its hive-partitioned Parquet
	// tables hold the merged rows (analysis_id 0 until merged).
	db, err := sql.Open("duckdb", "")
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	var diff, shardsSeen int
	q := fmt.Sprintf(`ATTACH '%s' AS m (READ_ONLY);
		SELECT (SELECT count(*) FROM (SELECT * EXCLUDE (analysis_id, shard) FROM read_parquet('%s/tables/state_metrics/*/*.parquet', hive_partitioning = true)
			EXCEPT ALL SELECT * EXCLUDE (analysis_id) FROM m.state_metrics)),
		(SELECT count(DISTINCT shard) FROM read_parquet('%[2]s/tables/state_metrics/*/*.parquet', hive_partitioning = true))`, merged, work)
	if err := db.QueryRow(q).Scan(&diff, &shardsSeen); err != nil || diff != 0 || shardsSeen != 3 {
		t.Errorf("reading the work folder in place: %d differing rows, %d shards, %v", diff, shardsSeen, err)
	}
	db.Close()

	// Replication: the states of the single-process analysis, in both ways.
	rep := filepath.Join(tmp, "replication.duckdb")
	if code, _, stderr := topostate(append([]string{"ingest", "-q", "--db", rep, "--analysis", "again", "--states-from", "cohort", "--states-db", single}, opts...)...); code == 0 {
		t.Fatalf("fit options beside --states-from were accepted: %s", stderr)
	}
	repOpts := []string{"--input", cohort, "--window", "16", "--grid", "-0.5:1:16", "--constant-region", "drop", "--on-bad-subject", "skip"}
	if code, _, stderr := topostate(append([]string{"ingest", "-q", "--db", rep, "--analysis", "again", "--states-from", "cohort", "--states-db", single}, repOpts...)...); code != 0 {
		t.Fatalf("ingest --states-from: exit %d: %s", code, stderr)
	}
	work2 := filepath.Join(tmp, "work2")
	merged2 := filepath.Join(tmp, "merged2.duckdb")
	mustRun(t, append([]string{"stage", "plan", "--work", work2, "--shards", "2"}, repOpts...)...)
	if code, _, stderr := command("stage", "fit", "--work", work2, "--states-from", "cohort"); code != 2 || !strings.Contains(stderr, "--states-db") {
		t.Errorf("stage fit --states-from alone: exit %d: %s", code, stderr)
	}
	mustRun(t, "stage", "fit", "-q", "--work", work2, "--states-from", "cohort", "--states-db", single)
	shards(t, 2, "stage", "compute", "-q", "--work", work2)
	mustRun(t, "stage", "merge", "-q", "--work", work2, "--db", merged2, "--analysis", "again")
	sameAnalysis(t, rep, merged2, "excluded_inputs")

	// A shard computed again after a new fit is refused until all are.
	mustRun(t, "stage", "fit", "-q", "--work", work2, "--states-from", "cohort", "--states-db", single)
	code, _, stderr = command("stage", "merge", "--work", work2, "--db", filepath.Join(tmp, "m3.duckdb"))
	if code != 1 || !strings.Contains(stderr, "another fit") {
		t.Errorf("merge after a new fit: exit %d: %s", code, stderr)
	}
}
