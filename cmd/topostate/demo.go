package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"text/tabwriter"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/ingest"
	"github.com/topostate/topostate/queries"
)

// The demo's scenario is invented for this tool: the "Quiet Ridge" study,
// 28 fictional volunteers, half of whom practised a slow-breathing exercise
// for eight weeks while the other half waited, with age and a calm score.
// The simulator gives the practice group stickier states (longer dwells);
// the cohort has four latent states, sampled every 1.4 s.
const demoStory = `Fictional scenario: the "Quiet Ridge" study. 28 invented volunteers, 14 who
practised a slow-breathing exercise for eight weeks and 14 on the waiting list,
each with a 10-minute resting scan (TR 1.4 s, 430 time points) reduced to 36
regions, plus age and a calm score. The data are simulated with four latent
brain states; the practice group was given stickier states (longer dwells).`

// Demo settings, our own: four latent states, TR 1.4 s; the window comes
// from the default rule (ceil(1/(0.01 Hz x 1.4 s)) = 72 time points) and k
// is scanned from 1 with the default rule.
const (
	demoStates = 4
	demoTR     = 1.4
)

func demoCommand() *cli.Command {
	return &cli.Command{
		Name:  "demo",
		Usage: "simulate a small fictional cohort, ingest it, and show a few results",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "dir", Usage: "`FOLDER` for the cohort (FOLDER/cohort) and the warehouse (FOLDER/demo.duckdb), neither of which may exist (default: a new temporary folder)"},
			&cli.BoolFlag{Name: "quiet", Aliases: []string{"q"}, Usage: "no progress bar"},
			&cli.IntFlag{Name: "surrogates", Value: 19, Usage: "test the states against `N` stationary surrogates (0: skip the test)"},
		},
		Action: func(c *cli.Context) error {
			dir := c.String("dir")
			if dir == "" {
				d, err := os.MkdirTemp("", "topostate-demo-")
				if err != nil {
					return err
				}
				dir = d
			}
			cohort := filepath.Join(dir, "cohort")
			dbPath := filepath.Join(dir, "demo.duckdb")
			// Every file the demo writes: the cohort folder and the
			// warehouse with its .wal (the next steps it prints write
			// nothing). None may exist; the cohort's files are also
			// created exclusively (ingest.WriteCohort).
			if err := refuseNonEmpty("demo", "--dir", cohort); err != nil {
				return err
			}
			for _, p := range []string{dbPath, dbPath + ".wal"} {
				if _, err := os.Lstat(p); err == nil {
					return usagef("demo: %s exists already; give the demo a new or empty --dir", p)
				}
			}
			out := c.App.Writer
			fmt.Fprintln(out, demoStory)
			fmt.Fprintln(out)
			spec := compute.CohortSpec{Subjects: 28, Regions: 36, Timepoints: 430, States: demoStates, TR: demoTR,
				Stickiness: 0.975, GroupEffect: 0.015, Noise: 0.4, Offset: 600, Seed: 4242}
			if _, err := writeSynthetic(cohort, spec, map[string]string{"A": "waitlist", "B": "practice"}, "calm"); err != nil {
				return err
			}
			fmt.Fprintf(out, "1. simulated the cohort into %s\n", cohort)
			o := ingest.Defaults()
			o.Input, o.Analysis, o.Seed = cohort, "ridge-demo", 11
			self, built := selfCommand(os.Args[0])
			w := ingest.WindowFor(demoTR, o.MinFreq)
			fmt.Fprintf(out, "2. "+self+" ingest --input %s --db %s --analysis %s --seed %d\n"+
				"   every other setting at its default: windows of %d time points (%.1f s >= 1/--min-freq = %g s), k scanned over %d..%d by %s\n\n",
				cohort, dbPath, o.Analysis, o.Seed, w, float64(w)*demoTR, 1/o.MinFreq, o.StatesMin, o.StatesMax, o.KRule)
			sum, err := runIngest(c, o, dbPath, out)
			if err != nil {
				return err
			}
			fmt.Fprintln(out)
			fmt.Fprintln(out, demoFound(sum.States, demoStates))
			fmt.Fprintln(out)
			if err := demoSurrogates(c, out, self, dbPath, o.Analysis, c.Int("surrogates")); err != nil {
				return err
			}
			if err := demoContrasts(c.Context, out, dbPath, sum.AnalysisID, self); err != nil {
				return err
			}
			db, a := shellWord(dbPath), o.Analysis
			fmt.Fprintln(out, "\nNext:")
			if !built {
				fmt.Fprintln(out, "  (topostate ran through 'go run'; 'go build -o topostate ./cmd/topostate' makes a program you can call as ./topostate)")
			}
			fmt.Fprintf(out, "  %s info   --db %s\n", self, db)
			fmt.Fprintf(out, "  %s query  --db %s state_dwell_by_group --param group_a=practice --param group_b=waitlist   (occupancy too)\n", self, db)
			fmt.Fprintf(out, "  %s plot   --db %s --analysis %s --out %s\n", self, db, a, shellWord(filepath.Join(dir, "figures")))
			fmt.Fprintf(out, "  %s report --db %s --analysis %s --out %s\n", self, db, a, shellWord(filepath.Join(dir, "report.html")))
			fmt.Fprintln(out, "  (or open the file in DuckDB and ask your own questions in SQL)")
			fmt.Fprintln(out)
			fmt.Fprintln(out, caution)
			return nil
		},
	}
}

