package compute

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/stat"
)

// The one-row-at-a-time forms (SlidingCorrelationsEach, Assigner, RowSums,
// RowVariance) must give exactly what the matrix forms give: the ingest
// uses them without keeping a series' windows, and its tables must not
// change. The matrix forms are checked against gonum in window_test.go and
// kmeans_test.go; here each row is also checked against gonum's
// stat.Correlation directly.

func TestSlidingCorrelationsEachEqualsMatrix(t *testing.T) {
	rng := rand.New(rand.NewPCG(41, 42))
	step := winLevelShiftSeries(rng) // the two-pass fallback inside the running path
	for _, tc := range []struct {
		name string
		y    Series
		opt  WindowOptions
	}{
		{"running_s1", winMixedSeries(rng, 700, 9, 0, 1), WindowOptions{Width: 40, Step: 1}}, // > 256 windows: refreshes
		{"running_s3", winMixedSeries(rng, 300, 8, 1000, 2.5), WindowOptions{Width: 30, Step: 3}},
		{"direct", winMixedSeries(rng, 300, 6, 0, 1), WindowOptions{Width: 20, Step: 10}},
		{"taper", winMixedSeries(rng, 200, 6, 0, 1), WindowOptions{Width: 30, Step: 2, Taper: TaperGauss}},
		{"fisher", winMixedSeries(rng, 200, 5, 0, 1), WindowOptions{Width: 25, Step: 1, FisherZ: true}},
		{"level_shift", step, WindowOptions{Width: 40, Step: 1}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			want, err := SlidingCorrelations(tc.y, tc.opt)
			if err != nil {
				t.Fatal(err)
			}
			cols := make([][]float64, tc.y.P)
			for j := range cols {
				cols[j] = tc.y.Column(j)
			}
			var g []float64
			if tc.opt.Taper == TaperGauss {
				g = TaperWeights(tc.opt.Width, DefaultGaussSigma)
			}
			seen := 0
			scratch := make([]float32, PairCount(tc.y.P)+7) // longer than needed: Each uses the first D
			err = SlidingCorrelationsEach(tc.y, tc.opt, scratch, func(i int, row []float32) error {
				if i != seen {
					t.Fatalf("window %d handed over as %d", seen, i)
				}
				seen++
				if len(row) != want.Cols {
					t.Fatalf("row of %d values, want %d", len(row), want.Cols)
				}
				for c, v := range row {
					if math.Float32bits(v) != math.Float32bits(want.Row(i)[c]) {
						t.Fatalf("window %d value %d: %v, the matrix holds %v", i, c, v, want.Row(i)[c])
					}
				}
				// Outside reference: gonum's weighted Pearson correlation of
				// the raw window, pair (0, P-1).
				a, j, k := WindowStart(i, tc.opt.Step), 0, tc.y.P-1
				r := stat.Correlation(cols[j][a:a+tc.opt.Width], cols[k][a:a+tc.opt.Width], g)
				if tc.opt.FisherZ {
					r = math.Atanh(math.Max(-FisherClamp, math.Min(FisherClamp, r)))
				}
				if d := math.Abs(float64(row[PairIndex(tc.y.P, j, k)]) - r); d > 1e-6 {
					t.Fatalf("window %d pair (%d,%d): %v, gonum gives %v", i, j, k, row[PairIndex(tc.y.P, j, k)], r)
				}
				return nil
			})
			if err != nil {
				t.Fatal(err)
			}
			if seen != want.Rows {
				t.Fatalf("%d windows handed over, want %d", seen, want.Rows)
			}
		})
	}
}

