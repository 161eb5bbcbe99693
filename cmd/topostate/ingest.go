package main

import (
	"fmt"
	"io"
	"os"
	"runtime"
	"runtime/debug"
	"strings"
	"time"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/ingest"
	"github.com/topostate/topostate/schema"
)

func ingestFlags() []cli.Flag {
	d := ingest.Defaults()
	flags := []cli.Flag{
		&cli.StringFlag{Name: "input", Aliases: []string{"i"}, Usage: "cohort `FOLDER`: participants.tsv and sub-<label>[_ses-<label>]_..._timeseries.tsv|csv|npy files (or _bold.nii[.gz] with --atlas)"},
		&cli.StringFlag{Name: "db", Value: "topostate.duckdb", Usage: "warehouse `FILE` (created when missing)"},
		&cli.StringFlag{Name: "analysis", Usage: "`NAME` of this analysis in the warehouse (default analysis-<id>)"},
		&cli.Float64Flag{Name: "tr", DefaultText: "each file's sidecar", Usage: fmt.Sprintf("repetition time in `SECONDS` (%g-%g) for every file, overriding sidecars; default: RepetitionTime from each file's JSON sidecar, else a NIfTI header's pixdim[4]", ingest.MinTR, ingest.MaxTR)},
		&cli.StringFlag{Name: "atlas", Usage: "label image `FILE` (.nii or .nii.gz) on the grid of the sub-<label>_..._bold.nii[.gz] images; each label's voxels are averaged into one region"},
		&cli.StringFlag{Name: "atlas-labels", Usage: "`TSV` of label<TAB>name naming the atlas's regions (default label_<n>); also names the columns of .npy arrays, in ascending label order"},
		&cli.IntFlag{Name: "window", Value: d.Window, DefaultText: "from --min-freq", Usage: "sliding-window width in `N` time points; by default the fewest points spanning 1/--min-freq seconds at the cohort's shortest TR (a window shorter than the slowest period kept lets that frequency alone swing the correlations: Leonardi & Van De Ville 2015)"},
		&cli.Float64Flag{Name: "min-freq", Value: d.MinFreq, Usage: "slowest frequency the series keep after high-pass filtering, in `HZ`; sets the default window (0.01 Hz, the usual cutoff: 100 s windows)"},
		&cli.IntFlag{Name: "step", Value: d.Step, Usage: "window step in `N` time points (1: every window; the fitting sample thins the overlap)"},
		&cli.Float64Flag{Name: "window-seconds", DefaultText: "use --window", Usage: "sliding-window width in `SECONDS` instead of --window: each series gets round(SECONDS / its TR) time points (for a cohort of mixed TRs; recorded per series in inputs.window_points)"},
		&cli.Float64Flag{Name: "step-seconds", DefaultText: "use --step", Usage: "window step in `SECONDS` with --window-seconds: round(SECONDS / TR) time points per series, at least 1"},
		&cli.StringFlag{Name: "taper", Value: d.Taper, Usage: "window weights `MODE`: none (rectangle) or gauss (rectangle convolved with a Gaussian)"},
		&cli.Float64Flag{Name: "taper-sigma", Value: d.TaperSD, DefaultText: "window/10", Usage: "Gaussian sigma of the taper, in `N` time points; by default a tenth of the window, so the outer fifth at each end is tapered and the middle three fifths keep full weight"},
		&cli.BoolFlag{Name: "detrend", Usage: "remove a linear trend from each region before windowing"},
		&cli.IntFlag{Name: "smooth-k", Usage: "cosine-series smoothing with terms 0..`K` (0: none)"},
		&cli.Float64Flag{Name: "smooth-sigma", Usage: "heat-kernel weight `SIGMA` of the cosine series"},
		&cli.BoolFlag{Name: "fisher-z", Usage: "cluster Fisher z = atanh(r) instead of r; state networks are averaged in z"},
		&cli.IntFlag{Name: "states", Usage: "fixed number of states `K` (0: pick k by --k-rule; 1: one state, no dynamics)"},
		&cli.IntFlag{Name: "states-min", Value: d.StatesMin, Usage: "smallest `K` of the scan (1 lets the rule conclude: no evidence of more than one state)"},
		&cli.IntFlag{Name: "states-max", Value: d.StatesMax, Usage: "largest `K` of the scan"},
		&cli.StringFlag{Name: "k-rule", Value: d.KRule, Usage: "`RULE` that picks k from the scan: strength (prediction strength), gap (gap statistic), chord or second-diff (elbow of W(k)); the default had the best measured accuracy on simulated cohorts with 1, 2, 3 and 5 states (README \"Number of states\")"},
		&cli.IntFlag{Name: "strength-splits", Value: d.StrengthSplits, Usage: "prediction strength: `N` random halvings of the fitting windows, each half predicting the other"},
		&cli.IntFlag{Name: "strength-windows", Value: d.StrengthWindows, Usage: "prediction strength uses at most `N` of the fitting windows (a uniform subsample)"},
		&cli.StringFlag{Name: "strength-halving", Value: d.StrengthHalving, Usage: "prediction strength halves the fitting windows by `WHAT`: window (one by one, so overlapping windows of a subject fall on both sides) or subject (all windows of a subject in one half: fewer one-state cohorts read as 2, but fewer 2-, 3- and 5-state ones found)"},
		&cli.Float64Flag{Name: "strength-threshold", Value: d.StrengthThreshold, Usage: "prediction strength a k must reach to be picked (`PS`; 0.8-0.9 is the published range; 0.85 did best of 0.8, 0.85 and 0.9 in a first measurement)"},
		&cli.IntFlag{Name: "gap-references", Value: d.GapReferences, Usage: "`B` uniform reference sets of the gap statistic"},
		&cli.IntFlag{Name: "gap-windows", Value: d.GapWindows, Usage: "the gap statistic uses at most `N` of the fitting windows (a uniform subsample)"},
		&cli.IntFlag{Name: "restarts", Value: d.Restarts, Usage: "k-means restarts: the best of `N` fits is kept (3: on simulated cohorts with 3 and 5 states, 3 restarts always reached the best W(k) found with up to 10; scripts/convergence)"},
		&cli.IntFlag{Name: "scan-restarts", Value: d.ScanRestarts, Usage: "`N` restarts per k of the scan of k (0: --restarts); the picked k gets the rest up to --restarts"},
		&cli.IntFlag{Name: "max-iter", Value: d.MaxIter, Usage: "at most `N` k-means iterations per restart (50: the best restart converged within 25 on simulated cohorts, about 13 on average; a fit that reaches the cap is reported)"},
		&cli.Uint64Flag{Name: "seed", Value: d.Seed, Usage: "`SEED` of every random choice; same seed, same results"},
		&cli.StringFlag{Name: "distance", Value: d.Distance, Usage: "k-means distance `NAME`: euclidean (k-means proper: squared Euclidean distance, centroids are means) or manhattan (L1, centroids are medians); euclidean is the default because the rules for the number of states are defined on its W(k)"},
		&cli.IntFlag{Name: "fit-windows", Value: d.FitMax, Usage: "at most `N` windows are used to fit the states (bounds the fit's time and memory whatever the cohort size)"},
		&cli.StringFlag{Name: "fit-memory", Value: optionSize(d.FitMemory), Usage: "at most `SIZE` bytes (e.g. 1GiB, 512MiB) of fitting windows: with p regions a window holds p(p-1)/2 float32 values, so at most SIZE / (2 p(p-1)) windows, or --fit-windows if fewer; 0: no bound but --fit-windows"},
		&cli.StringFlag{Name: "fit-sample", Value: d.FitSample, Usage: "`WHICH` windows the states are fitted on (at most --fit-windows): peaks (windows at local maxima of each series' window variance) or all"},
		replicationFlags()[0], replicationFlags()[1],
		&cli.IntFlag{Name: "core-timepoints", Value: d.CoreTimepoints, Usage: "`N` core time points (under windows of one state only) per subject and state for the core networks of the group topology test (0: the window width; with --window-seconds, the widest window in points of any series)"},
		&cli.StringFlag{Name: "grid", Value: d.Grid, Usage: "Betti-curve thresholds `lo:hi:n` on the correlation scale"},
		&cli.StringFlag{Name: "on-bad-subject", Value: d.OnBadSubject, Usage: "`POLICY` fail, or skip a series with problems (recorded in excluded_inputs)"},
		&cli.StringFlag{Name: "constant-region", Value: d.ConstantRegion, Usage: "`POLICY` fail, or drop a constant region from every subject (recorded in regions)"},
		&cli.StringFlag{Name: "encoding", Value: "utf-8", Usage: "text `ENCODING` of participants.tsv: utf-8, or latin1 (ISO-8859-1 / Windows-1252, as some spreadsheets save; converted to UTF-8)"},
		&cli.StringFlag{Name: "parquet", Usage: "also write every table of this analysis as Parquet into `FOLDER`"},
		&cli.StringFlag{Name: "db-memory", Value: optionSize(d.DBMemory), Usage: "DuckDB's memory limit `SIZE` while writing (e.g. 1GiB); beyond it the rows being written spill to the run's temporary folder; 0: DuckDB's default (80% of the machine's memory)"},
		&cli.IntFlag{Name: "workers", Value: 0, Usage: fmt.Sprintf("`N` parallel workers (0: all %d cores); results do not depend on it", runtime.GOMAXPROCS(0))},
		&cli.BoolFlag{Name: "quiet", Aliases: []string{"q"}, Usage: "no progress bar"},
	}
	flags = append(flags, surrogateFlags()...)
	return append(flags,
		// For the benchmark harness (scripts/bench) and profiling.
		&cli.StringFlag{Name: "cpuprofile", Hidden: true, Usage: "write a pprof CPU profile of the run to `FILE`"},
		&cli.StringFlag{Name: "memprofile", Hidden: true, Usage: "write a pprof heap profile at the end of the run to `FILE`"},
		&cli.StringFlag{Name: "timings", Hidden: true, Usage: "write the phase and worker times as JSON to `FILE`"},
	)
}