// demoFound says in words what the model choice found against the
// simulation's truth.
func demoFound(found, truth int) string {
	switch {
	case found == truth:
		return fmt.Sprintf("Found: %d states, as many as the simulation has.", found)
	case found == 1:
		return fmt.Sprintf("Found: 1 state, no evidence of state dynamics (the simulation has %d states).", truth)
	default:
		return fmt.Sprintf("Found: %d states; the simulation has %d (the number of states is an estimate: see README \"Number of states\").", found, truth)
	}
}

// demoDwellParams are the parameters with which the demo runs the bundled
// query state_dwell_by_group (the command it prints runs the same).
var demoDwellParams = []string{"group_a=practice", "group_b=waitlist", "n_perm=4999", "seed=7"}

// demoContrasts prints the dwell-time rows of the bundled query
// state_dwell_by_group, practice against waiting list: the mean length of
// the complete runs of each state (runs cut by the scan's start or end left
// out, docs/methods.md §4), per group, the subjects left out (no visit to
// the state, or only runs cut by the scan), and the query's Welch and
// permutation p-values with BH across states. The demo shows the query's
// own numbers, so that they are the calibrated tests of README
// "Calibration" and equal what the printed command gives.
func demoContrasts(ctx context.Context, out io.Writer, dbPath string, id int, self string) error {
	db, err := queries.Open(ctx, dbPath)
	if err != nil {
		return err
	}
	defer db.Close()
	q, err := queries.Lookup(queries.FS, "state_dwell_by_group")
	if err != nil {
		return err
	}
	values := map[string]string{"analysis": strconv.Itoa(id)}
	for _, kv := range demoDwellParams {
		k, v, _ := strings.Cut(kv, "=")
		values[k] = v
	}
	rows, err := queries.Run(ctx, db.Conn, q, values)
	if err != nil {
		return err
	}
	defer rows.Close()
	cols, err := rows.Columns()
	if err != nil {
		return err
	}
	fmt.Fprintln(out, "3. mean dwell time per state, practice vs waiting list: complete runs only (seconds; runs cut by the")
	fmt.Fprintln(out, "   scan's start or end are left out, and so is a subject without a complete run of the state; Welch")
	fmt.Fprintln(out, "   t-test, permutation test with 4,999 relabellings, BH across states), the dwell rows of")
	fmt.Fprintf(out, "   %s query --db %s state_dwell_by_group --param %s\n", self, shellWord(dbPath), strings.Join(demoDwellParams, " --param "))
	tw := tabwriter.NewWriter(out, 0, 2, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "state\tpractice\twaitlist\tleft out: no visit\tcut runs only\tt\tdf\tp (Welch)\tp (BH)\tp (perm.)\t")
	for rows.Next() {
		v := make([]any, len(cols))
		ptr := make([]any, len(cols))
		for i := range v {
			ptr[i] = &v[i]
		}
		if err := rows.Scan(ptr...); err != nil {
			return err
		}
		row := map[string]any{}
		for i, c := range cols {
			row[c] = v[i]
		}
		if row["measure"] != "dwell_seconds" {
			continue
		}
		fmt.Fprintf(tw, "%v\t%s (n=%v)\t%s (n=%v)\t%v + %v\t%v + %v\t%s\t%s\t%s\t%s\t%s\t\n", row["state"],
			demoNum(row["mean_a"], "%.1f"), row["n_a"], demoNum(row["mean_b"], "%.1f"), row["n_b"],
			row["n_without_visit_a"], row["n_without_visit_b"], row["n_censored_only_a"], row["n_censored_only_b"],
			demoNum(row["welch_t"], "%.2f"), demoNum(row["welch_df"], "%.1f"), demoNum(row["welch_p"], "%.4f"),
			demoNum(row["welch_p_bh"], "%.4f"), demoNum(row["perm_p"], "%.4f"))
	}
	if err := rows.Err(); err != nil {
		return err
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintln(out, "   (left out: practice + waitlist subjects; a state with fewer than 2 subjects in a group has no test, -)")
	return nil
}

// demoNum formats a number of a query's row, "-" for NULL.
func demoNum(v any, format string) string {
	switch x := v.(type) {
	case float64:
		return fmt.Sprintf(format, x)
	case nil:
		return "-"
	}
	return fmt.Sprint(v)
}

// shellWord quotes s for a POSIX shell when it holds anything but plain
// path characters, so a hint can be pasted as it is.
func shellWord(s string) string {
	if s != "" && strings.Trim(s, "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789_./:=,@+-") == "" {
		return s
	}
	return "'" + strings.ReplaceAll(s, "'", `'\''`) + "'"
}

// selfCommand is how the user can call this program again, for the lines
// the demo prints: the name when the PATH finds this program under it, the
// path as invoked otherwise, and "go run ./cmd/topostate" when the program
// is a temporary build of 'go run' (built is false then).
func selfCommand(arg0 string) (cmd string, built bool) {
	if strings.Contains(filepath.ToSlash(arg0), "/go-build") {
		return "go run ./cmd/topostate", false
	}
	base := filepath.Base(arg0)
	if found, err := exec.LookPath(base); err == nil {
		a, _ := filepath.Abs(arg0)
		b, _ := filepath.Abs(found)
		if a == b || base == arg0 {
			return base, true
		}
	}
	return shellWord(arg0), true
}
