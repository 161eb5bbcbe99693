package compute

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/stat"
)

// TestClusterQuality checks 1 - W(k)/W(1) from KMeans against the same
// ratio computed with gonum: W(1) as (n - 1) times stat.Variance summed
// over columns (the total sum of squares about the column means), W(k) as
// the sum over clusters of the squared distances to each cluster's
// stat.Mean, for the labels KMeans returned.
func TestClusterQuality(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 4))
	n, D := 60, 5
	x := NewMatrix32(n, D)
	for i := 0; i < n; i++ {
		shift := float64(i%3) * 2
		for q := 0; q < D; q++ {
			x.Data[i*D+q] = float32(shift + r.NormFloat64())
		}
	}
	res, err := KMeans(x, KMeansOptions{K: 3, Restarts: 3}, 1)
	if err != nil {
		t.Fatal(err)
	}
	one, err := KMeans(x, KMeansOptions{K: 1}, 1)
	if err != nil {
		t.Fatal(err)
	}
	col := func(q int, keep func(i int) bool) []float64 {
		var v []float64
		for i := 0; i < n; i++ {
			if keep(i) {
				v = append(v, float64(x.Data[i*D+q]))
			}
		}
		return v
	}
	w1, wk := 0.0, 0.0
	for q := 0; q < D; q++ {
		all := col(q, func(int) bool { return true })
		w1 += stat.Variance(all, nil) * float64(n-1)
		for c := 0; c < 3; c++ {
			v := col(q, func(i int) bool { return res.Labels[i] == c })
			m := stat.Mean(v, nil)
			for _, y := range v {
				wk += (y - m) * (y - m)
			}
		}
	}
	got, want := ClusterQuality(res.WCSS, one.WCSS), 1-wk/w1
	if math.Abs(got-want) > 1e-5 {
		t.Errorf("ClusterQuality = %.8f, gonum gives %.8f", got, want)
	}
	if ClusterQuality(1, 0) != 0 {
		t.Error("ClusterQuality with W(1) = 0 is not 0")
	}
}

// TestMeanPairwiseBettiDistance: a worked example (our own arithmetic):
// curves a, b, c with sup distances d(a,b) = 3 (Betti-1), d(a,c) = 2
// (Betti-0), d(b,c) = 3 (Betti-1); the mean is 8/3.
func TestMeanPairwiseBettiDistance(t *testing.T) {
	b0 := [][]int{{5, 3, 1}, {5, 2, 1}, {5, 3, 3}}
	b1 := [][]int{{0, 1, 4}, {0, 1, 1}, {0, 2, 4}}
	if got := MeanPairwiseBettiDistance(b0, b1); math.Abs(got-8.0/3) > 1e-15 {
		t.Errorf("mean distance %v, want 8/3", got)
	}
	if MeanPairwiseBettiDistance(b0[:1], b1[:1]) != 0 {
		t.Error("one network: want 0")
	}
}

// TestCentreNetwork: the centred weights have mean 0 (gonum stat.Mean), and
// two networks that differ by a uniform shift have the same centred
// weights and so the same Betti curves (docs/methods.md §10).
func TestCentreNetwork(t *testing.T) {
	p := 7
	r := rand.New(rand.NewPCG(5, 6))
	a := make([]float64, PairCount(p))
	for q := range a {
		a[q] = r.Float64()*1.4 - 0.6
	}
	b := make([]float64, len(a))
	for q := range b {
		b[q] = a[q] + 0.25
	}
	CentreNetwork(a)
	CentreNetwork(b)
	if m := stat.Mean(a, nil); math.Abs(m) > 1e-15 {
		t.Errorf("centred mean %g", m)
	}
	if !floats.EqualApprox(a, b, 1e-12) {
		t.Error("a shifted network centres differently")
	}
	fa, _ := GraphFiltration(p, a)
	fb, _ := GraphFiltration(p, b)
	grid := Grid(-1, 1, 41)
	a0, a1 := fa.Curves(grid)
	c0, c1 := fb.Curves(grid)
	if d := BettiSupDistance(a0, a1, c0, c1); d != 0 {
		t.Errorf("Betti distance %v after centring, want 0", d)
	}
	CentreNetwork(nil)
}
