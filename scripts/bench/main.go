// Command bench measures topostate ingest on a generated cohort.
//
//	go run ./scripts/bench                    # a typical cohort: 300 series x 960 time points x 100 regions
//	go run ./scripts/bench -subjects 50       # a smaller cohort
//	go run ./scripts/bench -scale             # the scale cohort: 1,000 series x 1,000 time points x 200 regions
//	go run ./scripts/bench -scale -queries    # ... then time every bundled query, the report and export on it
//	go run ./scripts/bench -sweep             # the region sweep of README.md "Performance": 100..400 regions
//	go run ./scripts/bench -check-workers     # also ingest with --workers 1 and compare every table
//	go run ./scripts/bench -reference         # also run scripts/bench/reference.py (NumPy/scikit-learn)
//
// It builds the topostate command, generates each cohort once into the
// cache folder (scripts/bench-cache/, ignored by git) with
// `topostate simulate --truth`, runs `topostate ingest` under
// /usr/bin/time -v (GNU time; installed with apt-get when missing and
// possible), and prints the phase times, the worker-time split of the
// parallel stages, the k-means fits, wall and CPU time, peak resident
// memory, windows per second and the adjusted Rand index of the states
// against the generator's truth, as a table and as JSON (-json FILE, or
// stdout with -json -).
//
// The data are invented (topostate's own generator). Timings depend on the
// machine and on its load: the 1-minute load average is recorded before and
// after each run.
package main

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"syscall"
	"text/tabwriter"
	"time"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/schema"
)

// size is one generated cohort.
type size struct {
	Subjects   int `json:"subjects"`
	Timepoints int `json:"timepoints"`
	Regions    int `json:"regions"`
}

func (s size) String() string {
	return fmt.Sprintf("%d x %d x %d", s.Subjects, s.Timepoints, s.Regions)
}

type config struct {
	root, cache, bin string
	states           int
	seed             uint64
	tr               float64
	window, step     int
	workers          int
	extra            []string
	keep             bool
	reference        bool
	python           string
	checkWorkers     bool
	queries          bool
}

// result is one measured ingest.
type result struct {
	Size          size           `json:"size"`
	Cohort        string         `json:"cohort"`
	Command       string         `json:"command"`
	Date          string         `json:"date"`
	Machine       machine        `json:"machine"`
	LoadBefore    float64        `json:"load1_before"`
	LoadAfter     float64        `json:"load1_after"`
	WallSeconds   float64        `json:"wall_seconds"`
	UserSeconds   float64        `json:"user_seconds"`
	SystemSeconds float64        `json:"system_seconds"`
	PeakRSSMiB    float64        `json:"peak_rss_mib"`
	RSSSource     string         `json:"peak_rss_source"`
	Windows       int64          `json:"windows"`
	FitWindows    int            `json:"fit_windows"`
	States        int            `json:"states"`
	WindowsPerSec float64        `json:"windows_per_second"`
	ARI           *float64       `json:"ari_vs_truth,omitempty"`
	Timings       timings        `json:"timings"`
	DBBytes       int64          `json:"warehouse_bytes"`
	Reference     map[string]any `json:"reference,omitempty"`
	// SameWithOneWorker: every table of a second ingest with --workers 1
	// is identical (row counts and order-free row hashes); nil: not checked.
	SameWithOneWorker *bool    `json:"same_with_workers_1,omitempty"`
	WorkersDiff       []string `json:"workers_diff,omitempty"`
	Queries           []timed  `json:"queries,omitempty"`
}

// timings is what `topostate ingest --timings` writes.
type timings struct {
	Subjects    int         `json:"subjects"`
	Regions     int         `json:"regions"`
	States      int         `json:"states"`
	Windows     int64       `json:"windows"`
	FitWindows  int         `json:"fit_windows"`
	Phases      []phaseTime `json:"phases"`
	WorkerTimes []phaseTime `json:"worker_times"`
	Fits        []fitStat   `json:"fits"`
	Workers     int         `json:"gomaxprocs"`
}

