package compute

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"
)

// blobs returns perCluster points around each of k centres 50*e_c (pairwise
// 70.7 apart) with unit-variance Gaussian scatter, rows in shuffled order,
// and the generating cluster of each row.
func blobs(k, perCluster, dim int, seed uint64) (Matrix32, []int) {
	r := rand.New(rand.NewPCG(seed, 99))
	n := k * perCluster
	x := NewMatrix32(n, dim)
	truth := make([]int, n)
	order := r.Perm(n)
	for idx, i := range order {
		c := idx % k
		truth[i] = c
		row := x.Row(i)
		for j := range row {
			row[j] = float32(r.NormFloat64())
		}
		row[c%dim] += 50
	}
	return x, truth
}

func randomMatrix(rows, cols int, seed uint64) Matrix32 {
	r := rand.New(rand.NewPCG(seed, 7))
	m := NewMatrix32(rows, cols)
	for i := range m.Data {
		m.Data[i] = float32(r.NormFloat64())
	}
	return m
}

// naiveDist is the textbook distance, element by element in float64; the
// reference for the norm-expansion used in the package.
func naiveDist(d Distance, x, c []float32) float64 {
	s := 0.0
	for j := range x {
		v := float64(x[j]) - float64(c[j])
		if d == Manhattan {
			s += math.Abs(v)
		} else {
			s += v * v
		}
	}
	return s
}

func TestKMeansRecoversSeparatedClusters(t *testing.T) {
	for _, d := range []Distance{SquaredEuclidean, Manhattan} {
		t.Run(d.String(), func(t *testing.T) {
			// Clusters 70 apart with unit scatter: any other partition has a
			// far larger objective, so the generating partition is the answer
			// (construction; common practice, no source).
			x, truth := blobs(4, 50, 10, 1)
			res, err := KMeans(x, KMeansOptions{K: 4, Restarts: 3, Distance: d}, 42)
			if err != nil {
				t.Fatal(err)
			}
			if ari := AdjustedRandIndex(res.Labels, truth); ari != 1 {
				t.Fatalf("ARI = %v, want 1", ari)
			}
			if !res.Converged {
				t.Errorf("not converged after %d iterations", res.Iterations)
			}
			// Each centroid is its cluster's mean (Lloyd's fixed point) or
			// coordinate-wise median, recomputed here from the definition.
			want := 0.0
			for c := 0; c < 4; c++ {
				var members [][]float32
				for i, l := range res.Labels {
					if l == c {
						members = append(members, x.Row(i))
					}
				}
				if len(members) == 0 {
					t.Fatalf("cluster %d empty", c)
				}
				for j := 0; j < x.Cols; j++ {
					col := make([]float64, len(members))
					for m, row := range members {
						col[m] = float64(row[j])
					}
					var ref float64
					if d == Manhattan {
						slices.Sort(col)
						h := len(col) / 2
						ref = col[h]
						if len(col)%2 == 0 {
							ref = (col[h-1] + col[h]) / 2
						}
					} else {
						ref = stat.Mean(col, nil) // gonum reference
					}
					if got := float64(res.Centroids.Data[c*x.Cols+j]); math.Abs(got-ref) > 1e-4 {
						t.Fatalf("centroid %d[%d] = %v, want %v", c, j, got, ref)
					}
				}
				for _, row := range members {
					want += naiveDist(d, row, res.Centroids.Row(c))
				}
			}
			if math.Abs(res.WCSS-want) > 1e-9*want {
				t.Errorf("WCSS = %v, naive sum %v", res.WCSS, want)
			}
			labels, _ := Assign(x, res.Centroids, d, 1)
			if !slices.Equal(labels, res.Labels) {
				t.Errorf("Assign on the result's centroids disagrees with its labels")
			}
		})
	}
}

