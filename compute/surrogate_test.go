package compute

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/dsp/fourier"
	"gonum.org/v1/gonum/stat"
)

// correlatedSeries is invented test data: p regions mixing a few shared
// AR(1) signals, so regions are correlated and autocorrelated.
func correlatedSeries(T, p int, seed uint64) Series {
	rng := rand.New(rand.NewPCG(seed, 7))
	y := NewSeries(T, p)
	lat := make([]float64, 3)
	for t := 0; t < T; t++ {
		for l := range lat {
			lat[l] = 0.8*lat[l] + rng.NormFloat64()
		}
		for j := 0; j < p; j++ {
			y.Data[t*p+j] = 5 + float64(j) + lat[j%3] + 0.5*lat[(j+1)%3] + 0.3*rng.NormFloat64()
		}
	}
	return y
}

// periodogram is |X(f)|^2 of the demeaned column by gonum's real FFT (the
// outside reference for the spectrum).
func periodogram(x []float64) []float64 {
	m := stat.Mean(x, nil)
	d := make([]float64, len(x))
	for i, v := range x {
		d[i] = v - m
	}
	c := fourier.NewFFT(len(x)).Coefficients(nil, d)
	out := make([]float64, len(c))
	for f, v := range c {
		out[f] = real(v)*real(v) + imag(v)*imag(v)
	}
	return out
}

// TestPhaseSurrogateKeepsSpectraAndCorrelations holds the defining property
// of multivariate phase randomisation (Prichard and Theiler, PRL 73, 1994):
// every region's periodogram (gonum's FFT) and the static correlation matrix
// (gonum's stat.Correlation) equal the original's within floating-point
// error, for even and odd T; the phases are different.
func TestPhaseSurrogateKeepsSpectraAndCorrelations(t *testing.T) {
	for _, T := range []int{256, 255, 300} {
		p := 6
		y := correlatedSeries(T, p, uint64(T))
		s := PhaseSurrogate(y, rand.New(rand.NewPCG(1, 2)))
		for j := 0; j < p; j++ {
			a, b := y.Column(j), s.Column(j)
			if d := math.Abs(stat.Mean(a, nil) - stat.Mean(b, nil)); d > 1e-9 {
				t.Errorf("T=%d region %d: mean moved by %g", T, j, d)
			}
			pa, pb := periodogram(a), periodogram(b)
			for f := range pa {
				if math.Abs(pa[f]-pb[f]) > 1e-8*(1+pa[f]) {
					t.Fatalf("T=%d region %d f=%d: periodogram %g, surrogate %g", T, j, f, pa[f], pb[f])
				}
			}
			for l := j + 1; l < p; l++ {
				ra := stat.Correlation(a, y.Column(l), nil)
				rb := stat.Correlation(b, s.Column(l), nil)
				if math.Abs(ra-rb) > 1e-10 {
					t.Errorf("T=%d pair (%d,%d): r = %g, surrogate %g", T, j, l, ra, rb)
				}
			}
		}
		// The phases differ: the surrogate is not the original (nor its
		// time shift, checked by the phase difference varying with f).
		ca := fourier.NewFFT(T).Coefficients(nil, y.Column(0))
		cb := fourier.NewFFT(T).Coefficients(nil, s.Column(0))
		moved := 0
		for f := 1; f < T/2; f++ {
			if math.Abs(cmplx.Phase(cb[f]/ca[f])) > 1e-3 {
				moved++
			}
		}
		if moved < T/2-5 {
			t.Errorf("T=%d: only %d of %d phases changed", T, moved, T/2-1)
		}
		maxDiff := 0.0
		for i := range y.Data {
			maxDiff = max(maxDiff, math.Abs(y.Data[i]-s.Data[i]))
		}
		if maxDiff < 0.5 {
			t.Errorf("T=%d: surrogate within %g of the original", T, maxDiff)
		}
	}
}

// TestPhaseSurrogateSeeds: the same generator state gives the same
// surrogate, two seeds give different ones.
func TestPhaseSurrogateSeeds(t *testing.T) {
	y := correlatedSeries(128, 4, 3)
	a := PhaseSurrogate(y, rand.New(rand.NewPCG(5, 1)))
	b := PhaseSurrogate(y, rand.New(rand.NewPCG(5, 1)))
	c := PhaseSurrogate(y, rand.New(rand.NewPCG(6, 1)))
	same, diff := true, 0.0
	for i := range a.Data {
		same = same && a.Data[i] == b.Data[i]
		diff = max(diff, math.Abs(a.Data[i]-c.Data[i]))
	}
	if !same {
		t.Error("same seed, different surrogates")
	}
	if diff < 0.1 {
		t.Errorf("two seeds give surrogates within %g", diff)
	}
}

// TestTemporalVariability checks the mean over columns of the sample SD
// against gonum's stat.StdDev.
func TestTemporalVariability(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	m := NewMatrix32(30, 5)
	for i := range m.Data {
		m.Data[i] = float32(rng.NormFloat64())
	}
	want := 0.0
	for q := 0; q < 5; q++ {
		col := make([]float64, 30)
		for r := range col {
			col[r] = float64(m.Data[r*5+q])
		}
		want += stat.StdDev(col, nil) / 5
	}
	if got := TemporalVariability(m); math.Abs(got-want) > 1e-12 {
		t.Errorf("TemporalVariability = %g, gonum stat.StdDev gives %g", got, want)
	}
	if got := TemporalVariability(NewMatrix32(1, 5)); got != 0 {
		t.Errorf("one window: %g, want 0", got)
	}
}

// TestMonteCarloP: (1 + #{null >= obs}) / (1 + N) (Davison and Hinkley
// 1997, eq. 4.11), worked by hand.
func TestMonteCarloP(t *testing.T) {
	cases := []struct {
		obs    float64
		null   []float64
		p      float64
		exceed int
	}{
		{5, []float64{1, 2, 3, 4}, 1.0 / 5, 0},
		{2, []float64{1, 2, 3, 4}, 4.0 / 5, 3}, // ties count as reaching
		{0, []float64{1, 2, 3}, 1, 3},
		{3, []float64{math.NaN(), 1}, 2.0 / 3, 1},
	}
	for _, c := range cases {
		p, e := MonteCarloP(c.obs, c.null)
		if math.Abs(p-c.p) > 1e-15 || e != c.exceed {
			t.Errorf("MonteCarloP(%g, %v) = %g, %d; want %g, %d", c.obs, c.null, p, e, c.p, c.exceed)
		}
	}
}

// TestBettiSupDistance: the larger of the two curves' sup-norm distances,
// worked by hand.
func TestBettiSupDistance(t *testing.T) {
	got := BettiSupDistance([]int{5, 3, 1}, []int{0, 2, 4}, []int{5, 4, 1}, []int{0, 0, 1})
	if got != 3 {
		t.Errorf("BettiSupDistance = %g, want 3 (|4-1| in Betti-1)", got)
	}
}
