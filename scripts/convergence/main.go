// Command convergence measures how the k-means fit of the states converges
// on simulated cohorts (docs/methods.md §3), to choose the defaults of
// --restarts and --max-iter: for every cohort it builds the fitting sample
// as ingest does (variance-peak windows of every series), fits k-means at
// the true k with restarts 1..10 and several iteration caps, and prints,
// per setting, the mean of W(k) relative to the best W(k) found for that
// cohort, the mean adjusted Rand index of the window labels against the
// latent state at the window centre, and the share of restarts that
// converged (relative change of W below 1e-6 or labels unchanged) before
// the cap.
//
//	nice -n 10 go run ./scripts/convergence                # 10 cohorts per k, k = 3 and 5
//	go run ./scripts/convergence -cohorts 2 -states 3      # a quick look
//
// The uptime load average is printed before and after.
package main

import (
	"flag"
	"fmt"
	"os"
	"strconv"
	"strings"
	"time"

	"github.com/topostate/topostate/compute"
)

func main() {
	cohorts := flag.Int("cohorts", 10, "cohorts per true k")
	statesList := flag.String("states", "3,5", "true numbers of latent states")
	subjects := flag.Int("subjects", 20, "subjects per cohort")
	regions := flag.Int("regions", 30, "regions per series")
	timepoints := flag.Int("timepoints", 600, "time points per series")
	window := flag.Int("window", 50, "window width in time points (50 = 100 s at the simulator's TR 2 s)")
	noise := flag.Float64("noise", 0.5, "simulator noise")
	flag.Parse()
	var states []int
	for _, f := range strings.Split(*statesList, ",") {
		v, err := strconv.Atoi(strings.TrimSpace(f))
		if err != nil {
			fmt.Fprintln(os.Stderr, "convergence:", err)
			os.Exit(2)
		}
		states = append(states, v)
	}
	fmt.Printf("cohorts: %d subjects x %d time points x %d regions, window %d, noise %v, %d cohorts per true k\n",
		*subjects, *timepoints, *regions, *window, *noise, *cohorts)
	fmt.Printf("load average before: %s\n", loadavg())
	start := time.Now()
	restarts := []int{1, 2, 3, 5, 7, 10}
	caps := []int{10, 25, 50, 100, 200}
	for _, k := range states {
		type acc struct{ rel, ari, conv, iters float64 }
		sums := map[[2]int]*acc{}
		for c := 0; c < *cohorts; c++ {
			seed := uint64(500*k + c + 1)
			x, all, truth, err := sample(compute.CohortSpec{Subjects: *subjects, Regions: *regions, Timepoints: *timepoints,
				States: k, Noise: *noise, Offset: 1000, Seed: seed}, *window)
			if err != nil {
				fmt.Fprintln(os.Stderr, "convergence:", err)
				os.Exit(1)
			}
			res := map[[2]int]compute.KMeansResult{}
			best := 0.0
			for _, r := range restarts {
				for _, m := range caps {
					f, err := compute.KMeans(x, compute.KMeansOptions{K: k, Restarts: r, MaxIter: m, Workers: 2}, seed)
					if err != nil {
						fmt.Fprintln(os.Stderr, "convergence:", err)
						os.Exit(1)
					}
					res[[2]int{r, m}] = f
					if best == 0 || f.WCSS < best {
						best = f.WCSS
					}
				}
			}
			for key, f := range res {
				lab, _ := compute.Assign(all, f.Centroids, compute.SquaredEuclidean, 2)
				a := sums[key]
				if a == nil {
					a = &acc{}
					sums[key] = a
				}
				a.rel += f.WCSS/best - 1
				a.ari += compute.AdjustedRandIndex(lab, truth)
				if f.Converged {
					a.conv++
				}
				a.iters += float64(f.TotalIterations) / float64(key[0])
			}
		}
		n := float64(*cohorts)
		fmt.Printf("\ntrue k = %d: W(k)/best - 1 (mean) | ARI against the latent state (mean) | best restart converged before the cap (share) | iterations per restart (mean)\n", k)
		fmt.Printf("| restarts \\ cap |")
		for _, m := range caps {
			fmt.Printf(" %d |", m)
		}
		fmt.Printf("\n|---|")
		for range caps {
			fmt.Printf("---|")
		}
		fmt.Println()
		for _, r := range restarts {
			fmt.Printf("| %d |", r)
			for _, m := range caps {
				a := sums[[2]int{r, m}]
				fmt.Printf(" %.4f, %.3f, %.1f, %.0f |", a.rel/n, a.ari/n, a.conv/n, a.iters/n)
			}
			fmt.Println()
		}
	}
	fmt.Printf("\n%.0f s; load average after: %s\n", time.Since(start).Seconds(), loadavg())
}

func loadavg() string {
	b, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return "unknown"
	}
	return strings.Join(strings.Fields(string(b))[:3], " ")
}

// sample simulates a cohort and returns its fitting sample (the
// variance-peak windows of every series, as ingest's --fit-sample peaks),
// all its windows, and the latent state at the centre of every window.
func sample(spec compute.CohortSpec, w int) (x, all compute.Matrix32, truth []int, err error) {
	subs, err := compute.SimulateCohort(spec)
	if err != nil {
		return x, all, nil, err
	}
	var peaks, every []float32
	var cols int
	for _, s := range subs {
		y, err := compute.Preprocess(s.Series, compute.PreprocessOptions{})
		if err != nil {
			return x, all, nil, err
		}
		m, err := compute.SlidingCorrelations(y, compute.WindowOptions{Width: w, Step: 1})
		if err != nil {
			return x, all, nil, err
		}
		cols = m.Cols
		for _, i := range compute.LocalMaxima(compute.WindowVariance(m)) {
			peaks = append(peaks, m.Row(i)...)
		}
		every = append(every, m.Data...)
		for i := 0; i < m.Rows; i++ {
			truth = append(truth, s.Truth[i+w/2])
		}
	}
	x = compute.Matrix32{Rows: len(peaks) / cols, Cols: cols, Data: peaks}
	all = compute.Matrix32{Rows: len(every) / cols, Cols: cols, Data: every}
	return x, all, truth, nil
}
