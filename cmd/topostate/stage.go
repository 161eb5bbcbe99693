package main

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"slices"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/ingest"
	"github.com/topostate/topostate/schema"
)

// stageCommand groups the stages of a sharded ingest; each is a process of
// its own that reads and writes the work folder.
func stageCommand() *cli.Command {
	work := &cli.StringFlag{Name: "work", Aliases: []string{"w"}, Usage: "work `FOLDER` shared by the stages (on a file system every node sees)"}
	shard := &cli.StringFlag{Name: "shard", Usage: "this job's shard `i/n`, 1 <= i <= n, n as planned (Slurm: $SLURM_ARRAY_TASK_ID/n)"}
	workers := &cli.IntFlag{Name: "workers", Usage: fmt.Sprintf("`N` parallel workers (0: all %d cores); results do not depend on it", runtime.GOMAXPROCS(0))}
	quiet := &cli.BoolFlag{Name: "quiet", Aliases: []string{"q"}, Usage: "no progress bar"}
	return &cli.Command{
		Name:  "stage",
		Usage: "run ingest as separate steps over shards of the cohort, for a scheduler (Slurm array jobs)",
		Description: "The stages of 'topostate ingest', one process each, exchanging Parquet files in a work folder:\n\n" +
			"  plan     once       validate the whole cohort, write the manifest (options, series, checksums)\n" +
			"  sample   per shard  fitting-sample windows of the shard's series (--fit-sample)\n" +
			"  fit      once       elbow scan and k-means on the pooled fitting sample (or --states-from)\n" +
			"  compute  per shard  states, dwell times, transitions, Betti curves and events\n" +
			"  surrogates per shard  (with plan --surrogates N) the surrogate-data test's runs, after fit\n" +
			"  merge    once       every table into the warehouse in one transaction\n\n" +
			"The same seed gives the same rows as a single 'topostate ingest', whatever the number of shards.\n" +
			"The tables are also readable in place: read_parquet('WORK/tables/TABLE/*/*.parquet', hive_partitioning = true).",
		HideHelpCommand: true,
		Subcommands: []*cli.Command{
			{
				Name:  "plan",
				Usage: "validate the cohort once and write the manifest of a new work folder",
				Flags: append([]cli.Flag{work,
					&cli.IntFlag{Name: "shards", Aliases: []string{"n"}, Value: 1, Usage: "split the series into `N` shards for the sample and compute stages"},
				}, planFlags()...),
				Action: func(c *cli.Context) error {
					if err := need(c, "work"); err != nil {
						return err
					}
					o, err := ingestOptions(c)
					if err != nil {
						return err
					}
					o.CacheSeries = false // the stages run as other processes: they read the files
					if err := checkWindowFlags(c); err != nil {
						return err
					}
					if err := checkOptions(c, o); err != nil {
						return err
					}
					w, err := ingest.Plan(c.Context, o, c.String("work"), c.Int("shards"))
					if err != nil {
						return err
					}
					m := w.Manifest
					fmt.Fprintf(c.App.Writer, "planned %d series of %s (%d excluded) in %d shards: %s\n", len(m.Inputs), m.Options.Input,
						len(m.Excluded), m.Shards, filepath.Join(w.Dir, "manifest.json"))
					for _, msg := range m.Warnings {
						fmt.Fprintf(c.App.Writer, "  warning  %s\n", msg)
					}
					fmt.Fprintf(c.App.Writer, "next: topostate stage sample --work %s --shard i/%d, for i = 1..%d\n", w.Dir, m.Shards, m.Shards)
					return nil
				},
			},
			{
				Name:  "sample",
				Usage: "stage 1 for one shard: the fitting-sample windows its series contribute to the fit",
				Flags: []cli.Flag{work, shard, workers, quiet},
				Action: shardStage((*ingest.Work).Sample, func(s *ingest.ShardSummary) string {
					return fmt.Sprintf("%d series, %d fitting-sample windows", s.Series, s.Rows["fit_sample"])
				}),
			},
			{
				Name:  "fit",
				Usage: "stage 2, once: fit the states on the fitting-sample windows of every shard (or reuse an analysis's states)",
				Flags: []cli.Flag{work, workers, quiet,
					&cli.StringFlag{Name: "states-from", Usage: "reuse the states of analysis `NAME` (needs --states-db); the sample stage is then not needed"},
					&cli.StringFlag{Name: "states-db", Usage: "warehouse `FILE` holding the --states-from analysis"},
				},
				Action: func(c *cli.Context) error {
					if err := need(c, "work"); err != nil {
						return err
					}
					w, err := ingest.OpenWork(c.String("work"))
					if err != nil {
						return err
					}
					from, err := stageStatesFrom(c)
					if err != nil {
						return err
					}
					lowerGC()
					s, err := w.Fit(c.Context, c.Int("workers"), from, progress(c))
					if err != nil {
						return err
					}
					switch {
					case s.StatesFrom != nil:
						fmt.Fprintf(c.App.Writer, "states: %d, reused from analysis %q (id %d) in %s (%.1fs)\n", s.States, s.StatesFrom.Analysis, s.StatesFrom.AnalysisID, s.StatesFrom.DB, s.Seconds)
					case s.Elbow != nil:
						fmt.Fprintf(c.App.Writer, "states: %s (%.1fs)\n", elbowChoice(s.Elbow, s.States, s.FitWindows), s.Seconds)
					default:
						fmt.Fprintf(c.App.Writer, "states: %d (fixed by --states); fitted on %d windows (%.1fs)\n", s.States, s.FitWindows, s.Seconds)
					}
					fmt.Fprintf(c.App.Writer, "next: topostate stage compute --work %s --shard i/%d, for i = 1..%d\n", w.Dir, w.Manifest.Shards, w.Manifest.Shards)
					return nil
				},
			},
			{
				Name:  "compute",
				Usage: "stage 3 for one shard: assign every window, dwell times, transitions, Betti curves and events",
				Flags: []cli.Flag{work, shard, workers, quiet},
				Action: shardStage((*ingest.Work).Compute, func(s *ingest.ShardSummary) string {
					var rows int64
					for _, n := range s.Rows {
						rows += n
					}
					return fmt.Sprintf("%d series, %d rows", s.Series, rows)
				}),
			},
			{
				Name:  "surrogates",
				Usage: "after fit, per shard: the surrogate-data test runs of this shard (plan with --surrogates N)",
				Flags: []cli.Flag{work, shard, workers, quiet},
				Action: shardStage((*ingest.Work).Surrogates, func(s *ingest.ShardSummary) string {
					return fmt.Sprintf("%d surrogate runs", s.Series)
				}),
			},
			{
				Name:  "merge",
				Usage: "stage 4, once: write every table of the work folder into a warehouse as one analysis",
				Flags: []cli.Flag{work, quiet,
					&cli.StringFlag{Name: "db", Value: "topostate.duckdb", Usage: "warehouse `FILE` (created when missing)"},
					&cli.StringFlag{Name: "analysis", Usage: "`NAME` of this analysis in the warehouse (default analysis-<id>)"},
				},
				Action: func(c *cli.Context) error {
					if err := need(c, "work"); err != nil {
						return err
					}
					if err := checkAnalysisFlag(c); err != nil {
						return err
					}
					w, err := ingest.OpenWork(c.String("work"))
					if err != nil {
						return err
					}
					dbPath := c.String("db")
					sum, err := mergeInto(c, w, dbPath)
					if err != nil {
						return err
					}
					printSummary(c.App.Writer, dbPath, sum)
					return nil
				},
			},
		},
	}
}

