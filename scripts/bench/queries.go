package main

import (
	"database/sql"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"text/tabwriter"
	"time"

	_ "github.com/marcboeker/go-duckdb"

	"github.com/topostate/topostate/queries"
)

// timed is one command run on the benchmark's warehouse.
type timed struct {
	What        string  `json:"what"`
	Command     string  `json:"command"`
	Seconds     float64 `json:"seconds"`
	CPUSeconds  float64 `json:"cpu_seconds"` // user + system of the process: less sensitive to other load than wall time
	GoalSeconds float64 `json:"goal_seconds"`
	PeakMiB     float64 `json:"peak_mib"` // peak resident memory of the process (getrusage)
	Load1       float64 `json:"load1_before"`
	Rows        string  `json:"rows,omitempty"`
}

// requiredParam fills the parameters a bundled query declares without a
// default, for the generated cohort: its groups are A and B and its
// numeric covariate is score (topostate simulate).
var requiredParam = map[string]string{"analysis": "latest", "group_a": "A", "group_b": "B", "covariate": "score"}

// Goals of README "Performance": a bundled query with its defaults in
// under 1 s, the report in under 10 s; export has none (it is timed).
const (
	queryGoal  = 1
	reportGoal = 10
)

// timeQueries runs every bundled query with its defaults, the report and
// export of every table (Parquet and CSV) on the warehouse db, one process
// each, as a user would.
func timeQueries(cfg config, db, runDir string, stderr io.Writer) ([]timed, error) {
	list, err := queries.List(queries.FS)
	if err != nil {
		return nil, err
	}
	var out []timed
	run := func(what string, goal float64, args ...string) error {
		t := timed{What: what, GoalSeconds: goal, Command: "topostate " + strings.Join(args, " "), Load1: load1()}
		fmt.Fprintf(stderr, "bench: %s\n", t.Command)
		c := exec.Command(cfg.bin, args...)
		var errOut strings.Builder
		c.Stdout, c.Stderr = io.Discard, &errOut
		start := time.Now()
		if err := c.Run(); err != nil {
			return fmt.Errorf("%s: %v\n%s", t.Command, err, errOut.String())
		}
		t.Seconds = time.Since(start).Seconds()
		t.CPUSeconds = (c.ProcessState.UserTime() + c.ProcessState.SystemTime()).Seconds()
		if ru, ok := c.ProcessState.SysUsage().(*syscall.Rusage); ok {
			t.PeakMiB = float64(ru.Maxrss) / 1024 // KiB on Linux
		}
		out = append(out, t)
		return nil
	}
	for _, q := range list {
		args := []string{"query", "--db", db, q.Name, "--format", "csv", "--out", filepath.Join(runDir, q.Name+".csv")}
		missing := ""
		for _, p := range q.Params {
			if p.HasDefault {
				continue
			}
			v, ok := requiredParam[p.Name]
			if !ok {
				missing = p.Name
				break
			}
			args = append(args, "--param", p.Name+"="+v)
		}
		if missing != "" {
			fmt.Fprintf(stderr, "bench: query %s not timed: no value for its required parameter %s\n", q.Name, missing)
			continue
		}
		if err := run("query "+q.Name, queryGoal, args...); err != nil {
			return out, err
		}
		if q.Name == "filtration_tests_by_group" {
			// The descriptive pooled-event KS distance, left out by
			// default, when asked for: its cost, without a goal.
			pooled := append([]string(nil), args...)
			pooled[7] = filepath.Join(runDir, q.Name+"-pooled.csv") // the value of --out
			if err := run("query "+q.Name+" with pooled_events=1", 0, append(pooled, "--param", "pooled_events=1")...); err != nil {
				return out, err
			}
		}
	}
	if err := run("report", reportGoal, "report", "--db", db, "--out", filepath.Join(runDir, "report.html")); err != nil {
		return out, err
	}
	for _, f := range []string{"parquet", "csv"} {
		dir := filepath.Join(runDir, "export-"+f)
		if err := run("export, every table, "+f, 0, "export", "--db", db, "--out", dir, "--format", f); err != nil {
			return out, err
		}
		out[len(out)-1].Rows = dirSize(dir)
		os.RemoveAll(dir)
	}
	return out, nil
}