// Determinism is the API's contract (docs/methods.md §3: "a fixed seed gives
// identical results"), for any number of workers.
func TestKMeansIdenticalForAnyWorkers(t *testing.T) {
	x := randomMatrix(1003, 37, 3) // not a multiple of the row or column blocks
	for _, d := range []Distance{SquaredEuclidean, Manhattan} {
		t.Run(d.String(), func(t *testing.T) {
			base, err := KMeans(x, KMeansOptions{K: 5, Restarts: 2, Distance: d, Workers: 1}, 11)
			if err != nil {
				t.Fatal(err)
			}
			for _, w := range []int{0, 2, 3, 4} {
				got, err := KMeans(x, KMeansOptions{K: 5, Restarts: 2, Distance: d, Workers: w}, 11)
				if err != nil {
					t.Fatal(err)
				}
				if !reflect.DeepEqual(got, base) {
					t.Fatalf("Workers=%d differs from Workers=1 (WCSS %v vs %v)", w, got.WCSS, base.WCSS)
				}
			}
			again, _ := KMeans(x, KMeansOptions{K: 5, Restarts: 2, Distance: d, Workers: 1}, 11)
			if !reflect.DeepEqual(again, base) {
				t.Fatal("same seed gave a different result")
			}
			l1, d1 := Assign(x, base.Centroids, d, 1)
			l4, d4 := Assign(x, base.Centroids, d, 4)
			if !slices.Equal(l1, l4) || !slices.Equal(d1, d4) {
				t.Fatal("Assign differs between 1 and 4 workers")
			}
		})
	}
}

// More restarts can only keep or lower the objective: restart 0 is the same
// draw in both runs (rand.NewPCG(seed, 0)) and the best is kept.
func TestKMeansRestartsKeepBest(t *testing.T) {
	x := randomMatrix(300, 5, 8)
	one, _ := KMeans(x, KMeansOptions{K: 6}, 5)
	many, _ := KMeans(x, KMeansOptions{K: 6, Restarts: 8}, 5)
	if many.WCSS > one.WCSS {
		t.Fatalf("8 restarts WCSS %v > 1 restart %v", many.WCSS, one.WCSS)
	}
}

// k-means++ (Arthur and Vassilvitskii, 2007, steps 1a-1c): the first centre
// is uniform over the rows; the next is row x with probability
// D(x)^2 / sum D^2, D the distance to the nearest chosen centre. For L1 the
// weight is D(x)^1 (the D^l variant discussed in the same paper; from memory).
// Points 0, 1, 2, 3 on a line: given first centre i, P(j | i) = w(|j-i|)/sum.
func TestKMeansPlusPlusSeedingDistribution(t *testing.T) {
	x := NewMatrix32(4, 1)
	for i := range x.Data {
		x.Data[i] = float32(i)
	}
	for _, tc := range []struct {
		d     Distance
		power float64
	}{{SquaredEuclidean, 2}, {Manhattan, 1}} {
		t.Run(tc.d.String(), func(t *testing.T) {
			f := &kmFit{x: x, d: tc.d, workers: 1}
			if tc.d == SquaredEuclidean {
				f.xn = rowNorms(x, 1)
			}
			const draws = 40000
			var count [4][4]int
			r := rand.New(rand.NewPCG(1, 2))
			for n := 0; n < draws; n++ {
				_, idx := f.seed(2, r, nil)
				count[idx[0]][idx[1]]++
			}
			for i := 0; i < 4; i++ {
				sum := 0.0
				for j := 0; j < 4; j++ {
					sum += math.Pow(math.Abs(float64(j-i)), tc.power)
				}
				for j := 0; j < 4; j++ {
					p := 0.25 * math.Pow(math.Abs(float64(j-i)), tc.power) / sum
					want := p * draws
					sd := math.Sqrt(draws * p * (1 - p))
					// 5 binomial standard deviations (common practice, no source).
					if math.Abs(float64(count[i][j])-want) > 5*sd+1e-9 {
						t.Errorf("P(first=%d, second=%d): %d draws, want %.0f +- %.0f", i, j, count[i][j], want, 5*sd)
					}
				}
			}
			// A chosen centre has weight 0, so k = n distinct rows are all
			// chosen exactly once.
			_, idx := f.seed(4, r, nil)
			slices.Sort(idx)
			if !slices.Equal(idx, []int{0, 1, 2, 3}) {
				t.Errorf("k = n seeding chose %v", idx)
			}
		})
	}
}