// planFlags are the ingest options that shape the analysis; the warehouse
// file, name and Parquet copy belong to merge, and --states-from to fit.
func planFlags() []cli.Flag {
	skip := []string{"db", "analysis", "parquet", "states-from", "states-db", "quiet", "db-memory"}
	var out []cli.Flag
	for _, f := range ingestFlags() {
		if v, ok := f.(cli.VisibleFlag); ok && !v.IsVisible() {
			continue
		}
		if slices.Contains(skip, f.Names()[0]) {
			continue
		}
		out = append(out, f)
	}
	return out
}

// need refuses arguments and missing options (exit 2).
func need(c *cli.Context, flags ...string) error {
	if c.NArg() > 0 {
		return usagef("stage %s takes no arguments (got %q)", c.Command.Name, c.Args().First())
	}
	for _, f := range flags {
		if c.String(f) == "" {
			return usagef("stage %s needs --%s", c.Command.Name, f)
		}
	}
	return nil
}

// lowerGC collects garbage at 25 % heap growth unless GOGC is set, as
// ingest does: most of a stage's memory is one large pointer-free slice
// (the fitting sample, a series' windows).
func lowerGC() {
	if os.Getenv("GOGC") == "" {
		debug.SetGCPercent(25)
	}
}

func openShard(c *cli.Context) (*ingest.Work, ingest.Shard, error) {
	if err := need(c, "work", "shard"); err != nil {
		return nil, ingest.Shard{}, err
	}
	sh, err := ingest.ParseShard(c.String("shard"))
	if err != nil {
		return nil, sh, err
	}
	w, err := ingest.OpenWork(c.String("work"))
	return w, sh, err
}