// checkWindowFlags refuses a window given both in time points and in
// seconds (and a step likewise).
func checkWindowFlags(c *cli.Context) error {
	if c.IsSet("window") && c.IsSet("window-seconds") {
		return usagef("give the window once: --window N (time points) or --window-seconds S, not both")
	}
	if c.IsSet("step") && c.IsSet("step-seconds") {
		return usagef("give the step once: --step N (time points) or --step-seconds S, not both")
	}
	return nil
}

// optionSize writes a size the way --fit-memory and --db-memory read it.
func optionSize(n int64) string {
	switch {
	case n > 0 && n%(1<<30) == 0:
		return fmt.Sprintf("%dGiB", n>>30)
	case n > 0 && n%(1<<20) == 0:
		return fmt.Sprintf("%dMiB", n>>20)
	}
	return fmt.Sprint(n)
}

func ingestOptions(c *cli.Context) (ingest.Options, error) {
	fitMem, err := sizeFlag(c, "fit-memory")
	if err != nil {
		return ingest.Options{}, err
	}
	dbMem, err := sizeFlag(c, "db-memory")
	if err != nil {
		return ingest.Options{}, err
	}
	return ingest.Options{FitMemory: fitMem, DBMemory: dbMem, CacheSeries: true,
		Input: c.String("input"), TR: c.Float64("tr"), Atlas: c.String("atlas"), AtlasLabels: c.String("atlas-labels"),
		Window: c.Int("window"), MinFreq: c.Float64("min-freq"), Step: c.Int("step"), WindowSeconds: c.Float64("window-seconds"), StepSeconds: c.Float64("step-seconds"), Taper: c.String("taper"), TaperSD: c.Float64("taper-sigma"),
		Detrend: c.Bool("detrend"), SmoothK: c.Int("smooth-k"), SmoothSD: c.Float64("smooth-sigma"), FisherZ: c.Bool("fisher-z"),
		States: c.Int("states"), StatesMin: c.Int("states-min"), StatesMax: c.Int("states-max"),
		KRule: c.String("k-rule"), GapReferences: c.Int("gap-references"), GapWindows: c.Int("gap-windows"),
		StrengthSplits: c.Int("strength-splits"), StrengthWindows: c.Int("strength-windows"), StrengthThreshold: c.Float64("strength-threshold"), StrengthHalving: c.String("strength-halving"),
		Restarts: c.Int("restarts"), ScanRestarts: c.Int("scan-restarts"), MaxIter: c.Int("max-iter"), Seed: c.Uint64("seed"), Distance: c.String("distance"),
		FitMax: c.Int("fit-windows"), FitSample: c.String("fit-sample"), Grid: c.String("grid"),
		CoreTimepoints: c.Int("core-timepoints"),
		OnBadSubject:   c.String("on-bad-subject"), ConstantRegion: c.String("constant-region"), Encoding: strings.TrimPrefix(c.String("encoding"), "utf-8"),
		Analysis: c.String("analysis"), Parquet: c.String("parquet"), Workers: c.Int("workers"),
		Surrogates: c.Int("surrogates"), SurrogateFitWindows: c.Int("surrogate-fit-windows"), SurrogateRestarts: c.Int("surrogate-restarts"),
	}, nil
}

