package compute

import (
	"math/rand/v2"
	"slices"
	"testing"
)

// SumRowsByLabel against its definition, summed here row by row in float64
// in the same order, so the two must agree exactly.
func TestSumRowsByLabel(t *testing.T) {
	m := randomMatrix(53, 19, 4)
	r := rand.New(rand.NewPCG(4, 4))
	labels := make([]int, m.Rows)
	for i := range labels {
		labels[i] = r.IntN(3) // label 3 of k = 4 never occurs
	}
	sums, counts := SumRowsByLabel(m, labels, 4)
	for l := range 4 {
		var want []float64
		n := 0
		for i, li := range labels {
			if li != l {
				continue
			}
			if want == nil {
				want = make([]float64, m.Cols)
			}
			for j, v := range m.Row(i) {
				want[j] += float64(v)
			}
			n++
		}
		if counts[l] != n || !slices.Equal(sums[l], want) {
			t.Fatalf("label %d: count %d sums %v, want %d and %v", l, counts[l], sums[l], n, want)
		}
	}
	if sums[3] != nil {
		t.Fatal("a label without rows must have nil sums")
	}
}

// SlidingCorrelationsInto must give SlidingCorrelations' values whatever the
// buffer held before (every value is overwritten), reuse a large enough
// buffer and allocate when it is too small.
func TestSlidingCorrelationsInto(t *testing.T) {
	y := winMixedSeries(rand.New(rand.NewPCG(9, 9)), 120, 9, 1000, 2.5)
	opt := WindowOptions{Width: 20, Step: 3}
	want, err := SlidingCorrelations(y, opt)
	if err != nil {
		t.Fatal(err)
	}
	buf := make([]float32, len(want.Data)+7)
	for i := range buf {
		buf[i] = float32(i) - 1e9
	}
	got, err := SlidingCorrelationsInto(buf, y, opt)
	if err != nil {
		t.Fatal(err)
	}
	if &got.Data[0] != &buf[0] {
		t.Error("a large enough buffer was not reused")
	}
	if got.Rows != want.Rows || got.Cols != want.Cols || !slices.Equal(got.Data, want.Data) {
		t.Fatal("SlidingCorrelationsInto differs from SlidingCorrelations")
	}
	small, err := SlidingCorrelationsInto(make([]float32, 3), y, opt)
	if err != nil || !slices.Equal(small.Data, want.Data) {
		t.Fatalf("small buffer: %v", err)
	}
}