type phaseTime struct {
	Phase   string  `json:"phase"`
	Seconds float64 `json:"seconds"`
}

type fitStat struct {
	K          int  `json:"k"`
	Restarts   int  `json:"restarts"`
	Iterations int  `json:"iterations"`
	Final      bool `json:"final"`
}

type machine struct {
	CPU      string `json:"cpu"`
	Cores    int    `json:"cores"`
	MemGiB   int    `json:"mem_gib"`
	OS       string `json:"os"`
	Go       string `json:"go"`
	Hostname string `json:"-"`
}

func main() {
	if err := run(os.Args[1:], os.Stdout, os.Stderr); err != nil {
		fmt.Fprintln(os.Stderr, "bench:", err)
		os.Exit(1)
	}
}

func run(args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("bench", flag.ContinueOnError)
	subjects := fs.Int("subjects", 300, "subjects in the cohort")
	timepoints := fs.Int("timepoints", 960, "time points per series")
	regions := fs.Int("regions", 100, "regions per series")
	states := fs.Int("states", 4, "latent states of the generator")
	seed := fs.Uint64("seed", 1, "generator seed")
	tr := fs.Float64("tr", 0.9, "repetition time written to the sidecars")
	scale := fs.Bool("scale", false, "the scale cohort: 1,000 series x 1,000 time points x 200 regions (overrides -subjects, -timepoints, -regions)")
	sweepSubjects := fs.Int("sweep-subjects", 200, "series per cohort of -sweep (1,000 time points each)")
	checkWorkers := fs.Bool("check-workers", false, "also ingest with --workers 1 and check that every table is identical")
	warehouse := fs.String("warehouse", "", "only time the queries, the report and export on this existing warehouse FILE (one -queries run already built it)")
	timeQs := fs.Bool("queries", false, "then time every bundled query (its defaults; groups A and B, covariate score), the report and export of every table on the warehouse")
	window := fs.Int("window", 50, "ingest --window")
	step := fs.Int("step", 1, "ingest --step")
	workers := fs.Int("workers", 0, "ingest --workers (0: all cores)")
	cache := fs.String("cache", "", "cache folder (default scripts/bench-cache in the repository)")
	jsonOut := fs.String("json", "", "write the results as JSON to this file (- for stdout)")
	sweep := fs.Bool("sweep", false, "measure the region sweep: -sweep-subjects series x 1,000 time points x 100, 200, 300 and 400 regions")
	extra := fs.String("ingest-args", "", "more ingest options, space-separated (e.g. \"--scan-restarts 2\")")
	keep := fs.Bool("keep", false, "keep the warehouse files in the cache folder")
	reference := fs.Bool("reference", false, "also run scripts/bench/reference.py (needs python3 with numpy, scipy, scikit-learn)")
	python := fs.String("python", "/usr/bin/python3", "Python for -reference")
	if err := fs.Parse(args); err != nil {
		return err
	}
	root, err := moduleRoot()
	if err != nil {
		return err
	}
	cfg := config{root: root, cache: *cache, states: *states, seed: *seed, tr: *tr, window: *window,
		step: *step, workers: *workers, keep: *keep || *timeQs, reference: *reference, python: *python,
		checkWorkers: *checkWorkers, queries: *timeQs}
	if cfg.cache == "" {
		cfg.cache = filepath.Join(root, "scripts", "bench-cache")
	}
	if *extra != "" {
		cfg.extra = strings.Fields(*extra)
	}
	if err := os.MkdirAll(cfg.cache, 0o755); err != nil {
		return err
	}
	cfg.bin = filepath.Join(cfg.cache, "bin", "topostate")
	fmt.Fprintln(stderr, "bench: building topostate ...")
	build := exec.Command("go", "build", "-o", cfg.bin, "./cmd/topostate")
	build.Dir, build.Stdout, build.Stderr = root, stderr, stderr
	if err := build.Run(); err != nil {
		return fmt.Errorf("go build: %w", err)
	}
	if *warehouse != "" {
		dir, err := os.MkdirTemp(cfg.cache, "queries-")
		if err != nil {
			return err
		}
		defer os.RemoveAll(dir)
		r := result{Date: time.Now().UTC().Format(time.RFC3339), Machine: describeMachine()}
		if st, err := os.Stat(*warehouse); err == nil {
			r.DBBytes = st.Size()
		}
		q, err := timeQueries(cfg, *warehouse, dir, stderr)
		r.Queries = q
		printQueries(stdout, r)
		if err != nil {
			return err
		}
		if *jsonOut != "" {
			b, _ := json.MarshalIndent(r, "", "  ")
			return os.WriteFile(*jsonOut, append(b, '\n'), 0o644)
		}
		return nil
	}
	timeCmd := findGNUTime(stderr)

	sizes := []size{{*subjects, *timepoints, *regions}}
	if *scale {
		sizes = []size{scaleSize}
	}
	if *sweep {
		sizes = sweepSizes(*sweepSubjects)
	}
	var results []result
	for _, sz := range sizes {
		r, err := measure(cfg, sz, timeCmd, stderr)
		if err != nil {
			return fmt.Errorf("%v: %w", sz, err)
		}
		results = append(results, r)
		if !*sweep {
			printResult(stdout, r)
			printQueries(stdout, r)
		}
	}
	if *sweep {
		printSweep(stdout, results)
	}
	if *jsonOut != "" {
		var v any = results
		if len(results) == 1 {
			v = results[0]
		}
		b, err := json.MarshalIndent(v, "", "  ")
		if err != nil {
			return err
		}
		b = append(b, '\n')
		if *jsonOut == "-" {
			_, err = stdout.Write(b)
		} else {
			err = os.WriteFile(*jsonOut, b, 0o644)
		}
		if err != nil {
			return err
		}
	}
	return nil
}

