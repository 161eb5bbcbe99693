package compute

import (
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"slices"
	"syscall"
	"testing"
)

// Elkan's bounds (Elkan, ICML 2003) only skip distance computations whose
// outcome is certain, so a restart must give the labels and iteration count
// of plain Lloyd iterations (the definition in docs/methods.md §3) from the same
// seeding. Centres come from running float64 sums in one path and from sums
// over every row in the other, so they may differ in the last float32 bit;
// hence the small tolerances on centres and WCSS.
func TestBoundedLloydMatchesPlain(t *testing.T) {
	cohort := simulatedWindows(t, 6, 14, 300, 4, 15, 5)
	for _, tc := range []struct {
		name string
		x    Matrix32
		ks   []int
	}{
		{"windows", cohort, []int{1, 2, 3, 5, 8}},
		{"gaussian", randomMatrix(700, 23, 4), []int{2, 4, 9}},
		{"blobs", func() Matrix32 { x, _ := blobs(5, 60, 12, 6); return x }(), []int{3, 5, 7}},
	} {
		for _, k := range tc.ks {
			t.Run(fmt.Sprintf("%s/k=%d", tc.name, k), func(t *testing.T) {
				for seed := uint64(0); seed < 3; seed++ {
					fast := &kmFit{x: tc.x, d: SquaredEuclidean, workers: 2, xn: rowNorms(tc.x, 1)}
					plain := &kmFit{x: tc.x, d: SquaredEuclidean, workers: 2, xn: fast.xn, plain: true}
					a := fast.run(k, 300, 1e-6, rand.New(rand.NewPCG(seed, 1)))
					b := plain.run(k, 300, 1e-6, rand.New(rand.NewPCG(seed, 1)))
					if !slices.Equal(a.Labels, b.Labels) || a.Iterations != b.Iterations {
						t.Fatalf("seed %d: bounded and plain Lloyd disagree (%d vs %d iterations)", seed, a.Iterations, b.Iterations)
					}
					if math.Abs(a.WCSS-b.WCSS) > 1e-9*b.WCSS {
						t.Fatalf("seed %d: WCSS %v vs %v", seed, a.WCSS, b.WCSS)
					}
					for j, v := range a.Centroids.Data {
						if w := b.Centroids.Data[j]; math.Abs(float64(v-w)) > 1e-6*(1+math.Abs(float64(w))) {
							t.Fatalf("seed %d: centre value %d: %v vs %v", seed, j, v, w)
						}
					}
				}
			})
		}
	}
}

// simulatedWindows returns the window correlations of a small generated
// cohort (invented data), all subjects stacked.
func simulatedWindows(tb testing.TB, subjects, regions, timepoints, states, width int, seed uint64) Matrix32 {
	tb.Helper()
	subs, err := SimulateCohort(CohortSpec{Subjects: subjects, Regions: regions, Timepoints: timepoints,
		States: states, Offset: 500, Seed: seed})
	if err != nil {
		tb.Fatal(err)
	}
	var out Matrix32
	for _, s := range subs {
		w, err := SlidingCorrelations(s.Series, WindowOptions{Width: width, Step: 1})
		if err != nil {
			tb.Fatal(err)
		}
		out.Rows += w.Rows
		out.Cols = w.Cols
		out.Data = append(out.Data, w.Data...)
	}
	return out
}

// peakSample returns at most n variance-peak windows of all, in a shuffled
// order (seed 1, 2), as the fitting sample of the benchmarks.
func peakSample(all Matrix32, n int) Matrix32 {
	idx := LocalMaxima(WindowVariance(all))
	r := rand.New(rand.NewPCG(1, 2))
	r.Shuffle(len(idx), func(i, j int) { idx[i], idx[j] = idx[j], idx[i] })
	idx = idx[:min(len(idx), n)]
	x := NewMatrix32(len(idx), all.Cols)
	for c, i := range idx {
		copy(x.Row(c), all.Row(i))
	}
	return x
}

// BenchmarkKMeansWindows fits k-means to 5,000 window vectors of 100
// regions (4,950 values each; a quarter of the default fitting sample),
// variance-peak windows of a generated cohort, one restart: bounded Lloyd (the package's
// path) against plain Lloyd iterations.
func BenchmarkKMeansWindows(b *testing.B) {
	x := peakSample(simulatedWindows(b, 16, 100, 1000, 4, 50, 3), 5000)
	for _, k := range []int{4, 10} {
		for _, plain := range []bool{false, true} {
			name := fmt.Sprintf("k=%d/bounded", k)
			if plain {
				name = fmt.Sprintf("k=%d/plain", k)
			}
			b.Run(name, func(b *testing.B) {
				f := &kmFit{x: x, d: SquaredEuclidean, workers: 2, xn: rowNorms(x, 2), plain: plain}
				iters := 0
				for b.Loop() {
					res := f.run(k, 150, 1e-6, rand.New(rand.NewPCG(1, 0)))
					iters = res.Iterations
				}
				b.ReportMetric(float64(iters), "iterations")
			})
		}
	}
}