func TestSlidingCorrelationsEachErrors(t *testing.T) {
	rng := rand.New(rand.NewPCG(43, 44))
	y := winMixedSeries(rng, 100, 4, 0, 1)
	stop := errors.New("enough")
	calls := 0
	err := SlidingCorrelationsEach(y, WindowOptions{Width: 20, Step: 1}, nil, func(i int, _ []float32) error {
		calls++
		if i == 5 {
			return stop
		}
		return nil
	})
	if !errors.Is(err, stop) || calls != 6 {
		t.Fatalf("fn's error: got %v after %d calls, want %v after 6", err, calls, stop)
	}
	// Errors of SlidingCorrelations come before any window is handed over.
	y.Data[50*y.P+2] = math.NaN()
	calls = 0
	err = SlidingCorrelationsEach(y, WindowOptions{Width: 20, Step: 1}, nil, func(int, []float32) error { calls++; return nil })
	_, want := SlidingCorrelations(y, WindowOptions{Width: 20, Step: 1})
	if err == nil || want == nil || err.Error() != want.Error() || calls != 0 {
		t.Fatalf("NaN series: got %v after %d calls, SlidingCorrelations says %v", err, calls, want)
	}
	if err := SlidingCorrelationsEach(winMixedSeries(rng, 10, 3, 0, 1), WindowOptions{Width: 20, Step: 1}, nil,
		func(int, []float32) error { t.Fatal("called"); return nil }); err == nil {
		t.Fatal("series shorter than the window accepted")
	}
}

func TestAssignerEqualsAssign(t *testing.T) {
	rng := rand.New(rand.NewPCG(45, 46))
	x := NewMatrix32(500, 37)
	for i := range x.Data {
		x.Data[i] = float32(rng.NormFloat64())
	}
	c := NewMatrix32(5, 37)
	for i := range c.Data {
		c.Data[i] = float32(rng.NormFloat64())
	}
	copy(c.Row(3), c.Row(1)) // tied centroids: the lower index wins
	copy(x.Row(7), c.Row(1)) // a row on a centroid: distance 0
	for _, d := range []Distance{SquaredEuclidean, Manhattan} {
		labels, dist := Assign(x, c, d, 3)
		a := NewAssigner(c, d)
		dots := a.Scratch()
		for i := range x.Rows {
			l, v := a.Nearest(x.Row(i), dots)
			if l != labels[i] || math.Float64bits(v) != math.Float64bits(dist[i]) {
				t.Fatalf("distance %v row %d: Nearest gives %d (%v), Assign %d (%v)", d, i, l, v, labels[i], dist[i])
			}
		}
		if labels[7] != 1 || dist[7] != 0 {
			t.Fatalf("distance %v: the row equal to centroid 2 (and 4) got label %d at %v, want 1 at 0", d, labels[7], dist[7])
		}
	}
}

func TestRowSumsAndVarianceEqualMatrixForms(t *testing.T) {
	rng := rand.New(rand.NewPCG(47, 48))
	m := NewMatrix32(300, 45)
	labels := make([]int, m.Rows)
	for i := range m.Rows {
		labels[i] = rng.IntN(3) // label 3 of 4 never used: nil sum
		for j := range m.Cols {
			m.Row(i)[j] = float32(rng.NormFloat64())
		}
	}
	sums, counts := SumRowsByLabel(m, labels, 4)
	rs := NewRowSums(4, m.Cols)
	for i, l := range labels {
		rs.Add(m.Row(i), l)
	}
	for l := range 4 {
		if rs.Counts[l] != counts[l] || (rs.Sums[l] == nil) != (sums[l] == nil) {
			t.Fatalf("label %d: count %d (nil %v), want %d (nil %v)", l, rs.Counts[l], rs.Sums[l] == nil, counts[l], sums[l] == nil)
		}
		for j := range rs.Sums[l] {
			if math.Float64bits(rs.Sums[l][j]) != math.Float64bits(sums[l][j]) {
				t.Fatalf("label %d column %d: %v, want %v", l, j, rs.Sums[l][j], sums[l][j])
			}
		}
	}
	v := WindowVariance(m)
	for i := range m.Rows {
		if got := RowVariance(m.Row(i)); math.Float64bits(got) != math.Float64bits(v[i]) {
			t.Fatalf("row %d: RowVariance %v, WindowVariance %v", i, got, v[i])
		}
		// Outside reference: gonum's population variance.
		xs := make([]float64, m.Cols)
		for j, x := range m.Row(i) {
			xs[j] = float64(x)
		}
		_, pv := stat.PopMeanVariance(xs, nil)
		if math.Abs(v[i]-pv) > 1e-12*pv {
			t.Fatalf("row %d: variance %v, gonum's population variance %v", i, v[i], pv)
		}
	}
	defer func() {
		if recover() == nil {
			t.Fatal("a label outside [0, k) was accepted")
		}
	}()
	rs.Add(m.Row(0), 4)
}
