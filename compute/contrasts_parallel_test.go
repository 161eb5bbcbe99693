package compute

import (
	"math"
	"math/rand/v2"
	"runtime"
	"testing"
)

// The parallel count of PermutationTestCurves equals the serial loop of
// its definition (p = (1 + #{T* >= T}) / (1 + nPerm), Phipson and Smyth
// 2010, relabellings drawn one after another by pickFirst) exactly, on a
// test large enough to be shared among the cores (60 + 50 curves of 101
// points, 1,999 relabellings: 1.2e7 additions).
func TestCurvePermParallelEqualsSerial(t *testing.T) {
	if runtime.GOMAXPROCS(0) < 2 {
		t.Skip("one core: the parallel path is not taken")
	}
	r := rand.New(rand.NewPCG(3, 4))
	mk := func(n int, shift float64) [][]float64 {
		out := make([][]float64, n)
		for i := range out {
			out[i] = make([]float64, 101)
			for g := range out[i] {
				out[i][g] = math.Round(10*r.Float64()+shift*float64(g%7)) / 2
			}
		}
		return out
	}
	a, b := mk(60, 0.05), mk(50, 0)
	const nPerm = 1999
	got, err := PermutationTestCurves(a, b, nPerm, rand.New(rand.NewPCG(9, 0)))
	if err != nil {
		t.Fatal(err)
	}
	// The serial loop, written out.
	ca, cb := canonicalCurveGroups(a, b)
	pooled := append(append([][]float64{}, ca...), cb...)
	g := len(pooled[0])
	total := make([]float64, g)
	var scale float64
	for _, c := range pooled {
		for k, x := range c {
			total[k] += x
			scale = max(scale, math.Abs(x))
		}
	}
	m, n := float64(len(ca)), float64(len(cb))
	sumA := make([]float64, g)
	stat := func() float64 {
		var t float64
		for k := range sumA {
			t = max(t, math.Abs(sumA[k]/m-(total[k]-sumA[k])/n))
		}
		return t
	}
	for _, c := range ca {
		for k, x := range c {
			sumA[k] += x
		}
	}
	tObs := stat()
	threshold := tObs - (permRelTol*tObs + permScaleTol*scale)
	idx := make([]int, len(pooled))
	for i := range idx {
		idx[i] = i
	}
	rng := rand.New(rand.NewPCG(9, 0))
	count := 0
	for range nPerm {
		pickFirst(idx, len(ca), rng)
		clear(sumA)
		for _, i := range idx[:len(ca)] {
			for k, x := range pooled[i] {
				sumA[k] += x
			}
		}
		if stat() >= threshold {
			count++
		}
	}
	want := float64(1+count) / float64(1+nPerm)
	if got.Statistic != tObs || got.PValue != want {
		t.Errorf("parallel T = %v, p = %v; serial T = %v, p = %v", got.Statistic, got.PValue, tObs, want)
	}
	if count == 0 || count == nPerm {
		t.Errorf("count %d of %d: the check needs a p strictly inside (0, 1)", count, nPerm)
	}
}
