//go:build amd64

package compute

import (
	"math/rand/v2"
	"slices"
	"testing"
)

// The AVX2 kernels of the window correlations repeat the portable loops'
// IEEE operations in the same order (no fused multiply-add), so both paths
// must give bit-identical windows. (The dot-product kernels add in another
// order and are checked against gonum's Dsdot in TestDotKernels instead.)
func TestWindowKernelsMatchPortable(t *testing.T) {
	if !useAVX2 {
		t.Skip("no AVX2 and FMA on this machine")
	}
	y := winMixedSeries(rand.New(rand.NewPCG(21, 21)), 400, 37, 1000, 2.5)
	fast, err := SlidingCorrelations(y, WindowOptions{Width: 30, Step: 1})
	if err != nil {
		t.Fatal(err)
	}
	useAVX2 = false
	defer func() { useAVX2 = true }()
	slow, err := SlidingCorrelations(y, WindowOptions{Width: 30, Step: 1})
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(fast.Data, slow.Data) {
		t.Fatal("AVX2 and portable window correlations differ")
	}
}

// The dot-product kernels and their portable loops add the same exact
// products in the same eight-lane order (dot.go), so they must agree bit for
// bit, and so must a whole k-means fit and the widening sums.
func TestDotKernelsMatchPortable(t *testing.T) {
	if !useAVX2 {
		t.Skip("no AVX2 and FMA on this machine")
	}
	r := rand.New(rand.NewPCG(22, 22))
	type outcome struct {
		d32, mixed float64
		row        []float64
	}
	x := simulatedWindows(t, 3, 12, 150, 3, 15, 4)
	run := func() ([]outcome, KMeansResult, []float64) {
		var outs []outcome
		for _, n := range []int{3, 8, 13, 64, 1001} {
			a := make([]float32, n)
			c := NewMatrix32(5, n)
			for j := range a {
				a[j] = float32(r.NormFloat64())
			}
			for j := range c.Data {
				c.Data[j] = float32(r.NormFloat64())
			}
			row := make([]float64, 5)
			dotsRow(a, widen(c), row)
			outs = append(outs, outcome{dot32(a, c.Row(0)), dotMixed(a, widen(c).row(1)), row})
		}
		res, err := KMeans(x, KMeansOptions{K: 4, Restarts: 2, Workers: 2}, 5)
		if err != nil {
			t.Fatal(err)
		}
		acc := make([]float64, x.Cols)
		for i := range x.Rows {
			addWiden(acc, x.Row(i))
		}
		return outs, res, acc
	}
	r = rand.New(rand.NewPCG(22, 22))
	fastOut, fastFit, fastAcc := run()
	useAVX2 = false
	defer func() { useAVX2 = true }()
	r = rand.New(rand.NewPCG(22, 22))
	slowOut, slowFit, slowAcc := run()
	for i := range fastOut {
		f, s := fastOut[i], slowOut[i]
		if f.d32 != s.d32 || f.mixed != s.mixed || !slices.Equal(f.row, s.row) {
			t.Fatalf("case %d: AVX2 %+v, portable %+v", i, f, s)
		}
	}
	if fastFit.WCSS != slowFit.WCSS || !slices.Equal(fastFit.Labels, slowFit.Labels) || !slices.Equal(fastFit.Centroids.Data, slowFit.Centroids.Data) {
		t.Fatalf("k-means differs: WCSS %v (AVX2) vs %v (portable)", fastFit.WCSS, slowFit.WCSS)
	}
	if !slices.Equal(fastAcc, slowAcc) {
		t.Fatal("addWiden differs between AVX2 and portable code")
	}
}
