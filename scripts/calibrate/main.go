// Command calibrate measures the false-positive rate of every p-value column
// of the bundled queries on simulated null cohorts (docs/methods.md §12).
// For each null kind, (a) two groups and nothing differs, (b) the groups
// differ only in dwell time with identical state networks
// (compute.CohortSpec.GroupEffect, `topostate simulate --group-effect`), (c)
// one latent state (`--states 1`), it simulates -replicates cohorts with
// compute.SimulateCohort (AR(1) latent autocorrelation at its default),
// writes each in the input layout with two null covariates (age and sex,
// independent of everything) and ingests it with ingest.IntoFile (the code
// path of `topostate ingest`) into a warehouse of its own, runs every
// bundled query but those of Excluded (surrogate_summary, measured by
// scripts/surrcalib) with groups A and B, covariate=age and adjust=age,sex,
// and counts per p column (named p or ending in _p) and per row (state,
// dimension, measure...) how many p-values fall below 0.05. Each count is
// set against the 95 % quantile of Binomial(replicates, 0.05), the largest
// count consistent with a test at its nominal level. Below the table it
// prints the mean over the replicates of each group difference
// (state_dwell_by_group's difference) and a reference from the simulator's
// truth: the Welch test of the latent occupancy, latent states ranked by
// frequency as ingest ranks the fitted ones.
//
//	nice -n 10 go run ./scripts/calibrate > calibration.md   # the README table
//	go run ./scripts/calibrate -replicates 10                # a quick look
//	go run ./scripts/calibrate -latent-only -replicates 2000 # the truth only
//	go run ./scripts/calibrate -render counts.json           # tables of a -json run
//	go run ./scripts/calibrate -nulls b,power -replicates 40 -all-window
//
// The last line measures power as well: kind "power" is null (a) with a
// network difference added to group B (-network-effect, -network-regions,
// -network-all-states), and -all-window also counts the former group test
// on the all-window Betti curves (AllWindowCurveTest) beside the bundled
// queries, to compare the two.
//
// The uptime load average is printed before and after: the wall time
// depends on the machine and its load.
package main

import (
	"context"
	"flag"
	"fmt"
	"os"
	"os/exec"
	"os/signal"
	"strings"
	"time"
)

