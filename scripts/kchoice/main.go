// Command kchoice measures how often each rule for the number of states
// (docs/methods.md §3.x: prediction strength, the gap statistic, the chord
// elbow, the largest second difference) finds the true number of latent states of simulated
// cohorts, and prints one confusion table (true k by picked k) per rule and
// noise level.
//
//	nice -n 10 go run ./scripts/kchoice                  # 20 cohorts per true k, noise 0.3 and 0.6
//	go run ./scripts/kchoice -cohorts 5 -noise 0.5       # a quick look
//
// For every true k in -states and every noise level it writes -cohorts
// cohorts with `topostate simulate --states k --noise x --seed s` (the
// command is built first; the data are invented by topostate's own
// generator) and runs the real ingest path (ingest.IntoFile with the
// default options, among them the default window from --min-freq and the
// scan from k = 1, and every rule's statistic computed, so one run yields
// all four picks of the same fitting sample and W(k) scan). The prediction
// strength is computed with both halvings (by window, the default, and by
// subject) on the same fitting sample; -gap=false leaves out the gap
// statistic (its picks are then not printed), which halves the time. A
// table per noise level also counts, for both halvings, the cohorts whose
// ps(k) values would give the true k at thresholds 0.7-0.9 (the same
// values read at another threshold; a threshold chosen from it is chosen
// on these cohorts).
//
//	nice -n 10 go run ./scripts/kchoice -states 1,2,3,5 -noise 0.3 -gap=false -stickiness 0.99
//
// The uptime load average is printed before and after: the timings depend
// on the machine and its load.
package main

import (
	"context"
	"flag"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/ingest"
)

func main() {
	cohorts := flag.Int("cohorts", 20, "cohorts per true k and noise level")
	statesList := flag.String("states", "1,2,3,5", "true numbers of latent states")
	noiseList := flag.String("noise", "0.3,0.6", "noise levels (topostate simulate --noise)")
	subjects := flag.Int("subjects", 10, "subjects per cohort")
	regions := flag.Int("regions", 20, "regions per series")
	timepoints := flag.Int("timepoints", 400, "time points per series")
	workers := flag.Int("workers", 2, "ingest workers")
	stickiness := flag.Float64("stickiness", 0.97, "per-time-point probability of staying in a state (topostate simulate --stickiness; mean dwell 1/(1-q) time points)")
	gap := flag.Bool("gap", true, "compute the gap statistic too")
	flag.Parse()
	if err := run(*cohorts, *statesList, *noiseList, *subjects, *regions, *timepoints, *workers, *stickiness, *gap); err != nil {
		fmt.Fprintln(os.Stderr, "kchoice:", err)
		os.Exit(1)
	}
}

func ints(s string) ([]int, error) {
	var out []int
	for _, f := range strings.Split(s, ",") {
		v, err := strconv.Atoi(strings.TrimSpace(f))
		if err != nil {
			return nil, fmt.Errorf("list %q: %w", s, err)
		}
		out = append(out, v)
	}
	return out, nil
}

func uptime() string {
	b, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return "unknown"
	}
	return strings.Join(strings.Fields(string(b))[:3], " ")
}