// scaleSize is the cohort of the performance goal (README "Performance"):
// 1,000 series x 1,000 time points x 200 regions, 951,000 windows of
// 19,900 region pairs at window 50.
var scaleSize = size{1000, 1000, 200}

// sweepSizes: n series x 1,000 time points at 100, 200, 300 and 400
// regions (4,950 to 79,800 region pairs per window).
func sweepSizes(n int) []size {
	return []size{{n, 1000, 100}, {n, 1000, 200}, {n, 1000, 300}, {n, 1000, 400}}
}

func moduleRoot() (string, error) {
	dir, err := os.Getwd()
	if err != nil {
		return "", err
	}
	for {
		if _, err := os.Stat(filepath.Join(dir, "go.mod")); err == nil {
			return dir, nil
		}
		parent := filepath.Dir(dir)
		if parent == dir {
			return "", errors.New("run from inside the topostate repository (no go.mod found)")
		}
		dir = parent
	}
}

// findGNUTime returns the path of GNU time, installing it with apt-get when
// it is missing and that is possible, or "" (peak memory then comes from
// the child's rusage).
func findGNUTime(stderr io.Writer) string {
	const path = "/usr/bin/time"
	if isGNUTime(path) {
		return path
	}
	if _, err := exec.LookPath("apt-get"); err == nil && os.Geteuid() == 0 {
		fmt.Fprintln(stderr, "bench: installing GNU time (apt-get install time) ...")
		for _, args := range [][]string{{"install", "-y", "time"}, {"update"}, {"install", "-y", "time"}} {
			c := exec.Command("apt-get", args...)
			c.Env = append(os.Environ(), "DEBIAN_FRONTEND=noninteractive")
			if err := c.Run(); err == nil && args[0] == "install" && isGNUTime(path) {
				return path
			}
		}
	}
	fmt.Fprintln(stderr, "bench: GNU time not available; peak memory is taken from the process's rusage instead")
	return ""
}

func isGNUTime(path string) bool {
	out, err := exec.Command(path, "--version").CombinedOutput()
	return err == nil && strings.Contains(string(out), "GNU")
}