// ElbowScan seeds each restart once for the largest k and reuses the first
// k centres for every smaller k; by the sequential definition of k-means++
// (Arthur and Vassilvitskii, 2007) these are the centres KMeans draws for k
// itself, so every fit must equal KMeans at that k, for both distances.
func TestElbowScanEqualsKMeansPerK(t *testing.T) {
	x := simulatedWindows(t, 4, 10, 200, 3, 15, 8)
	for _, d := range []Distance{SquaredEuclidean, Manhattan} {
		t.Run(d.String(), func(t *testing.T) {
			opt := KMeansOptions{Restarts: 3, Distance: d, Workers: 2}
			_, fits, err := ElbowScan(x, 2, 6, opt, 17)
			if err != nil {
				t.Fatal(err)
			}
			for i, got := range fits {
				o := opt
				o.K = 2 + i
				want, err := KMeans(x, o, 17)
				if err != nil {
					t.Fatal(err)
				}
				if !reflect.DeepEqual(got, want) {
					t.Fatalf("k=%d: scan fit (WCSS %v, %d iterations) differs from KMeans (WCSS %v, %d iterations)",
						o.K, got.WCSS, got.TotalIterations, want.WCSS, want.TotalIterations)
				}
			}
		})
	}
}

// FirstRestart: restarts 0..1 and then 2..4 (FirstRestart 2), keeping the
// lower WCSS with ties to the first, are one fit with restarts 0..4, since
// restart r always draws from rand.NewPCG(seed, r).
func TestKMeansFirstRestart(t *testing.T) {
	x := simulatedWindows(t, 3, 9, 200, 3, 15, 12)
	for _, d := range []Distance{SquaredEuclidean, Manhattan} {
		all, err := KMeans(x, KMeansOptions{K: 4, Restarts: 5, Distance: d}, 3)
		if err != nil {
			t.Fatal(err)
		}
		first, _ := KMeans(x, KMeansOptions{K: 4, Restarts: 2, Distance: d}, 3)
		rest, _ := KMeans(x, KMeansOptions{K: 4, Restarts: 3, FirstRestart: 2, Distance: d}, 3)
		best := first
		if rest.WCSS < first.WCSS {
			best = rest
		}
		if best.WCSS != all.WCSS || !slices.Equal(best.Labels, all.Labels) || !slices.Equal(best.Centroids.Data, all.Centroids.Data) {
			t.Fatalf("%v: split restarts give WCSS %v, one fit %v", d, best.WCSS, all.WCSS)
		}
		if first.TotalIterations+rest.TotalIterations != all.TotalIterations {
			t.Fatalf("%v: iterations %d + %d, one fit %d", d, first.TotalIterations, rest.TotalIterations, all.TotalIterations)
		}
	}
}

// BenchmarkElbowScanWindows times the elbow scan (k = 1..10, one restart)
// on 2,000 variance-peak windows of 200 regions (398 MB of float32, far
// beyond any cache): the k side by side, as ElbowScan runs them, against
// one k after another (KMeans per k, the same fits). The CPU seconds of the
// process (user + system) are reported beside the wall time, which other
// work on the machine inflates.
func BenchmarkElbowScanWindows(b *testing.B) {
	x := peakSample(simulatedWindows(b, 8, 200, 1000, 4, 50, 3), 2000)
	opt := KMeansOptions{Restarts: 1, Workers: 2}
	cpu := func() float64 {
		var ru syscall.Rusage
		syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
		return float64(ru.Utime.Nano()+ru.Stime.Nano()) / 1e9
	}
	b.Run("side-by-side", func(b *testing.B) {
		c0 := cpu()
		for b.Loop() {
			if _, _, err := ElbowScan(x, 1, 10, opt, 5); err != nil {
				b.Fatal(err)
			}
		}
		b.ReportMetric((cpu()-c0)/float64(b.N), "cpu-s/op")
	})
	b.Run("one-k-after-another", func(b *testing.B) {
		c0 := cpu()
		for b.Loop() {
			for k := 1; k <= 10; k++ {
				o := opt
				o.K = k
				if _, err := KMeans(x, o, 5); err != nil {
					b.Fatal(err)
				}
			}
		}
		b.ReportMetric((cpu()-c0)/float64(b.N), "cpu-s/op")
	})
}
