package main

import (
	"context"
	"database/sql"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"text/tabwriter"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/ingest"
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
			&cli.StringFlag{Name: "dir", Usage: "`FOLDER` for the cohort and the warehouse (default: a new temporary folder)"},
			&cli.BoolFlag{Name: "quiet", Aliases: []string{"q"}, Usage: "no progress bar"},
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
			if _, err := os.Stat(dbPath); err == nil {
				return usagef("%s exists already; give the demo an empty --dir", dbPath)
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
			w := ingest.WindowFor(demoTR, o.MinFreq)
			fmt.Fprintf(out, "2. topostate ingest --input %s --db %s --analysis %s --seed %d\n"+
				"   every other setting at its default: windows of %d time points (%.1f s >= 1/--min-freq = %g s), k scanned over %d..%d by %s\n\n",
				cohort, dbPath, o.Analysis, o.Seed, w, float64(w)*demoTR, 1/o.MinFreq, o.StatesMin, o.StatesMax, o.KRule)
			sum, err := runIngest(c, o, dbPath, out)
			if err != nil {
				return err
			}
			fmt.Fprintln(out)
			fmt.Fprintln(out, demoFound(sum.States, demoStates))
			fmt.Fprintln(out)
			if err := demoContrasts(c.Context, out, dbPath, sum.AnalysisID); err != nil {
				return err
			}
			db, a := shellWord(dbPath), o.Analysis
			fmt.Fprintln(out, "\nNext:")
			fmt.Fprintf(out, "  topostate info   --db %s\n", db)
			fmt.Fprintf(out, "  topostate query  --db %s state_dwell_by_group --param group_a=practice --param group_b=waitlist\n", db)
			fmt.Fprintf(out, "  topostate plot   --db %s --analysis %s --out %s\n", db, a, shellWord(filepath.Join(dir, "figures")))
			fmt.Fprintf(out, "  topostate report --db %s --analysis %s --out %s\n", db, a, shellWord(filepath.Join(dir, "report.html")))
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

// demoContrasts prints mean dwell time by group per state with Welch and
// permutation p-values, BH-adjusted across states.
func demoContrasts(ctx context.Context, out io.Writer, dbPath string, id int) error {
	db, err := openRead(ctx, dbPath)
	if err != nil {
		return err
	}
	defer db.Close()
	k, err := scalarInt(ctx, db, `SELECT n_states FROM analyses WHERE analysis_id = ?`, id)
	if err != nil {
		return err
	}
	type row struct {
		state              int
		waitlist, practice []float64
		welch              compute.WelchResult
		perm               compute.TestResult
	}
	rs := make([]row, k)
	rows, err := db.QueryContext(ctx, `
		SELECT m.state, s."group", m.mean_dwell_seconds
		FROM state_metrics m JOIN subjects s USING (analysis_id, subject_id)
		WHERE m.analysis_id = ? AND m.mean_dwell_seconds IS NOT NULL
		ORDER BY m.state, m.subject_id, m.session_id`, id)
	if err != nil {
		return err
	}
	for rows.Next() {
		var st int
		var g string
		var v float64
		if err := rows.Scan(&st, &g, &v); err != nil {
			rows.Close()
			return err
		}
		rs[st-1].state = st
		if g == "waitlist" {
			rs[st-1].waitlist = append(rs[st-1].waitlist, v)
		} else {
			rs[st-1].practice = append(rs[st-1].practice, v)
		}
	}
	rows.Close()
	ps := make([]float64, k)
	for i := range rs {
		rs[i].state = i + 1
		ps[i] = math.NaN()
		w, err := compute.WelchTTest(rs[i].practice, rs[i].waitlist)
		if err != nil {
			continue
		}
		rs[i].welch = w
		rs[i].perm, _ = compute.PermutationTestMean(rs[i].practice, rs[i].waitlist, 4999, rand.New(rand.NewPCG(7, uint64(i))))
		ps[i] = w.PValue
	}
	adj := compute.BenjaminiHochberg(ps)
	fmt.Fprintln(out, "3. mean dwell time per state, practice vs waiting list (seconds; Welch t-test, permutation test with 4,999 relabellings; BH across states)")
	tw := tabwriter.NewWriter(out, 0, 2, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "state\twaitlist\tpractice\tt\tdf\tp (Welch)\tp (BH)\tp (perm.)\t")
	for i, r := range rs {
		fmt.Fprintf(tw, "%d\t%.1f (n=%d)\t%.1f (n=%d)\t%.2f\t%.1f\t%.4f\t%.4f\t%.4f\t\n", r.state, mean(r.waitlist), len(r.waitlist),
			mean(r.practice), len(r.practice), r.welch.T, r.welch.DF, r.welch.PValue, adj[i], r.perm.PValue)
	}
	return tw.Flush()
}

// shellWord quotes s for a POSIX shell when it holds anything but plain
// path characters, so a hint can be pasted as it is.
func shellWord(s string) string {
	if s != "" && strings.Trim(s, "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789_./:=,@+-") == "" {
		return s
	}
	return "'" + strings.ReplaceAll(s, "'", `'\''`) + "'"
}

func mean(x []float64) float64 {
	s := 0.0
	for _, v := range x {
		s += v
	}
	return s / float64(len(x))
}

func scalarInt(ctx context.Context, db *sql.DB, q string, args ...any) (int, error) {
	var n int
	err := db.QueryRowContext(ctx, q, args...).Scan(&n)
	return n, err
}
