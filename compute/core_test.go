package compute

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/stat"
)

// TestCoreTimepoints checks the definition of docs/methods.md §7 by hand:
// T = 10, width 3, step 1 gives 8 windows; window i covers i..i+2.
func TestCoreTimepoints(t *testing.T) {
	labels := []int{0, 0, 0, 1, 1, 1, 1, 0}
	got, err := CoreTimepoints(labels, 3, 10, 3, 1)
	if err != nil {
		t.Fatal(err)
	}
	// t=0: window 0 (0); t=1: windows 0,1; t=2: 0..2; t=3: 1..3 mixed;
	// t=4: 2..4 mixed; t=5: 3..5 (1); t=6: 4..6 (1); t=7: 5..7 mixed;
	// t=8: 6,7 mixed; t=9: window 7 (0).
	want := [][]int{{0, 1, 2, 9}, {5, 6}, nil}
	for k := range want {
		if !slices.Equal(got[k], want[k]) {
			t.Errorf("state %d: %v, want %v", k, got[k], want[k])
		}
	}
	// Step 2, width 4, T = 11: windows start at 0, 2, 4, 6 (cover to 9);
	// t = 10 is covered by none.
	got, err = CoreTimepoints([]int{1, 1, 0, 0}, 2, 11, 4, 2)
	if err != nil {
		t.Fatal(err)
	}
	// t=0,1: window 0; t=2,3: 0,1; t=4,5: 1,2 mixed; t=6,7: 2,3; t=8,9: 3.
	if !slices.Equal(got[1], []int{0, 1, 2, 3}) || !slices.Equal(got[0], []int{6, 7, 8, 9}) {
		t.Errorf("step 2: %v", got)
	}
	// A run of L windows (step 1) has L - w + 1 core time points.
	l := make([]int, 0, 100)
	for range 40 {
		l = append(l, 0)
	}
	for range 60 {
		l = append(l, 1)
	}
	got, err = CoreTimepoints(l, 2, 100+10-1, 10, 1)
	if err != nil {
		t.Fatal(err)
	}
	// The first run also holds the series' leading edge (no switch there):
	// time points 0..39 are covered only by windows 0..39 of state 0.
	if len(got[1]) != 60 || len(got[0]) != 40 {
		t.Errorf("runs of 40 and 60 windows (width 10): %d and %d core time points", len(got[0]), len(got[1]))
	}
	for _, bad := range []struct {
		labels     []int
		k, T, w, s int
	}{{[]int{0}, 0, 3, 3, 1}, {[]int{0, 2}, 2, 4, 3, 1}, {[]int{0}, 1, 5, 3, 1}, {[]int{0}, 1, 3, 1, 1}} {
		if _, err := CoreTimepoints(bad.labels, bad.k, bad.T, bad.w, bad.s); err == nil {
			t.Errorf("%+v: no error", bad)
		}
	}
}

// TestCorrelationOfRows compares with gonum's stat.Correlation of each pair
// over the chosen rows.
func TestCorrelationOfRows(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 4))
	y := NewSeries(50, 5)
	for i := range y.Data {
		y.Data[i] = r.NormFloat64()
	}
	rows := []int{0, 3, 4, 5, 17, 18, 30, 49}
	got, err := CorrelationOfRows(y, rows)
	if err != nil {
		t.Fatal(err)
	}
	col := func(j int) []float64 {
		out := make([]float64, len(rows))
		for i, t := range rows {
			out[i] = y.Data[t*y.P+j]
		}
		return out
	}
	for i := 0; i < 5; i++ {
		for j := i + 1; j < 5; j++ {
			want := stat.Correlation(col(i), col(j), nil)
			if g := got[PairIndex(5, i, j)]; math.Abs(g-want) > 1e-12 {
				t.Errorf("pair %d-%d: %v, gonum %v", i, j, g, want)
			}
		}
	}
	if _, err := CorrelationOfRows(y, []int{1}); err == nil {
		t.Error("one row: no error")
	}
	if _, err := CorrelationOfRows(y, []int{1, 50}); err == nil {
		t.Error("row 50 of 50: no error")
	}
}