func TestKMeansSingleClusterCentroid(t *testing.T) {
	rows := [][]float32{{1, 10}, {2, 20}, {7, 0}}
	x := NewMatrix32(3, 2)
	for i, r := range rows {
		copy(x.Row(i), r)
	}
	t.Run("manhattan", func(t *testing.T) {
		// Hand-worked: medians (2, 10); W = |1-2|+|10-10| + |2-2|+|20-10|
		// + |7-2|+|0-10| = 1+0+0+10+5+10 = 26.
		res, err := KMeans(x, KMeansOptions{K: 1, Distance: Manhattan}, 1)
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(res.Centroids.Data, []float32{2, 10}) || res.WCSS != 26 {
			t.Fatalf("centroid %v WCSS %v, want [2 10] and 26", res.Centroids.Data, res.WCSS)
		}
	})
	t.Run("manhattan even", func(t *testing.T) {
		// Hand-worked: 1, 2, 4, 10 -> median (2+4)/2 = 3, W = 2+1+1+7 = 11.
		y := Matrix32{Rows: 4, Cols: 1, Data: []float32{10, 2, 1, 4}}
		res, _ := KMeans(y, KMeansOptions{K: 1, Distance: Manhattan}, 1)
		if res.Centroids.Data[0] != 3 || res.WCSS != 11 {
			t.Fatalf("centroid %v WCSS %v, want 3 and 11", res.Centroids.Data, res.WCSS)
		}
	})
	t.Run("euclidean", func(t *testing.T) {
		// The total sum of squares about the mean, (n-1) times the sample
		// variance of each column, from gonum stat.
		res, _ := KMeans(x, KMeansOptions{K: 1}, 1)
		want := 2*stat.Variance([]float64{1, 2, 7}, nil) + 2*stat.Variance([]float64{10, 20, 0}, nil)
		if math.Abs(res.WCSS-want) > 1e-5 {
			t.Fatalf("WCSS %v, want %v", res.WCSS, want)
		}
	})
}

// Five identical rows and one other with K = 3: k-means++ must draw a
// duplicate centre (all weights 0), one cluster comes out empty, and the
// repair hands it one of the duplicates. Hand-worked optimum: W = 0.
func TestKMeansEmptyClusterRepair(t *testing.T) {
	x := Matrix32{Rows: 6, Cols: 2, Data: []float32{0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 5, 5}}
	for _, d := range []Distance{SquaredEuclidean, Manhattan} {
		res, err := KMeans(x, KMeansOptions{K: 3, Distance: d}, 3)
		if err != nil {
			t.Fatal(err)
		}
		seen := make([]int, 3)
		for _, l := range res.Labels {
			seen[l]++
		}
		if slices.Contains(seen, 0) || res.WCSS != 0 {
			t.Fatalf("%v: cluster sizes %v, WCSS %v; want all non-empty and 0", d, seen, res.WCSS)
		}
	}
}

func TestMedianSelect(t *testing.T) {
	r := rand.New(rand.NewPCG(4, 4))
	for _, n := range []int{1, 2, 3, 4, 5, 10, 11, 100, 101} {
		for _, levels := range []int{2, 5, 1000} { // many ties, some, few
			v := make([]float32, n)
			for i := range v {
				v[i] = float32(r.IntN(levels))
			}
			s := slices.Clone(v)
			slices.Sort(s)
			// Median by definition on the sorted values.
			want := float64(s[n/2])
			if n%2 == 0 {
				want = (float64(s[n/2-1]) + float64(s[n/2])) / 2
			}
			if got := median32(v); got != want {
				t.Fatalf("n=%d levels=%d: median %v, want %v", n, levels, got, want)
			}
		}
	}
}

func TestKMeansErrors(t *testing.T) {
	x := randomMatrix(10, 3, 1)
	nan := randomMatrix(10, 3, 1)
	nan.Data[7] = float32(math.NaN())
	inf := randomMatrix(10, 3, 1)
	inf.Data[4] = float32(math.Inf(-1))
	for _, tc := range []struct {
		name string
		x    Matrix32
		opt  KMeansOptions
	}{
		{"empty", Matrix32{}, KMeansOptions{K: 1}},
		{"K=0", x, KMeansOptions{K: 0}},
		{"K>rows", x, KMeansOptions{K: 11}},
		{"NaN", nan, KMeansOptions{K: 2}},
		{"Inf", inf, KMeansOptions{K: 2}},
		{"negative restarts", x, KMeansOptions{K: 2, Restarts: -1}},
		{"negative tol", x, KMeansOptions{K: 2, Tol: -1}},
		{"unknown distance", x, KMeansOptions{K: 2, Distance: 7}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := KMeans(tc.x, tc.opt, 1)
			if err == nil || !strings.HasPrefix(err.Error(), "compute: ") {
				t.Fatalf("err = %v, want a compute: error", err)
			}
		})
	}
}