// cohort returns the cached cohort of this size, generating it when
// missing.
func cohort(cfg config, sz size, stderr io.Writer) (string, error) {
	name := fmt.Sprintf("cohort-n%d-t%d-p%d-k%d-tr%g-seed%d", sz.Subjects, sz.Timepoints, sz.Regions, cfg.states, cfg.tr, cfg.seed)
	dir := filepath.Join(cfg.cache, name)
	if _, err := os.Stat(filepath.Join(dir, "truth.tsv")); err == nil {
		return dir, nil
	}
	tmp := dir + ".partial"
	os.RemoveAll(tmp)
	fmt.Fprintf(stderr, "bench: generating %s ...\n", name)
	c := exec.Command(cfg.bin, "simulate", "--out", tmp, "--subjects", strconv.Itoa(sz.Subjects),
		"--timepoints", strconv.Itoa(sz.Timepoints), "--regions", strconv.Itoa(sz.Regions),
		"--states", strconv.Itoa(cfg.states), "--tr", fmt.Sprint(cfg.tr), "--seed", fmt.Sprint(cfg.seed), "--truth")
	c.Stdout, c.Stderr = stderr, stderr
	if err := c.Run(); err != nil {
		return "", fmt.Errorf("simulate: %w", err)
	}
	if err := os.Rename(tmp, dir); err != nil {
		return "", err
	}
	return dir, nil
}

func measure(cfg config, sz size, timeCmd string, stderr io.Writer) (result, error) {
	dir, err := cohort(cfg, sz, stderr)
	if err != nil {
		return result{}, err
	}
	runDir, err := os.MkdirTemp(cfg.cache, "run-")
	if err != nil {
		return result{}, err
	}
	if !cfg.keep {
		defer os.RemoveAll(runDir)
	}
	db := filepath.Join(runDir, "bench.duckdb")
	tj := filepath.Join(runDir, "timings.json")
	args := []string{"ingest", "--input", dir, "--db", db, "--window", strconv.Itoa(cfg.window),
		"--step", strconv.Itoa(cfg.step), "--workers", strconv.Itoa(cfg.workers), "--quiet", "--timings", tj}
	args = append(args, cfg.extra...)
	r := result{Size: sz, Cohort: dir, Date: time.Now().UTC().Format(time.RFC3339), Machine: describeMachine(),
		Command: "topostate " + strings.Join(args, " ")}
	r.LoadBefore = load1()
	fmt.Fprintf(stderr, "bench: %s: %s\n", sz, r.Command)
	var c *exec.Cmd
	var timeOut strings.Builder
	if timeCmd != "" {
		c = exec.Command(timeCmd, append([]string{"-v", cfg.bin}, args...)...)
	} else {
		c = exec.Command(cfg.bin, args...)
	}
	var errOut strings.Builder
	c.Stdout = io.Discard
	c.Stderr = &errOut
	start := time.Now()
	runErr := c.Run()
	wall := time.Since(start).Seconds()
	r.LoadAfter = load1()
	if runErr != nil {
		return r, fmt.Errorf("ingest failed: %v\n%s", runErr, errOut.String())
	}
	if timeCmd != "" {
		timeOut.WriteString(errOut.String())
		parseGNUTime(timeOut.String(), &r)
		r.RSSSource = "GNU time -v"
	} else {
		r.WallSeconds = wall
		if ru, ok := c.ProcessState.SysUsage().(*syscall.Rusage); ok {
			r.PeakRSSMiB = float64(ru.Maxrss) / 1024 // kilobytes on Linux
			r.UserSeconds = time.Duration(ru.Utime.Nano()).Seconds()
			r.SystemSeconds = time.Duration(ru.Stime.Nano()).Seconds()
		}
		r.RSSSource = "rusage"
	}
	b, err := os.ReadFile(tj)
	if err != nil {
		return r, err
	}
	if err := json.Unmarshal(b, &r.Timings); err != nil {
		return r, err
	}
	r.Windows, r.FitWindows, r.States = r.Timings.Windows, r.Timings.FitWindows, r.Timings.States
	if r.WallSeconds > 0 {
		r.WindowsPerSec = float64(r.Windows) / r.WallSeconds
	}
	if st, err := os.Stat(db); err == nil {
		r.DBBytes = st.Size()
	}
	if ari, err := stateRecovery(db, filepath.Join(dir, "truth.tsv"), cfg.window, cfg.step); err != nil {
		fmt.Fprintf(stderr, "bench: state recovery not measured: %v\n", err)
	} else {
		r.ARI = &ari
	}
	if cfg.checkWorkers {
		if err := compareWorkers(cfg, dir, db, args, &r, stderr); err != nil {
			return r, err
		}
	}
	if cfg.queries {
		q, err := timeQueries(cfg, db, runDir, stderr)
		if err != nil {
			return r, err
		}
		r.Queries = q
	}
	if cfg.reference {
		ref, err := runReference(cfg, dir, stderr)
		if err != nil {
			fmt.Fprintf(stderr, "bench: reference pipeline: %v\n", err)
		} else {
			r.Reference = ref
		}
	}
	return r, nil
}

