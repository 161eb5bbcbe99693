package compute

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/dsp/fourier"
	"gonum.org/v1/gonum/stat"
)

func ppNormColumn(rng *rand.Rand, n int) []float64 {
	y := make([]float64, n)
	for i := range y {
		y[i] = rng.NormFloat64()
	}
	return y
}

// ppSeriesOf builds a T x P series from region columns.
func ppSeriesOf(cols ...[]float64) Series {
	s := NewSeries(len(cols[0]), len(cols))
	for j, c := range cols {
		for t, v := range c {
			s.Data[t*s.P+j] = v
		}
	}
	return s
}

func ppMaxAbsDiff(a, b []float64) float64 {
	if len(a) != len(b) {
		panic("ppMaxAbsDiff: length mismatch")
	}
	var m float64
	for i := range a {
		m = math.Max(m, math.Abs(a[i]-b[i]))
	}
	return m
}

// CosineCoefficients against gonum's DCT-II. Note gonum's fourier.DCT type is
// the DCT-I (fftpack COST); the DCT-II is QuarterWaveFFT.CosSequence (fftpack
// COSQB), documented in gonum's internal/fftpack/cosq.go as
//
//	X_k = sum_{j=0..T-1} 4 y_j cos((2j+1) k pi / (2T)).
//
// docs/methods.md §1: t_j = (j+1/2)/T, so k pi t_j = (2j+1) k pi / (2T) and
//
//	c_0 = (1/T) sum_j y_j           = X_0 / (4T),
//	c_k = (sqrt 2/T) sum_j y_j cos  = sqrt(2) X_k / (4T),  k >= 1.
func TestCosineCoefficientsMatchGonumDCTII(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	for _, tc := range []struct {
		name string
		n, k int
	}{
		{"T2_K1", 2, 1},
		{"T3_K0", 3, 0},
		{"T8_K7", 8, 7},
		{"T17_K5", 17, 5},
		{"T100_K99", 100, 99},
		{"T240_K30", 240, 30},
		{"T1000_K40", 1000, 40},
	} {
		t.Run(tc.name, func(t *testing.T) {
			y := ppNormColumn(rng, tc.n)
			got := CosineCoefficients(y, tc.k)
			if len(got) != tc.k+1 {
				t.Fatalf("got %d coefficients, want K+1 = %d", len(got), tc.k+1)
			}
			x := fourier.NewQuarterWaveFFT(tc.n).CosSequence(nil, y)
			for k := 0; k <= tc.k; k++ {
				want := x[k] / (4 * float64(tc.n))
				if k > 0 {
					want *= math.Sqrt2
				}
				if math.Abs(got[k]-want) > 1e-12 {
					t.Errorf("c_%d = %.15g, gonum DCT-II gives %.15g", k, got[k], want)
				}
			}
		})
	}
}

// docs/methods.md §1: K = T-1 with sigma = 0 reproduces y exactly (the DCT-II
// basis on these sample points is orthogonal), up to rounding.
func TestCosineSmoothFullOrderReproduces(t *testing.T) {
	rng := rand.New(rand.NewPCG(2, 2))
	for _, n := range []int{2, 3, 10, 64, 333} {
		y := ppNormColumn(rng, n)
		for i := range y {
			y[i] += 1000 // an offset must survive too
		}
		got := CosineSmooth(y, n-1, 0)
		if d := ppMaxAbsDiff(got, y); d > 1e-9 {
			t.Errorf("T=%d: K=T-1, sigma=0 differs from y by %g", n, d)
		}
	}
}

// CosineSmooth against gonum's inverse transform. gonum's
// QuarterWaveFFT.CosCoefficients (fftpack COSQF, a DCT-III) computes
//
//	y_j = x_0 + sum_{k=1..T-1} 2 x_k cos((2j+1) k pi / (2T))
//
// (fftpack's documentation, 0-based), so y_hat of docs/methods.md §1 is that
// transform of x_0 = c_0, x_k = exp(-k^2 pi^2 sigma) c_k sqrt(2)/2 for k <= K
// and x_k = 0 above K.
func TestCosineSmoothMatchesGonumDCTIII(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 3))
	for _, tc := range []struct {
		name  string
		n, k  int
		sigma float64
	}{
		{"T50_K10_plain", 50, 10, 0},
		{"T50_K49_heat", 50, 49, 1e-3},
		{"T200_K20_heat", 200, 20, 5e-4},
		{"T7_K3_heat", 7, 3, 0.01},
	} {
		t.Run(tc.name, func(t *testing.T) {
			y := ppNormColumn(rng, tc.n)
			c := CosineCoefficients(y, tc.k)
			x := make([]float64, tc.n)
			for k := 0; k <= tc.k; k++ {
				e := math.Exp(-float64(k*k) * math.Pi * math.Pi * tc.sigma)
				x[k] = e * c[k]
				if k > 0 {
					x[k] *= math.Sqrt2 / 2
				}
			}
			want := fourier.NewQuarterWaveFFT(tc.n).CosCoefficients(nil, x)
			if d := ppMaxAbsDiff(CosineSmooth(y, tc.k, tc.sigma), want); d > 1e-12 {
				t.Errorf("CosineSmooth differs from gonum DCT-III by %g", d)
			}
		})
	}
}