// sizeFlag reads a memory size option; a flag the command does not have is
// its default.
func sizeFlag(c *cli.Context, name string) (int64, error) {
	if !c.IsSet(name) && c.String(name) == "" {
		d := ingest.Defaults()
		if name == "fit-memory" {
			return d.FitMemory, nil
		}
		return d.DBMemory, nil
	}
	n, err := ingest.ParseBytes(c.String(name))
	if err != nil {
		return 0, usagef("--%s %v", name, err)
	}
	return n, nil
}

// checkOptions is ingest.Options.Check plus what only the command line
// knows: an explicit --tr 0 (Options.TR 0 means "read each file's TR").
func checkOptions(c *cli.Context, o ingest.Options) error {
	if c.IsSet("tr") && o.TR == 0 {
		return usagef("%v; leave --tr out to read RepetitionTime from each file's sidecar", ingest.CheckTR(0, "--tr 0"))
	}
	if err := checkAnalysisFlag(c); err != nil {
		return err
	}
	return o.Check()
}

// checkAnalysisFlag refuses --analysis NAME where NAME cannot name a new
// analysis (schema.CheckAnalysisName), and an explicit empty name.
func checkAnalysisFlag(c *cli.Context) error {
	name := c.String("analysis")
	if c.IsSet("analysis") && name == "" {
		return usagef("--analysis \"\": an analysis name cannot be empty; leave --analysis out for the default name analysis-<id>")
	}
	if err := schema.CheckAnalysisName(name); err != nil {
		return usageError{err}
	}
	return nil
}

