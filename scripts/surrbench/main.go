// Command surrbench measures what the surrogate-data test (docs/methods.md
// §10) costs: it writes a simulated cohort (our own generator, 3 latent
// states), ingests it once with a fixed k and no test, then adds the test
// to the stored analysis with `ingest.AddSurrogates` (what `topostate
// surrogates` runs) for each N in -n, timing each and printing the load
// average and the peak resident memory beside the times.
//
//	go run ./scripts/surrbench                                   # the benchmark: 100 x 1,000 x 100, N = 99, 2 workers
//	go run ./scripts/surrbench -subjects 10 -timepoints 300 -regions 20 -n 19
//	go run ./scripts/surrbench -subjects 20 -n 1 -workers 1 -cpuprofile /tmp/surr.pprof
//
// Each test prints its wall time, its CPU time (getrusage, user + system)
// and the load average before and after; the ingest before it is timed
// apart.
//
// With -compare it also runs N = -n's first value with the analysis's own
// fit settings (-fit-windows 20000, -restarts 5 unless given) and prints
// both tests side by side: the accuracy cost of the cheaper default fit.
package main

import (
	"context"
	"database/sql"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"runtime/pprof"
	"strconv"
	"strings"
	"syscall"
	"time"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/ingest"
	"github.com/topostate/topostate/schema"
)

func main() {
	subjects := flag.Int("subjects", 100, "series")
	timepoints := flag.Int("timepoints", 1000, "time points per series")
	regions := flag.Int("regions", 100, "regions")
	states := flag.Int("states", 3, "latent states of the simulated cohort, also the k fitted")
	nList := flag.String("n", "99", "numbers of surrogates to time (comma-separated)")
	workers := flag.Int("workers", 2, "workers")
	compare := flag.Bool("compare", false, "also run the first N with the analysis's fit settings")
	fitWindows := flag.Int("fit-windows", 20000, "fitting-window cap of the -compare run")
	restarts := flag.Int("restarts", 5, "restarts of the -compare run")
	dir := flag.String("dir", "", "work folder (default: a temporary one, removed at the end)")
	flag.StringVar(&cpuProfile, "cpuprofile", "", "write a CPU profile of the surrogate tests (not the ingest) to `FILE` (go tool pprof)")
	flag.Parse()
	if err := run(*subjects, *timepoints, *regions, *states, *nList, *workers, *compare, *fitWindows, *restarts, *dir); err != nil {
		fmt.Fprintln(os.Stderr, "surrbench:", err)
		os.Exit(1)
	}
}

func load() string {
	b, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return "unknown"
	}
	return strings.Join(strings.Fields(string(b))[:3], " ")
}

// cpuSeconds is this process's user + system CPU time so far (getrusage):
// on a shared machine it measures the work where the wall time measures
// the load.
func cpuSeconds() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return math.NaN()
	}
	return float64(ru.Utime.Sec+ru.Stime.Sec) + float64(ru.Utime.Usec+ru.Stime.Usec)/1e6
}

// peakRSS is VmHWM of /proc/self/status, the peak resident memory so far.
func peakRSS() string {
	b, err := os.ReadFile("/proc/self/status")
	if err != nil {
		return "unknown"
	}
	for _, l := range strings.Split(string(b), "\n") {
		if strings.HasPrefix(l, "VmHWM:") {
			return strings.TrimSpace(strings.TrimPrefix(l, "VmHWM:"))
		}
	}
	return "unknown"
}