func run(cohorts int, statesList, noiseList string, subjects, regions, timepoints, workers int, stickiness float64, withGap bool) error {
	states, err := ints(statesList)
	if err != nil {
		return err
	}
	var noises []float64
	for _, f := range strings.Split(noiseList, ",") {
		v, err := strconv.ParseFloat(strings.TrimSpace(f), 64)
		if err != nil {
			return fmt.Errorf("noise %q: %w", f, err)
		}
		noises = append(noises, v)
	}
	tmp, err := os.MkdirTemp("", "kchoice-")
	if err != nil {
		return err
	}
	defer os.RemoveAll(tmp)
	bin := filepath.Join(tmp, "topostate")
	if out, err := exec.Command("go", "build", "-o", bin, "./cmd/topostate").CombinedOutput(); err != nil {
		return fmt.Errorf("build: %v\n%s", err, out)
	}
	d := ingest.Defaults()
	fmt.Printf("cohorts: %d subjects x %d time points x %d regions, TR 2 s, stickiness %g (mean dwell %.0f time points), latent autocorrelation 0.5 (simulate's default), %d cohorts per true k and noise level\n",
		subjects, timepoints, regions, stickiness, 1/(1-stickiness), cohorts)
	fmt.Printf("ingest defaults: window %d time points (1/min-freq = %g s at TR 2 s), k = %d..%d, %d restarts, %d iterations; strength %d halvings (default by %s) of at most %d windows, threshold %g; gap B = %d on at most %d windows\n",
		ingest.WindowFor(2, d.MinFreq), 1/d.MinFreq, d.StatesMin, d.StatesMax, d.Restarts, d.MaxIter, d.StrengthSplits, d.StrengthHalving, d.StrengthWindows, d.StrengthThreshold, d.GapReferences, d.GapWindows)
	fmt.Printf("load average before: %s\n", uptime())
	start := time.Now()
	other := map[string]string{"subject": "window", "window": "subject"}[d.StrengthHalving]
	rules := []string{"strength by " + d.StrengthHalving, "strength by " + other, "gap", "chord", "second-diff"}
	if !withGap {
		rules = slices.Delete(rules, 2, 3)
	}
	const kmax = 10
	thresholds := []float64{0.7, 0.75, 0.8, 0.85, 0.9}
	var gapSeconds, strengthSeconds float64
	runs := 0
	for _, noise := range noises {
		// table[rule][true k index][picked k]
		table := make(map[string][][]int)
		for _, r := range rules {
			table[r] = make([][]int, len(states))
			for i := range states {
				table[r][i] = make([]int, kmax+1)
			}
		}
		// right[halving][true k index][threshold index]: cohorts whose
		// prediction strength, read at that threshold, gives the true k.
		right := [2][][]int{make([][]int, len(states)), make([][]int, len(states))}
		for h := range right {
			for si := range states {
				right[h][si] = make([]int, len(thresholds))
			}
		}
		for si, k := range states {
			for c := 0; c < cohorts; c++ {
				seed := uint64(1000*k + c + 1)
				dir := filepath.Join(tmp, "cohort")
				os.RemoveAll(dir)
				cmd := exec.Command(bin, "simulate", "--out", dir, "--subjects", strconv.Itoa(subjects),
					"--regions", strconv.Itoa(regions), "--timepoints", strconv.Itoa(timepoints),
					"--states", strconv.Itoa(k), "--noise", strconv.FormatFloat(noise, 'g', -1, 64),
					"--seed", strconv.FormatUint(seed, 10), "--stickiness", strconv.FormatFloat(stickiness, 'g', -1, 64))
				if out, err := cmd.CombinedOutput(); err != nil {
					return fmt.Errorf("simulate: %v\n%s", err, out)
				}
				o := ingest.Defaults()
				o.Input, o.AllRules, o.CompareHalvings, o.Workers, o.Seed = dir, withGap, true, workers, seed
				db := filepath.Join(tmp, "w.duckdb")
				os.Remove(db)
				sum, err := ingest.IntoFile(context.Background(), db, o, nil)
				if err != nil {
					return fmt.Errorf("ingest (k=%d noise %v seed %d): %w", k, noise, seed, err)
				}
				e := sum.Elbow
				table[rules[0]][si][e.Strength.K]++
				table[rules[1]][si][e.OtherStrength.K]++
				for h, st := range []*compute.Strength{e.Strength, e.OtherStrength} {
					ks, ps := make([]int, len(st.Points)), make([]float64, len(st.Points))
					for i, p := range st.Points {
						ks[i], ps[i] = p.K, p.Strength
					}
					for ti, th := range thresholds {
						if compute.StrengthPick(ks, ps, th) == k {
							right[h][si][ti]++
						}
					}
				}
				if withGap {
					table["gap"][si][e.Gap.K]++
				}
				table["chord"][si][e.ChordK]++
				table["second-diff"][si][e.SecondDiffK]++
				for _, p := range sum.WorkerTimes {
					switch p.Phase {
					case "fit: gap statistic":
						gapSeconds += p.Seconds
					case "fit: prediction strength":
						strengthSeconds += p.Seconds
					}
				}
				runs++
			}
		}
		fmt.Printf("\nprediction strength read at other thresholds (same ps(k) values), noise %v: cohorts right of %d per true k\n", noise, cohorts)
		fmt.Printf("| halving | threshold |")
		for _, k := range states {
			fmt.Printf(" true %d |", k)
		}
		fmt.Println()
		for h := range right {
			for ti, th := range thresholds {
				fmt.Printf("| %s | %g |", rules[h], th)
				for si := range states {
					fmt.Printf(" %d |", right[h][si][ti])
				}
				fmt.Println()
			}
		}
		for _, r := range rules {
			fmt.Printf("\nrule %s, noise %v (rows: true k; columns: picked k)\n", r, noise)
			fmt.Printf("| true k |")
			for p := 1; p <= kmax; p++ {
				fmt.Printf(" %d |", p)
			}
			fmt.Printf(" correct |\n|---|")
			for p := 0; p <= kmax; p++ {
				fmt.Printf("---|")
			}
			fmt.Println()
			correct, total := 0, 0
			for si, k := range states {
				fmt.Printf("| %d |", k)
				for p := 1; p <= kmax; p++ {
					fmt.Printf(" %d |", table[r][si][p])
				}
				fmt.Printf(" %d/%d |\n", table[r][si][k], cohorts)
				correct += table[r][si][k]
				total += cohorts
			}
			fmt.Printf("accuracy %s noise %v: %d/%d = %.2f\n", r, noise, correct, total, float64(correct)/float64(total))
		}
	}
	fmt.Printf("\n%d ingests in %.0f s (gap statistic: %.1f s in total, %.2f s per ingest; prediction strength: %.1f s, %.2f s per ingest)\n",
		runs, time.Since(start).Seconds(), gapSeconds, gapSeconds/float64(max(runs, 1)), strengthSeconds, strengthSeconds/float64(max(runs, 1)))
	fmt.Printf("load average after: %s\n", uptime())
	return nil
}