func ingestCommand() *cli.Command {
	return &cli.Command{
		Name:      "ingest",
		Usage:     "analyse a cohort and store every result as one analysis in a warehouse file",
		ArgsUsage: " ",
		Flags:     ingestFlags(),
		Action: func(c *cli.Context) error {
			if c.NArg() > 0 {
				return usagef("ingest takes no arguments (got %q); name the cohort with --input", c.Args().First())
			}
			o, err := ingestOptions(c)
			if err != nil {
				return err
			}
			if err := checkWindowFlags(c); err != nil {
				return err
			}
			if err := checkOptions(c, o); err != nil {
				return err
			}
			if err := checkReplicationFlags(c); err != nil {
				return err
			}
			if os.Getenv("GOGC") == "" {
				// Most of the memory of a cohort-scale run is the fitting
				// sample, one large pointer-free slice the collector never
				// scans; collecting at 25 % growth instead of 100 % keeps the
				// per-series garbage from doubling the footprint, at a
				// negligible cost in collection work.
				debug.SetGCPercent(25)
			}
			stop, err := startProfiles(c.String("cpuprofile"))
			if err != nil {
				return err
			}
			sum, err := runIngest(c, o, c.String("db"), c.App.Writer)
			if perr := stop(c.String("memprofile")); err == nil {
				err = perr
			}
			if err == nil && c.String("timings") != "" {
				err = writeTimings(c.String("timings"), sum)
			}
			return err
		},
	}
}