// parseGNUTime reads the lines of `time -v` it needs.
func parseGNUTime(out string, r *result) {
	sc := bufio.NewScanner(strings.NewReader(out))
	for sc.Scan() {
		line := strings.TrimSpace(sc.Text())
		key, val, ok := strings.Cut(line, ": ")
		if !ok {
			continue
		}
		switch key {
		case "User time (seconds)":
			r.UserSeconds, _ = strconv.ParseFloat(val, 64)
		case "System time (seconds)":
			r.SystemSeconds, _ = strconv.ParseFloat(val, 64)
		case "Maximum resident set size (kbytes)":
			kb, _ := strconv.ParseFloat(val, 64)
			r.PeakRSSMiB = kb / 1024
		case "Elapsed (wall clock) time (h:mm:ss or m:ss)":
			r.WallSeconds = clockSeconds(val)
		}
	}
}

// clockSeconds reads h:mm:ss or m:ss.ss.
func clockSeconds(s string) float64 {
	parts := strings.Split(s, ":")
	total := 0.0
	for _, p := range parts {
		v, _ := strconv.ParseFloat(p, 64)
		total = total*60 + v
	}
	return total
}

func load1() float64 {
	b, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return -1
	}
	f := strings.Fields(string(b))
	if len(f) == 0 {
		return -1
	}
	v, _ := strconv.ParseFloat(f[0], 64)
	return v
}

func describeMachine() machine {
	m := machine{Cores: runtime.NumCPU(), OS: runtime.GOOS + "/" + runtime.GOARCH, Go: runtime.Version()}
	if b, err := os.ReadFile("/proc/cpuinfo"); err == nil {
		for _, line := range strings.Split(string(b), "\n") {
			if k, v, ok := strings.Cut(line, ":"); ok && strings.TrimSpace(k) == "model name" {
				m.CPU = strings.TrimSpace(v)
				break
			}
		}
	}
	if b, err := os.ReadFile("/proc/meminfo"); err == nil {
		for _, line := range strings.Split(string(b), "\n") {
			if strings.HasPrefix(line, "MemTotal:") {
				f := strings.Fields(line)
				if len(f) >= 2 {
					kb, _ := strconv.ParseFloat(f[1], 64)
					m.MemGiB = int(kb/1024/1024 + 0.5)
				}
			}
		}
	}
	return m
}

// stateRecovery is the adjusted Rand index (Hubert and Arabie, 1985;
// compute.AdjustedRandIndex) between the stored state of every window and
// the generator's truth for that window: the latent state held by most of
// its time points (ties to the state at the window's centre).
func stateRecovery(dbPath, truthPath string, width, step int) (float64, error) {
	truth, err := readTruth(truthPath)
	if err != nil {
		return 0, err
	}
	db, err := schema.Open(dbPath, true, nil)
	if err != nil {
		return 0, err
	}
	defer db.Close()
	rows, err := db.QueryContext(context.Background(),
		`SELECT subject_id, window_start, state FROM state_sequence ORDER BY subject_id, window_index`)
	if err != nil {
		return 0, err
	}
	defer rows.Close()
	var got, want []int
	for rows.Next() {
		var sub string
		var start, st int
		if err := rows.Scan(&sub, &start, &st); err != nil {
			return 0, err
		}
		seq, ok := truth[sub]
		if !ok || start+width > len(seq) {
			return 0, fmt.Errorf("no truth for %s window at %d", sub, start)
		}
		got = append(got, st)
		want = append(want, windowTruth(seq[start:start+width]))
	}
	if err := rows.Err(); err != nil {
		return 0, err
	}
	if len(got) == 0 {
		return 0, errors.New("no windows in the warehouse")
	}
	return compute.AdjustedRandIndex(got, want), nil
}

