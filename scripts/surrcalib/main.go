// Command surrcalib measures the surrogate-data test of the state model
// (docs/methods.md §10) on simulated cohorts: its false-positive rate on
// cohorts with one latent state (stationary series: the null the test is
// built for) and its power on cohorts with several latent states.
//
//	nice -n 10 go run ./scripts/surrcalib                         # 100 one-state and 100 three-state cohorts
//	go run ./scripts/surrcalib -cohorts 5 -states 3               # a quick look
//
// For every true number of states in -states it writes -cohorts cohorts
// with `topostate simulate` (our own generator; the command is built first)
// and runs the real ingest path (ingest.IntoFile) with a fixed k (-k) and
// -surrogates N. A statistic rejects at level alpha when its p <= alpha.
// Under the null each p is uniform on {1, ..., N+1}/(N+1), so with alpha =
// m/(N+1) the rejection rate is exactly alpha; the script prints the number
// of rejections among the cohorts beside the upper limit of a one-sided
// binomial test at 0.01 (gonum distuv.Binomial): a count above it means the
// test rejects more often than alpha. The uptime load average is printed
// before and after.
package main

import (
	"context"
	"flag"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"time"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/topostate/topostate/ingest"
)

func main() {
	cohorts := flag.Int("cohorts", 100, "cohorts per true number of states")
	statesList := flag.String("states", "1,3", "true numbers of latent states")
	noise := flag.Float64("noise", 0.5, "noise (topostate simulate --noise)")
	subjects := flag.Int("subjects", 8, "subjects per cohort")
	regions := flag.Int("regions", 12, "regions per series")
	timepoints := flag.Int("timepoints", 300, "time points per series")
	k := flag.Int("k", 3, "states fitted (--states)")
	n := flag.Int("surrogates", 19, "surrogates per cohort")
	alpha := flag.Float64("alpha", 0.05, "level")
	workers := flag.Int("workers", 2, "ingest workers")
	flag.Parse()
	if err := run(*cohorts, *statesList, *noise, *subjects, *regions, *timepoints, *k, *n, *alpha, *workers); err != nil {
		fmt.Fprintln(os.Stderr, "surrcalib:", err)
		os.Exit(1)
	}
}

func uptime() string {
	b, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return "unknown"
	}
	return strings.Join(strings.Fields(string(b))[:3], " ")
}

// binomialLimit is the largest count c with P(X >= c) > 0.01 for X ~
// Binomial(n, alpha): more rejections than c reject "rate <= alpha" at 0.01.
func binomialLimit(n int, alpha float64) int {
	b := distuv.Binomial{N: float64(n), P: alpha}
	for c := 0; c <= n; c++ {
		if 1-b.CDF(float64(c)) < 0.01 { // P(X > c) < 0.01
			return c
		}
	}
	return n
}

func run(cohorts int, statesList string, noise float64, subjects, regions, timepoints, k, n int, alpha float64, workers int) error {
	var states []int
	for _, f := range strings.Split(statesList, ",") {
		v, err := strconv.Atoi(strings.TrimSpace(f))
		if err != nil {
			return fmt.Errorf("-states %q: %w", statesList, err)
		}
		states = append(states, v)
	}
	tmp, err := os.MkdirTemp("", "surrcalib-")
	if err != nil {
		return err
	}
	defer os.RemoveAll(tmp)
	bin := filepath.Join(tmp, "topostate")
	if out, err := exec.Command("go", "build", "-o", bin, "./cmd/topostate").CombinedOutput(); err != nil {
		return fmt.Errorf("build: %v\n%s", err, out)
	}
	fmt.Printf("cohorts: %d subjects x %d time points x %d regions, noise %v, k = %d fitted, N = %d surrogates, alpha = %v\n",
		subjects, timepoints, regions, noise, k, n, alpha)
	fmt.Printf("load average before: %s\n", uptime())
	start := time.Now()
	limit := binomialLimit(cohorts, alpha)
	for _, truth := range states {
		reject := map[string]int{}
		seen := map[string]int{}
		sumObs, sumNull := map[string]float64{}, map[string]float64{}
		for c := 0; c < cohorts; c++ {
			seed := uint64(10000*truth + c + 1)
			dir := filepath.Join(tmp, "cohort")
			os.RemoveAll(dir)
			cmd := exec.Command(bin, "simulate", "--out", dir, "--subjects", strconv.Itoa(subjects),
				"--regions", strconv.Itoa(regions), "--timepoints", strconv.Itoa(timepoints),
				"--states", strconv.Itoa(truth), "--noise", strconv.FormatFloat(noise, 'g', -1, 64),
				"--seed", strconv.FormatUint(seed, 10))
			if out, err := cmd.CombinedOutput(); err != nil {
				return fmt.Errorf("simulate: %v\n%s", err, out)
			}
			o := ingest.Defaults()
			o.Input, o.States, o.Surrogates, o.Workers, o.Seed = dir, k, n, workers, seed
			db := filepath.Join(tmp, "w.duckdb")
			os.Remove(db)
			sum, err := ingest.IntoFile(context.Background(), db, o, nil)
			if err != nil {
				return fmt.Errorf("ingest (states %d seed %d): %w", truth, seed, err)
			}
			for _, r := range sum.Surrogates {
				name := r.Statistic
				if r.State > 0 {
					name = fmt.Sprintf("%s[state %d]", r.Statistic, r.State)
				}
				seen[name]++
				sumObs[name] += r.Observed
				sumNull[name] += r.NullMean
				if r.P <= alpha {
					reject[name]++
				}
			}
		}
		fmt.Printf("\n%d latent state(s), %d cohorts: rejections at p <= %v (binomial limit at 0.01 for a rate of %v: %d)\n",
			truth, cohorts, alpha, alpha, limit)
		fmt.Println("| statistic | cohorts | rejections | rate | mean observed | mean of null means |")
		fmt.Println("|---|---:|---:|---:|---:|---:|")
		names := make([]string, 0, len(seen))
		for name := range seen {
			names = append(names, name)
		}
		sort.Strings(names)
		for _, name := range names {
			m := seen[name]
			fmt.Printf("| %s | %d | %d | %.3f | %.4g | %.4g |\n", name, m, reject[name], float64(reject[name])/float64(m),
				sumObs[name]/float64(m), sumNull[name]/float64(m))
		}
	}
	fmt.Printf("\n%.0f s; load average after: %s\n", time.Since(start).Seconds(), uptime())
	return nil
}