func main() {
	cfg := Config{}
	nulls := flag.String("nulls", "a,b,c", "null kinds: a (nothing differs), b (dwell only), c (one state); power (a network difference in group B, see -network-effect)")
	flag.IntVar(&cfg.Replicates, "replicates", 200, "cohorts per null kind")
	flag.IntVar(&cfg.Subjects, "subjects", 20, "subjects per cohort (groups A and B alternate)")
	flag.IntVar(&cfg.Regions, "regions", 16, "regions per series")
	flag.IntVar(&cfg.Timepoints, "timepoints", 360, "time points per series")
	flag.IntVar(&cfg.States, "states", 3, "latent states of nulls (a) and (b)")
	flag.Float64Var(&cfg.Stickiness, "stickiness", 0.97, "per-time-point probability of staying in a state")
	flag.Float64Var(&cfg.GroupEffect, "group-effect", 0.02, "null (b): added to group B's stickiness")
	flag.IntVar(&cfg.Window, "window", 30, "ingest window length, time points")
	flag.IntVar(&cfg.FitStates, "fit-states", 3, "states fitted by ingest (fixed k, every null kind)")
	flag.IntVar(&cfg.Restarts, "restarts", 2, "k-means restarts")
	flag.StringVar(&cfg.Grid, "grid", "-1:1:101", "Betti curve grid lo:hi:n")
	flag.IntVar(&cfg.CoreTimepoints, "core-timepoints", 0, "ingest --core-timepoints: time points per core network (0: the window width)")
	flag.IntVar(&cfg.NPerm, "n-perm", 999, "relabellings of every permutation test")
	flag.Uint64Var(&cfg.Seed, "seed", 1, "replicate r uses simulator seed seed + r")
	flag.IntVar(&cfg.Parallel, "parallel", 2, "replicates at once (each ingest uses one worker)")
	flag.Float64Var(&cfg.NetworkEffect, "network-effect", 0.5, "kind power: variance of the component shared by regions 1-4 in group B's first state")
	flag.IntVar(&cfg.NetworkRegions, "network-regions", 4, "kind power: regions (from the first) sharing the component")
	flag.BoolVar(&cfg.NetworkAll, "network-all-states", false, "kind power: add the component in every latent state, not the first only")
	flag.BoolVar(&cfg.LatentOnly, "latent-only", false, "only the reference of the simulator's truth (latent occupancy per rank), no ingest: seconds")
	save := flag.String("json", "", "also write the counts to `FILE` (JSON), to print the tables again with -render")
	render := flag.String("render", "", "print the tables from `FILE` written by -json, without running anything")
	allWindow := flag.Bool("all-window", false, "also count the curve permutation test on the all-window Betti curves (the group test before core networks)")
	flag.Parse()
	if *allWindow {
		q, err := ParseExtra(AllWindowCurveTest)
		if err != nil {
			fmt.Fprintln(os.Stderr, "calibrate:", err)
			os.Exit(1)
		}
		cfg.Extra = append(cfg.Extra, q)
	}
	cfg.Nulls = strings.Split(*nulls, ",")
	if *render != "" {
		f, err := os.Open(*render)
		if err != nil {
			fmt.Fprintln(os.Stderr, "calibrate:", err)
			os.Exit(1)
		}
		res, err := Load(f)
		f.Close()
		if err != nil {
			fmt.Fprintf(os.Stderr, "calibrate: %s: %v\n", *render, err)
			os.Exit(1)
		}
		fails := writeAll(res, cfg.Nulls)
		fmt.Printf("\n%d test(s) above the bound (tables printed from %s)\n", fails, *render)
		return
	}
	cfg.Log = os.Stderr
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	load0 := uptime()
	start := time.Now()
	res, err := Run(ctx, cfg)
	if err != nil {
		fmt.Fprintln(os.Stderr, "calibrate:", err)
		os.Exit(1)
	}
	wall := time.Since(start)
	fmt.Printf("calibrate: %d replicates per null kind (%s), %d subjects x %d time points x %d regions, %d latent states, stickiness %g, group effect %g (null b), window %d, core time points %d (0: the window), %d fitted states, %d restarts, grid %s, n_perm %d, seed %d\n\n",
		cfg.Replicates, *nulls, cfg.Subjects, cfg.Timepoints, cfg.Regions, cfg.States, cfg.Stickiness, cfg.GroupEffect,
		cfg.Window, cfg.CoreTimepoints, cfg.FitStates, cfg.Restarts, cfg.Grid, cfg.NPerm, cfg.Seed)
	if *save != "" {
		f, err := os.Create(*save)
		if err == nil {
			err = res.Save(f)
			if cerr := f.Close(); err == nil {
				err = cerr
			}
		}
		if err != nil {
			fmt.Fprintln(os.Stderr, "calibrate:", err)
			os.Exit(1)
		}
	}
	fails := writeAll(res, cfg.Nulls)
	fmt.Printf("\n%d test(s) above the bound; wall time %s; load before: %s; after: %s\n", fails, wall.Round(time.Second), load0, uptime())
}

func uptime() string {
	out, err := exec.Command("uptime").Output()
	if err != nil {
		return "unknown"
	}
	s := strings.TrimSpace(string(out))
	if i := strings.Index(s, "load average"); i >= 0 {
		return s[i:]
	}
	return s
}

// writeAll prints the calibration table, the queries counted and the
// diagnostics, and returns the number of cells above their bound.
func writeAll(res *Result, nulls []string) int {
	fails := res.WriteTable(os.Stdout, nulls, 0.05)
	fmt.Println()
	res.WriteCoverage(os.Stdout)
	fmt.Println()
	res.WriteDiagnostics(os.Stdout, nulls, 0.05)
	return fails
}