func windowTruth(states []int) int {
	top := 0
	for _, s := range states {
		top = max(top, s)
	}
	count := make([]int, top+1)
	for _, s := range states {
		count[s]++
	}
	best := states[(len(states)-1)/2]
	for s, c := range count {
		if c > count[best] {
			best = s
		}
	}
	return best
}

func readTruth(path string) (map[string][]int, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	out := map[string][]int{}
	sc := bufio.NewScanner(f)
	sc.Scan() // header
	for sc.Scan() {
		f := strings.Split(sc.Text(), "\t")
		if len(f) != 3 {
			continue
		}
		st, err := strconv.Atoi(f[2])
		if err != nil {
			return nil, fmt.Errorf("%s: %w", path, err)
		}
		out[f[0]] = append(out[f[0]], st)
	}
	return out, sc.Err()
}

// runReference runs reference.py on the cohort and returns its JSON.
func runReference(cfg config, dir string, stderr io.Writer) (map[string]any, error) {
	script := filepath.Join(cfg.root, "scripts", "bench", "reference.py")
	args := []string{script, "--input", dir, "--window", strconv.Itoa(cfg.window), "--step", strconv.Itoa(cfg.step)}
	fmt.Fprintf(stderr, "bench: reference: %s %s\n", cfg.python, strings.Join(args, " "))
	c := exec.Command(cfg.python, args...)
	c.Stderr = stderr
	out, err := c.Output()
	if err != nil {
		return nil, err
	}
	var v map[string]any
	if err := json.Unmarshal(out, &v); err != nil {
		return nil, fmt.Errorf("reference output: %w", err)
	}
	return v, nil
}