// runIngest validates the whole cohort first, so a bad cohort never opens
// the file for writing; a file this run created is removed again when the
// run fails and nothing was ever committed to it (see newfile.go).
func runIngest(c *cli.Context, o ingest.Options, dbPath string, out io.Writer) (*ingest.Summary, error) {
	start := time.Now()
	cohort, err := ingest.LoadCohort(o)
	if err != nil {
		return nil, err
	}
	defer cohort.Close() // the run's temporary folder: parsed series, DuckDB's spill
	if err := c.Context.Err(); err != nil {
		return nil, err // interrupted while validating: do not create or open the file
	}
	validate := ingest.PhaseTime{Phase: "validate", Seconds: time.Since(start).Seconds()}
	sum, err := ingestInto(c, cohort, o, dbPath)
	if err != nil {
		return nil, err
	}
	sum.PhaseTimes = append([]ingest.PhaseTime{validate}, sum.PhaseTimes...)
	printSummary(out, dbPath, sum)
	return sum, nil
}

func ingestInto(c *cli.Context, cohort *ingest.Cohort, o ingest.Options, dbPath string) (sum *ingest.Summary, err error) {
	created := missing(dbPath)
	db, err := schema.Open(dbPath, false, nil)
	if err != nil {
		return nil, err // the lock is another run's: never remove its file
	}
	defer db.Close()
	defer func() {
		if err != nil && created {
			discardIfEmpty(db, dbPath)
		}
	}()
	if o.StatesFrom, err = loadStatesFrom(c, db, dbPath); err != nil {
		return nil, err
	}
	var prog ingest.Progress
	if p := newProgress(c.App.ErrWriter, c.Bool("quiet")); p != nil {
		prog = p
	}
	return ingest.Run(c.Context, db, cohort, o, prog)
}

func printSummary(w io.Writer, dbPath string, s *ingest.Summary) {
	fmt.Fprintf(w, "analysis %q (id %d) written to %s\n", s.Name, s.AnalysisID, dbPath)
	fmt.Fprintf(w, "  series analysed  %d", s.Subjects)
	if s.Excluded > 0 {
		fmt.Fprintf(w, " (%d excluded: see table excluded_inputs)", s.Excluded)
	}
	fmt.Fprintln(w)
	fmt.Fprintf(w, "  regions          %d", s.Regions)
	if len(s.Dropped) > 0 {
		fmt.Fprintf(w, " (dropped as constant: %s)", strings.Join(s.Dropped, ", "))
	}
	fmt.Fprintln(w)
	if s.StatesFrom != nil {
		fmt.Fprintf(w, "  windows          %d (none sampled: the states are reused)\n", s.Windows)
	} else {
		fmt.Fprintf(w, "  windows          %d (%d used to fit the states)\n", s.Windows, s.FitWindows)
	}
	if e := s.Elbow; e != nil {
		fmt.Fprintf(w, "  states           %s\n", elbowChoice(e, s.States, s.FitWindows))
	} else if f := s.StatesFrom; f != nil {
		fmt.Fprintf(w, "  states           %d, reused from analysis %q (id %d) in %s\n", s.States, f.Analysis, f.AnalysisID, f.DB)
	} else {
		fmt.Fprintf(w, "  states           %d (fixed by --states)\n", s.States)
	}
	occ := make([]string, len(s.Occupancies))
	for i, v := range s.Occupancies {
		occ[i] = fmt.Sprintf("%d: %.2f", i+1, v)
	}
	fmt.Fprintf(w, "  mean occupancy   %s\n", strings.Join(occ, "  "))
	if len(s.Surrogates) > 0 {
		printSurrogates(w, "  surrogate test   ", "                   ", toShown(s.Surrogates))
	}
	for _, msg := range s.Warnings {
		fmt.Fprintf(w, "  warning          %s\n", msg)
	}
	var total float64
	parts := make([]string, len(s.PhaseTimes))
	for i, p := range s.PhaseTimes {
		total += p.Seconds
		parts[i] = fmt.Sprintf("%s %.1fs", p.Phase, p.Seconds)
	}
	fmt.Fprintf(w, "  time             %.1fs (%s)\n", total, strings.Join(parts, ", "))
}