func dirSize(dir string) string {
	var n int64
	filepath.Walk(dir, func(_ string, fi os.FileInfo, err error) error {
		if err == nil && !fi.IsDir() {
			n += fi.Size()
		}
		return nil
	})
	return fmt.Sprintf("%.0f MiB written", float64(n)/(1<<20))
}

// compareWorkers ingests the cohort again with --workers 1 and compares
// every table of the two warehouses: row counts and the sum of DuckDB's
// row hashes (order-free), analyses excepted (it records the time of the
// run).
func compareWorkers(cfg config, dir, db string, args []string, r *result, stderr io.Writer) error {
	db1 := strings.TrimSuffix(db, ".duckdb") + "-workers1.duckdb"
	args1 := append([]string(nil), args...)
	for i := range args1 {
		if args1[i] == db {
			args1[i] = db1
		}
		if i > 0 && args1[i-1] == "--workers" {
			args1[i] = "1"
		}
	}
	fmt.Fprintf(stderr, "bench: again with --workers 1: topostate %s\n", strings.Join(args1, " "))
	c := exec.Command(cfg.bin, args1...)
	var errOut strings.Builder
	c.Stdout, c.Stderr = io.Discard, &errOut
	if err := c.Run(); err != nil {
		return fmt.Errorf("ingest --workers 1: %v\n%s", err, errOut.String())
	}
	if !cfg.keep {
		defer os.Remove(db1)
	}
	conn, err := sql.Open("duckdb", "")
	if err != nil {
		return err
	}
	defer conn.Close()
	if _, err := conn.Exec(fmt.Sprintf(`ATTACH '%s' AS a (READ_ONLY); ATTACH '%s' AS b (READ_ONLY)`, db, db1)); err != nil {
		return err
	}
	same := true
	for _, table := range []string{"regions", "elbow", "state_centroids", "state_sequence", "state_metrics",
		"subject_dynamics", "transitions", "betti_curves", "filtration_events", "state_networks", "core_betti_curves", "inputs", "subjects"} {
		var na, nb int64
		var ha, hb string
		q := `SELECT count(*), coalesce(sum(hash(t)::HUGEINT), 0)::VARCHAR FROM %s.%s t`
		if err := conn.QueryRow(fmt.Sprintf(q, "a", table)).Scan(&na, &ha); err != nil {
			return fmt.Errorf("%s: %w", table, err)
		}
		if err := conn.QueryRow(fmt.Sprintf(q, "b", table)).Scan(&nb, &hb); err != nil {
			return fmt.Errorf("%s: %w", table, err)
		}
		if na != nb || ha != hb || na == 0 {
			same = false
			r.WorkersDiff = append(r.WorkersDiff, fmt.Sprintf("%s: %d rows (hash sum %s) vs %d (%s)", table, na, ha, nb, hb))
		}
	}
	r.SameWithOneWorker = &same
	return nil
}

func printQueries(w io.Writer, r result) {
	if r.SameWithOneWorker != nil {
		if *r.SameWithOneWorker {
			fmt.Fprintf(w, "\n--workers 1 gives identical tables (row counts and row-hash sums of 13 tables)\n")
		} else {
			fmt.Fprintf(w, "\n--workers 1 DIFFERS: %s\n", strings.Join(r.WorkersDiff, "; "))
		}
	}
	if len(r.Queries) == 0 {
		return
	}
	fmt.Fprintf(w, "\non this warehouse (%.0f MiB), one process each:\n", float64(r.DBBytes)/(1<<20))
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "  command\twall s\tCPU s\tpeak MiB\tgoal (wall)\tload\t")
	for _, q := range r.Queries {
		goal := "-"
		if q.GoalSeconds > 0 {
			verdict := "met"
			if q.Seconds >= q.GoalSeconds {
				verdict = "NOT met"
			}
			goal = fmt.Sprintf("< %g s: %s", q.GoalSeconds, verdict)
		}
		what := q.What
		if q.Rows != "" {
			what += " (" + q.Rows + ")"
		}
		fmt.Fprintf(tw, "  %s\t%.2f\t%.2f\t%.0f\t%s\t%.1f\t\n", what, q.Seconds, q.CPUSeconds, q.PeakMiB, goal, q.Load1)
	}
	tw.Flush()
}