func printResult(w io.Writer, r result) {
	fmt.Fprintf(w, "topostate ingest benchmark, %s\n", r.Date)
	fmt.Fprintf(w, "machine:  %s, %d cores, %d GiB, %s, %s\n", r.Machine.CPU, r.Machine.Cores, r.Machine.MemGiB, r.Machine.OS, r.Machine.Go)
	fmt.Fprintf(w, "load:     1-minute load average %.2f before, %.2f after\n", r.LoadBefore, r.LoadAfter)
	fmt.Fprintf(w, "cohort:   %s subjects x time points x regions (%s)\n", r.Size, filepath.Base(r.Cohort))
	fmt.Fprintf(w, "command:  %s\n\n", r.Command)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "phase\twall s")
	names := map[string]string{
		"validate":       "validate (find, parse, check every file)",
		"sample windows": "sample windows (parse, windows, variance peaks)",
		"fit states":     "fit states (k-means, elbow)",
		"subjects":       "subjects (parse, windows, assign, dynamics, Betti)",
		"write":          "write (rows into DuckDB)",
		"commit":         "commit",
	}
	var total float64
	for _, p := range r.Timings.Phases {
		n := names[p.Phase]
		if n == "" {
			n = p.Phase
		}
		fmt.Fprintf(tw, "  %s\t%7.2f\n", n, p.Seconds)
		total += p.Seconds
	}
	fmt.Fprintf(tw, "  sum of phases\t%7.2f\n", total)
	fmt.Fprintf(tw, "wall (%s)\t%7.1f s\n", r.RSSSource, r.WallSeconds)
	fmt.Fprintf(tw, "CPU user + system\t%7.1f s (%.1f + %.1f)\n", r.UserSeconds+r.SystemSeconds, r.UserSeconds, r.SystemSeconds)
	fmt.Fprintf(tw, "peak resident memory\t%7.0f MiB\n", r.PeakRSSMiB)
	fmt.Fprintf(tw, "windows\t%d (%d used to fit, %d states)\n", r.Windows, r.FitWindows, r.States)
	fmt.Fprintf(tw, "windows per second\t%7.0f\n", r.WindowsPerSec)
	if r.ARI != nil {
		fmt.Fprintf(tw, "state recovery (ARI vs truth)\t%7.3f\n", *r.ARI)
	}
	fmt.Fprintf(tw, "warehouse file\t%7.1f MiB\n", float64(r.DBBytes)/(1<<20))
	fmt.Fprintln(tw, "\t")
	fmt.Fprintln(tw, "parallel stages, seconds summed over workers\t")
	for _, p := range r.Timings.WorkerTimes {
		fmt.Fprintf(tw, "  %s\t%7.2f\n", p.Phase, p.Seconds)
	}
	fmt.Fprintln(tw, "\t")
	tw.Flush()
	var parts []string
	for _, f := range r.Timings.Fits {
		tag := ""
		if f.Final {
			tag = " final"
		}
		parts = append(parts, fmt.Sprintf("%d: %d/%d%s", f.K, f.Restarts, f.Iterations, tag))
	}
	fmt.Fprintf(w, "k-means fits (k: restarts/Lloyd iterations): %s\n", strings.Join(parts, ", "))
	tw = tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	if r.Reference != nil {
		fmt.Fprintln(tw, "\t")
		fmt.Fprintln(tw, "reference pipeline (scripts/bench/reference.py)\t")
		if v, ok := r.Reference["wall_seconds"].(float64); ok {
			fmt.Fprintf(tw, "  wall\t%7.1f s\n", v)
		}
		if v, ok := r.Reference["windows_per_second"].(float64); ok {
			fmt.Fprintf(tw, "  windows per second\t%7.0f (topostate %.0f: %.1fx)\n", v, r.WindowsPerSec, r.WindowsPerSec/v)
		}
		if v, ok := r.Reference["ari_vs_truth"].(float64); ok {
			fmt.Fprintf(tw, "  state recovery (ARI vs truth)\t%7.3f\n", v)
		}
		if v, ok := r.Reference["states"].(float64); ok {
			fmt.Fprintf(tw, "  states\t%7.0f\n", v)
		}
	}
	tw.Flush()
}

func printSweep(w io.Writer, rs []result) {
	if len(rs) == 0 {
		return
	}
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	m := rs[0].Machine
	fmt.Fprintf(w, "topostate ingest scaling sweep, %s; %s, %d cores, %s\n", rs[0].Date, m.CPU, m.Cores, m.Go)
	fmt.Fprintln(tw, "subjects\ttime points\tregions\twindows\tfit rows\tk\tvalidate s\tsample s\tfit s\tsubjects s\twrite s\twall s\tCPU s\tpeak MiB\twindows/s\tARI\tload\t")
	for _, r := range rs {
		ph := map[string]float64{}
		for _, p := range r.Timings.Phases {
			ph[p.Phase] = p.Seconds
		}
		ari := "-"
		if r.ARI != nil {
			ari = fmt.Sprintf("%.3f", *r.ARI)
		}
		fmt.Fprintf(tw, "%d\t%d\t%d\t%d\t%d\t%d\t%.1f\t%.1f\t%.1f\t%.1f\t%.1f\t%.1f\t%.1f\t%.0f\t%.0f\t%s\t%.1f\t\n",
			r.Size.Subjects, r.Size.Timepoints, r.Size.Regions, r.Windows, r.FitWindows, r.States,
			ph["validate"], ph["sample windows"], ph["fit states"], ph["subjects"], ph["write"],
			r.WallSeconds, r.UserSeconds+r.SystemSeconds, r.PeakRSSMiB, r.WindowsPerSec, ari, (r.LoadBefore+r.LoadAfter)/2)
	}
	tw.Flush()
}