func TestAssign(t *testing.T) {
	t.Run("ties to lowest index", func(t *testing.T) {
		// (0,0) is at squared and L1 distance exactly 1 from all three.
		x := Matrix32{Rows: 1, Cols: 2, Data: []float32{0, 0}}
		c := Matrix32{Rows: 3, Cols: 2, Data: []float32{0, 1, 1, 0, -1, 0}}
		for _, d := range []Distance{SquaredEuclidean, Manhattan} {
			l, dist := Assign(x, c, d, 1)
			if l[0] != 0 || dist[0] != 1 {
				t.Errorf("%v: label %d dist %v, want 0 and 1", d, l[0], dist[0])
			}
		}
	})
	t.Run("matches naive", func(t *testing.T) {
		x := randomMatrix(500, 91, 5)
		c := randomMatrix(7, 91, 6)
		for _, d := range []Distance{SquaredEuclidean, Manhattan} {
			l, dist := Assign(x, c, d, 3)
			for i := 0; i < x.Rows; i++ {
				best, bd := -1, math.Inf(1)
				for k := 0; k < c.Rows; k++ {
					if v := naiveDist(d, x.Row(i), c.Row(k)); v < bd {
						best, bd = k, v
					}
				}
				if l[i] != best || math.Abs(dist[i]-bd) > 1e-9*bd {
					t.Fatalf("%v row %d: (%d, %v), naive (%d, %v)", d, i, l[i], dist[i], best, bd)
				}
			}
		}
	})
	t.Run("NaN row", func(t *testing.T) {
		x := Matrix32{Rows: 2, Cols: 1, Data: []float32{float32(math.NaN()), 1}}
		c := Matrix32{Rows: 1, Cols: 1, Data: []float32{0}}
		l, dist := Assign(x, c, SquaredEuclidean, 1)
		if l[0] != -1 || !math.IsNaN(dist[0]) || l[1] != 0 {
			t.Fatalf("labels %v dist %v", l, dist)
		}
	})
}

func TestChordElbow(t *testing.T) {
	// A convex broken line with its corner at k = 3: normalised
	// y = 1, 0.6, 0.2 for k = 1, 2, 3, then straight down to 0 at k = 9.
	// With x = (k-1)/8 the chord is x + y = 1, and the distance to it,
	// (1 - x - y)/sqrt 2, is linear along each segment, so it peaks at a
	// vertex: k=2 gives 0.275, k=3 gives 0.55, k=4 gives 0.458 (elementary
	// geometry, worked by hand).
	ks := []int{1, 2, 3, 4, 5, 6, 7, 8, 9}
	y := []float64{1, 0.6, 0.2}
	for k := 4; k <= 9; k++ {
		y = append(y, 0.2*float64(9-k)/6)
	}
	for _, tc := range []struct {
		name         string
		scale, shift float64
	}{{"unit", 1, 0}, {"rescaled", 1000, 500}, {"tiny", 1e-6, 3}} {
		t.Run(tc.name, func(t *testing.T) {
			w := make([]float64, len(y))
			for i := range y {
				w[i] = tc.scale*y[i] + tc.shift
			}
			if got := ChordElbow(ks, w); got != 3 {
				t.Errorf("chord pick %d, want 3", got)
			}
			// Second differences of a broken line vanish except at the corner.
			if got := SecondDifferenceElbow(ks, w); got != 3 {
				t.Errorf("second-difference pick %d, want 3", got)
			}
		})
	}
	t.Run("picks disagree", func(t *testing.T) {
		// W = 120, 60, 40, 22, 6, 4, 3, 2 (k = 1..8); slopes -60, -20, -18,
		// -16, -2, -1, -1. Second differences (k=2..7): 40, 2, 2, 14, 1, 0,
		// so that rule picks 2. Normalised, x = (k-1)/7 and y = (W-2)/118,
		// the chord is x + y = 1 and 1 - x - y is 0.366, 0.392, 0.402,
		// 0.395, 0.269 for k = 2..6, so the chord picks 4 (by hand).
		ks := []int{1, 2, 3, 4, 5, 6, 7, 8}
		w := []float64{120, 60, 40, 22, 6, 4, 3, 2}
		if c, s := ChordElbow(ks, w), SecondDifferenceElbow(ks, w); c != 4 || s != 2 {
			t.Errorf("chord %d second difference %d, want 4 and 2", c, s)
		}
	})
	t.Run("degenerate", func(t *testing.T) {
		if ChordElbow(nil, nil) != 0 || SecondDifferenceElbow(nil, nil) != 0 {
			t.Error("empty input should give 0")
		}
		if ChordElbow([]int{2, 3}, []float64{5, 1}) != 2 || SecondDifferenceElbow([]int{2, 3}, []float64{5, 1}) != 2 {
			t.Error("two points should give the first k")
		}
		if ChordElbow([]int{2, 3, 4}, []float64{5, 5, 5}) != 2 {
			t.Error("flat curve should give the first k")
		}
	})
}

