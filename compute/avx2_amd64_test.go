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

// RowVariance's kernel repeats its four-lane loop's operations, so the
// variances, and with them the variance-peak windows, must not depend on
// the machine.
func TestRowVarianceKernelMatchesPortable(t *testing.T) {
	if !useAVX2 {
		t.Skip("no AVX2 and FMA on this machine")
	}
	r := rand.New(rand.NewPCG(23, 23))
	var rows [][]float32
	for _, n := range []int{1, 3, 4, 5, 8, 13, 64, 1001, 19900} {
		row := make([]float32, n)
		for j := range row {
			row[j] = float32(0.3 + 0.2*r.NormFloat64())
		}
		rows = append(rows, row)
	}
	fast := make([]float64, len(rows))
	for i, row := range rows {
		fast[i] = RowVariance(row)
	}
	useAVX2 = false
	defer func() { useAVX2 = true }()
	for i, row := range rows {
		if slow := RowVariance(row); slow != fast[i] {
			t.Fatalf("%d values: kernel %v, portable %v", len(row), fast[i], slow)
		}
	}
}

func BenchmarkRowVariance(b *testing.B) {
	row := make([]float32, 19900) // 200 regions
	r := rand.New(rand.NewPCG(24, 24))
	for j := range row {
		row[j] = float32(r.NormFloat64())
	}
	for _, avx := range []bool{true, false} {
		name := "portable"
		if avx {
			name = "avx2"
		}
		b.Run(name, func(b *testing.B) {
			if avx && !useAVX2 {
				b.Skip("no AVX2")
			}
			old := useAVX2
			useAVX2 = avx
			defer func() { useAVX2 = old }()
			for b.Loop() {
				RowVariance(row)
			}
		})
	}
}