// shardStage is the action of a stage run per shard (sample, compute,
// surrogates): open the work folder and the shard, run the stage, and print
// one line, "shard i/n: <what> (seconds)".
func shardStage(run func(*ingest.Work, context.Context, ingest.Shard, int, ingest.Progress) (*ingest.ShardSummary, error), what func(*ingest.ShardSummary) string) cli.ActionFunc {
	return func(c *cli.Context) error {
		w, sh, err := openShard(c)
		if err != nil {
			return err
		}
		lowerGC()
		s, err := run(w, c.Context, sh, c.Int("workers"), progress(c))
		if err != nil {
			return err
		}
		fmt.Fprintf(c.App.Writer, "shard %s: %s (%.1fs)\n", s.Shard, what(s), s.Seconds)
		return nil
	}
}

func progress(c *cli.Context) ingest.Progress {
	if p := newProgress(c.App.ErrWriter, c.Bool("quiet")); p != nil {
		return p
	}
	return nil
}

// stageStatesFrom loads the --states-from analysis of stage fit from its
// --states-db file, opened read-only.
func stageStatesFrom(c *cli.Context) (*ingest.StatesFrom, error) {
	name, file := c.String("states-from"), c.String("states-db")
	switch {
	case name == "" && file == "":
		return nil, nil
	case name == "" || file == "":
		return nil, usagef("stage fit: give both --states-from NAME and --states-db FILE, or neither")
	}
	if _, err := os.Stat(file); err != nil {
		return nil, usagef("--states-db: %v", err)
	}
	abs, err := filepath.Abs(file)
	if err != nil {
		return nil, err
	}
	db, err := openRead(c.Context, file)
	if err != nil {
		return nil, err
	}
	defer db.Close()
	return ingest.LoadStates(c.Context, db, abs, name)
}

func mergeInto(c *cli.Context, w *ingest.Work, dbPath string) (*ingest.Summary, error) {
	created := missing(dbPath)
	db, err := schema.Open(dbPath, false, nil)
	if err != nil {
		return nil, err // the lock is another run's: never remove its file
	}
	defer db.Close()
	sum, err := w.Merge(c.Context, db, c.String("analysis"), progress(c))
	if err != nil && created {
		discardIfEmpty(db, dbPath) // see newfile.go
	}
	return sum, err
}