func TestElbowScan(t *testing.T) {
	// Four well-separated clusters: W(k) falls steeply to k = 4 and barely
	// after, so both rules must pick 4 (construction).
	x, _ := blobs(4, 40, 6, 2)
	e, fits, err := ElbowScan(x, 1, 8, KMeansOptions{Restarts: 3}, 9)
	if err != nil {
		t.Fatal(err)
	}
	if len(e.Points) != 8 || len(fits) != 8 {
		t.Fatalf("%d points, %d fits, want 8", len(e.Points), len(fits))
	}
	for i, p := range e.Points {
		if p.K != i+1 || fits[i].Centroids.Rows != p.K || p.WCSS != fits[i].WCSS {
			t.Fatalf("point %d = %+v, fit has %d centroids and WCSS %v", i, p, fits[i].Centroids.Rows, fits[i].WCSS)
		}
	}
	if e.ChordK != 4 || e.SecondDiffK != 4 {
		t.Errorf("picks chord %d, second difference %d, want 4 and 4; curve %v", e.ChordK, e.SecondDiffK, e.Points)
	}
	if _, _, err := ElbowScan(x, 3, 2, KMeansOptions{}, 1); err == nil {
		t.Error("kmax < kmin accepted")
	}
	if _, _, err := ElbowScan(x, 1, x.Rows+1, KMeansOptions{}, 1); err == nil {
		t.Error("kmax > rows accepted")
	}
}

func BenchmarkAssign(b *testing.B) {
	x := randomMatrix(2000, 4950, 1)
	c := randomMatrix(6, 4950, 2)
	for _, w := range []int{1, 2} {
		b.Run(fmt.Sprintf("workers=%d", w), func(b *testing.B) {
			for b.Loop() {
				Assign(x, c, SquaredEuclidean, w)
			}
		})
	}
	b.Run("manhattan", func(b *testing.B) {
		for b.Loop() {
			Assign(x, c, Manhattan, 1)
		}
	})
}

// BenchmarkKMeansPlusPlus seeds k = 10 centres on 2,000 x 4,950 rows; the
// cost is linear in the rows, so 20,000 rows take ten times as long.
func BenchmarkKMeansPlusPlus(b *testing.B) {
	x := randomMatrix(2000, 4950, 1)
	f := &kmFit{x: x, d: SquaredEuclidean, workers: 1, xn: rowNorms(x, 1)}
	r := rand.New(rand.NewPCG(1, 1))
	for b.Loop() {
		f.seed(10, r, nil)
	}
}

func BenchmarkKMeans(b *testing.B) {
	x, _ := blobs(5, 400, 780, 3)
	for _, d := range []Distance{SquaredEuclidean, Manhattan} {
		b.Run(d.String(), func(b *testing.B) {
			for b.Loop() {
				if _, err := KMeans(x, KMeansOptions{K: 5, Distance: d, Workers: 2}, 1); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// Stop ends a fit between restarts (and between k in a scan) with
// ErrStopped; a Stop that never fires changes nothing.
func TestKMeansStop(t *testing.T) {
	rng := rand.New(rand.NewPCG(4, 4))
	x := NewMatrix32(60, 5)
	for i := range x.Data {
		x.Data[i] = float32(rng.NormFloat64())
	}
	calls := 0
	stopAfter := func(n int) func() bool {
		calls = 0
		return func() bool { calls++; return calls > n }
	}
	opt := KMeansOptions{K: 3, Restarts: 4, Stop: stopAfter(2)}
	if _, err := KMeans(x, opt, 1); !errors.Is(err, ErrStopped) {
		t.Fatalf("KMeans with Stop after 2 restarts: err = %v, want ErrStopped", err)
	}
	if calls != 3 {
		t.Errorf("Stop asked %d times, want 3 (before restarts 0, 1, 2)", calls)
	}
	opt.Stop = stopAfter(5)
	if _, _, err := ElbowScan(x, 2, 4, opt, 1); !errors.Is(err, ErrStopped) {
		t.Fatalf("ElbowScan with Stop after 5 fits: err = %v, want ErrStopped", err)
	}
	opt.Stop = func() bool { return false }
	a, err := KMeans(x, opt, 1)
	if err != nil {
		t.Fatal(err)
	}
	opt.Stop = nil
	b, err := KMeans(x, opt, 1)
	if err != nil {
		t.Fatal(err)
	}
	if a.WCSS != b.WCSS || !slices.Equal(a.Labels, b.Labels) {
		t.Error("a Stop that never fires changed the fit")
	}
}