func run(subjects, timepoints, regions, states int, nList string, workers int, compare bool, fitWindows, restarts int, dir string) error {
	if dir == "" {
		tmp, err := os.MkdirTemp("", "surrbench-")
		if err != nil {
			return err
		}
		defer os.RemoveAll(tmp)
		dir = tmp
	}
	cohort := filepath.Join(dir, "cohort")
	fmt.Printf("cohort: %d series x %d time points x %d regions, %d latent states (topostate's simulator, seed 1), %d workers\n",
		subjects, timepoints, regions, states, workers)
	start := time.Now()
	subs, err := compute.SimulateCohort(compute.CohortSpec{Subjects: subjects, Regions: regions, Timepoints: timepoints, States: states, Seed: 1})
	if err != nil {
		return err
	}
	names := make([]string, regions)
	for j := range names {
		names[j] = fmt.Sprintf("r%03d", j+1)
	}
	ids := make([]string, len(subs))
	series := make([]compute.Series, len(subs))
	rows := make([]ingest.SyntheticParticipant, len(subs))
	for i, s := range subs {
		ids[i], series[i] = s.ID, s.Series
		rows[i] = ingest.SyntheticParticipant{ID: s.ID}
	}
	if err := ingest.WriteCohort(cohort, names, 2, ids, series, nil, rows); err != nil {
		return err
	}
	fmt.Printf("written in %.1f s\n", time.Since(start).Seconds())
	db := filepath.Join(dir, "w.duckdb")
	os.Remove(db)
	o := ingest.Defaults()
	o.Input, o.States, o.Workers, o.Analysis = cohort, states, workers, "bench"
	fmt.Printf("ingest (k = %d fixed, no test): load before %s\n", states, load())
	start = time.Now()
	cpu := cpuSeconds()
	sum, err := ingest.IntoFile(context.Background(), db, o, nil)
	if err != nil {
		return err
	}
	fmt.Printf("ingest: %.1f s wall, %.1f s CPU, %d windows, %d fitting windows; load after %s\n", time.Since(start).Seconds(), cpuSeconds()-cpu, sum.Windows, sum.FitWindows, load())
	conn, err := schema.Open(db, false, nil)
	if err != nil {
		return err
	}
	defer conn.Close()
	var first int
	for i, f := range strings.Split(nList, ",") {
		n, err := strconv.Atoi(strings.TrimSpace(f))
		if err != nil {
			return fmt.Errorf("-n %q: %w", nList, err)
		}
		if i == 0 {
			first = n
		}
		if err := timed(conn, fmt.Sprintf("N = %d, default fit", n), ingest.SurrogateSettings{N: n}, workers); err != nil {
			return err
		}
	}
	if compare {
		set := ingest.SurrogateSettings{N: first, FitWindows: fitWindows, Restarts: restarts}
		if err := timed(conn, fmt.Sprintf("N = %d, the analysis's fit settings", first), set, workers); err != nil {
			return err
		}
	}
	fmt.Printf("peak resident memory: %s\n", peakRSS())
	return nil
}

var cpuProfile string

func timed(db interface{}, what string, set ingest.SurrogateSettings, workers int) error {
	conn := db.(*sqlDB)
	if cpuProfile != "" {
		f, err := os.Create(cpuProfile)
		if err != nil {
			return err
		}
		defer f.Close()
		if err := pprof.StartCPUProfile(f); err != nil {
			return err
		}
		defer pprof.StopCPUProfile()
	}
	fmt.Printf("\nsurrogates, %s: load before %s\n", what, load())
	start := time.Now()
	cpu := cpuSeconds()
	res, err := ingest.AddSurrogates(context.Background(), conn, "bench", "", set, true, workers, nil)
	if err != nil {
		return err
	}
	cpu = cpuSeconds() - cpu
	fmt.Printf("%.1f s wall, %.1f s CPU (%.2f CPU s per run of %d; idle 2-core estimate CPU/2 = %.1f s); load after %s; each run fitted on at most %d windows with %d restarts\n",
		time.Since(start).Seconds(), cpu, cpu/float64(set.N+1), set.N+1, cpu/2, load(), res.Settings.FitWindows, res.Settings.Restarts)
	fmt.Println("| statistic | state | observed | null mean | null sd | p |")
	fmt.Println("|---|---:|---:|---:|---:|---:|")
	for _, r := range res.Rows {
		st := ""
		if r.State > 0 {
			st = strconv.Itoa(r.State)
		}
		fmt.Printf("| %s | %s | %.4g | %.4g | %.3g | %.3f |\n", r.Statistic, st, r.Observed, r.NullMean, r.NullSD, r.P)
	}
	return nil
}

type sqlDB = sql.DB