// A pure basis function psi_m(t_j) has c = e_m (orthonormality of the basis,
// docs/methods.md §1), and the heat-kernel series scales it by
// exp(-m^2 pi^2 sigma).
func TestCosineSmoothBasisFunction(t *testing.T) {
	const n, m, sigma = 60, 4, 2e-3
	y := make([]float64, n)
	for j := range y {
		y[j] = math.Sqrt2 * math.Cos(float64(m)*math.Pi*(float64(j)+0.5)/n)
	}
	c := CosineCoefficients(y, 10)
	for k, v := range c {
		want := 0.0
		if k == m {
			want = 1
		}
		if math.Abs(v-want) > 1e-13 {
			t.Errorf("c_%d = %g, want %g", k, v, want)
		}
	}
	got := CosineSmooth(y, 10, sigma)
	f := math.Exp(-m * m * math.Pi * math.Pi * sigma)
	for j := range y {
		if math.Abs(got[j]-f*y[j]) > 1e-13 {
			t.Fatalf("y_hat[%d] = %g, want %g", j, got[j], f*y[j])
		}
	}
}

// Detrending against gonum's stat.LinearRegression: the result must be the
// least-squares residual y - alpha - beta*t.
func TestPreprocessDetrendMatchesLinearRegression(t *testing.T) {
	rng := rand.New(rand.NewPCG(4, 4))
	const n = 300
	idx := make([]float64, n)
	for i := range idx {
		idx[i] = float64(i)
	}
	// Region 0: exact line plus a sine; region 1: noise plus a steep line on a
	// large offset; region 2: noise only.
	r0, r1, r2 := make([]float64, n), make([]float64, n), ppNormColumn(rng, n)
	for i := range r0 {
		r0[i] = 3 - 0.02*float64(i) + math.Sin(float64(i)/7)
		r1[i] = 1000 + 0.5*float64(i) + rng.NormFloat64()
	}
	y := ppSeriesOf(r0, r1, r2)
	got, err := Preprocess(y, PreprocessOptions{Detrend: true})
	if err != nil {
		t.Fatal(err)
	}
	for j, col := range [][]float64{r0, r1, r2} {
		alpha, beta := stat.LinearRegression(idx, col, nil, false)
		want := make([]float64, n)
		for i := range want {
			want[i] = col[i] - alpha - beta*idx[i]
		}
		if d := ppMaxAbsDiff(got.Column(j), want); d > 1e-9 {
			t.Errorf("region %d: detrended differs from gonum residual by %g", j, d)
		}
	}
}

func TestPreprocessSteps(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 5))
	const n = 120
	cols := [][]float64{ppNormColumn(rng, n), ppNormColumn(rng, n), ppNormColumn(rng, n)}
	for i := range cols[1] {
		cols[1][i] = 500 + 5*cols[1][i]
	}
	y := ppSeriesOf(cols...)
	orig := append([]float64(nil), y.Data...)

	t.Run("demean", func(t *testing.T) {
		got, err := Preprocess(y, PreprocessOptions{})
		if err != nil {
			t.Fatal(err)
		}
		for j := range cols {
			// gonum stat.Mean as the reference for the subtracted mean.
			m := stat.Mean(cols[j], nil)
			want := make([]float64, n)
			for i := range want {
				want[i] = cols[j][i] - m
			}
			if d := ppMaxAbsDiff(got.Column(j), want); d > 1e-10 {
				t.Errorf("region %d: demeaned differs by %g", j, d)
			}
		}
	})
	t.Run("smooth", func(t *testing.T) {
		opt := PreprocessOptions{Detrend: true, SmoothK: 12, SmoothSigma: 1e-4}
		got, err := Preprocess(y, opt)
		if err != nil {
			t.Fatal(err)
		}
		idx := make([]float64, n)
		for i := range idx {
			idx[i] = float64(i)
		}
		for j := range cols {
			alpha, beta := stat.LinearRegression(idx, cols[j], nil, false)
			res := make([]float64, n)
			for i := range res {
				res[i] = cols[j][i] - alpha - beta*idx[i]
			}
			// Reference: gonum DCT-II then DCT-III (scalings as in the
			// tests above), truncated and heat-kernel weighted.
			qw := fourier.NewQuarterWaveFFT(n)
			x := qw.CosSequence(nil, res)
			for k := range x {
				switch {
				case k > opt.SmoothK:
					x[k] = 0
				case k == 0:
					x[k] /= 4 * n
				default:
					x[k] *= math.Exp(-float64(k*k)*math.Pi*math.Pi*opt.SmoothSigma) / (4 * n)
				}
			}
			want := qw.CosCoefficients(nil, x)
			if d := ppMaxAbsDiff(got.Column(j), want); d > 1e-9 {
				t.Errorf("region %d: smoothed differs from gonum reference by %g", j, d)
			}
		}
	})
	// The input must not change.
	if ppMaxAbsDiff(orig, y.Data) != 0 {
		t.Error("Preprocess modified its input")
	}
}

func TestConstantRegions(t *testing.T) {
	y := ppSeriesOf(
		[]float64{1, 2, 3, 4},
		[]float64{7, 7, 7, 7},
		[]float64{0, 0, 0, 1e-300},
		[]float64{math.NaN(), math.NaN(), math.NaN(), math.NaN()},
		[]float64{-2, -2, -2, -2},
	)
	// Expected by inspection of the columns above (all values equal).
	got := ConstantRegions(y)
	want := []int{1, 4}
	if len(got) != len(want) || got[0] != want[0] || got[1] != want[1] {
		t.Errorf("ConstantRegions = %v, want %v", got, want)
	}
}

func TestPreprocessErrors(t *testing.T) {
	rng := rand.New(rand.NewPCG(6, 6))
	good := func() Series {
		return ppSeriesOf(ppNormColumn(rng, 10), ppNormColumn(rng, 10), ppNormColumn(rng, 10))
	}
	withValue := func(tp, j int, v float64) Series {
		s := good()
		s.Data[tp*s.P+j] = v
		return s
	}
	constant := good()
	for tp := 0; tp < constant.T; tp++ {
		constant.Data[tp*constant.P+2] = 4.5
	}
	huge := good()
	huge.Data[0] = 1.5e308
	huge.Data[huge.P] = 1.5e308 // two of them overflow the region's sum
	line := good()
	for tp := 0; tp < line.T; tp++ {
		line.Data[tp*line.P+1] = 1000 + 0.37*float64(tp)
	}
	for _, tc := range []struct {
		name       string
		y          Series
		opt        PreprocessOptions
		is         error
		region, tp int // expected *RegionError position; region -1: not a RegionError
		contains   string
	}{
		{"T1", NewSeries(1, 3), PreprocessOptions{}, nil, -1, 0, "time points"},
		{"P1", ppSeriesOf(ppNormColumn(rng, 10)), PreprocessOptions{}, nil, -1, 0, "regions"},
		{"shape", Series{T: 3, P: 2, Data: make([]float64, 5)}, PreprocessOptions{}, nil, -1, 0, "holds 5 values"},
		{"NaN", withValue(3, 1, math.NaN()), PreprocessOptions{}, ErrNonFinite, 1, 3, "NaN"},
		{"+Inf", withValue(0, 2, math.Inf(1)), PreprocessOptions{}, ErrNonFinite, 2, 0, "+Inf"},
		{"-Inf", withValue(9, 0, math.Inf(-1)), PreprocessOptions{}, ErrNonFinite, 0, 9, "-Inf"},
		{"overflow", huge, PreprocessOptions{}, ErrNonFinite, 0, -1, "too large"},
		{"constant", constant, PreprocessOptions{}, ErrZeroVariance, 2, -1, "whole series"},
		{"pure line detrended", line, PreprocessOptions{Detrend: true}, ErrZeroVariance, 1, -1, "detrending"},
		{"K negative", good(), PreprocessOptions{SmoothK: -1}, nil, -1, 0, "negative"},
		{"K too big", good(), PreprocessOptions{SmoothK: 10}, nil, -1, 0, "exceeds T-1"},
		{"sigma negative", good(), PreprocessOptions{SmoothK: 3, SmoothSigma: -1}, nil, -1, 0, "sigma"},
		{"sigma NaN", good(), PreprocessOptions{SmoothK: 3, SmoothSigma: math.NaN()}, nil, -1, 0, "sigma"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Preprocess(tc.y, tc.opt)
			if err == nil {
				t.Fatal("no error")
			}
			if !strings.HasPrefix(err.Error(), "compute: ") || !strings.Contains(err.Error(), tc.contains) {
				t.Errorf("error %q: want prefix \"compute: \" and %q", err, tc.contains)
			}
			if tc.is != nil && !errors.Is(err, tc.is) {
				t.Errorf("error %q is not %v", err, tc.is)
			}
			var re *RegionError
			if tc.region >= 0 {
				if !errors.As(err, &re) {
					t.Fatalf("error %q is not a *RegionError", err)
				}
				if re.Region != tc.region || re.Time != tc.tp {
					t.Errorf("RegionError at region %d time %d, want region %d time %d", re.Region, re.Time, tc.region, tc.tp)
				}
			}
		})
	}
	// K = T-1 is allowed (docs/methods.md §1).
	if _, err := Preprocess(good(), PreprocessOptions{SmoothK: 9}); err != nil {
		t.Errorf("K = T-1: %v", err)
	}
}

func BenchmarkPreprocess(b *testing.B) {
	rng := rand.New(rand.NewPCG(7, 7))
	y := NewSeries(1000, 100)
	for i := range y.Data {
		y.Data[i] = 1000 + rng.NormFloat64()
	}
	opt := PreprocessOptions{Detrend: true, SmoothK: 200, SmoothSigma: 1e-5}
	for b.Loop() {
		if _, err := Preprocess(y, opt); err != nil {
			b.Fatal(err)
		}
	}
}
