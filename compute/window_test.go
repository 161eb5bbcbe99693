package compute

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"
)

// docs/methods.md §2: starts 0, s, 2s, ... while start + w <= T. The count is
// taken by walking the starts, independently of the closed form.
func TestNumWindowsAndStarts(t *testing.T) {
	for _, tc := range []struct{ T, w, s int }{
		{1000, 50, 1}, {100, 10, 3}, {10, 10, 1}, {9, 10, 1}, {11, 10, 2},
		{12, 10, 2}, {1000, 44, 22}, {2, 2, 5}, {0, 2, 1},
	} {
		var starts []int
		for a := 0; a+tc.w <= tc.T; a += tc.s {
			starts = append(starts, a)
		}
		if got := NumWindows(tc.T, tc.w, tc.s); got != len(starts) {
			t.Errorf("NumWindows(%d,%d,%d) = %d, walking the starts gives %d", tc.T, tc.w, tc.s, got, len(starts))
		}
		for i, a := range starts {
			if got := WindowStart(i, tc.s); got != a {
				t.Errorf("WindowStart(%d,%d) = %d, want %d", i, tc.s, got, a)
			}
		}
	}
	// Invalid widths or steps: no windows.
	for _, c := range [][3]int{{10, 0, 1}, {10, 2, 0}, {10, 2, -1}} {
		if got := NumWindows(c[0], c[1], c[2]); got != 0 {
			t.Errorf("NumWindows%v = %d, want 0", c, got)
		}
	}
	// docs/methods.md §2: centre (start + (w-1)/2) * TR; worked by hand:
	// window 3, w = 30, s = 2, TR = 1.5 s: (6 + 14.5) * 1.5 = 30.75 s.
	if got := WindowCentre(3, 30, 2, 1.5); math.Abs(got-30.75) > 1e-12 {
		t.Errorf("WindowCentre = %g, want 14.76", got)
	}
}

// TaperWeights against the convolution written with gonum's Normal CDF:
// (1_[0,w) * N(0, sigma^2))(x) = Phi(x/sigma) - Phi((x-w)/sigma) at x = t+1/2.
func TestTaperWeights(t *testing.T) {
	for _, tc := range []struct {
		w     int
		sigma float64
	}{{50, 3}, {20, 1}, {7, 10}, {2, 0.5}} {
		n := distuv.Normal{Mu: 0, Sigma: tc.sigma}
		got := TaperWeights(tc.w, tc.sigma)
		for i, g := range got {
			x := float64(i) + 0.5
			want := n.CDF(x) - n.CDF(x-float64(tc.w))
			if math.Abs(g-want) > 1e-14 {
				t.Errorf("w=%d sigma=%g: g_%d = %.16g, gonum Normal CDF gives %.16g", tc.w, tc.sigma, i, g, want)
			}
		}
	}
	// sigma = 0 is the rectangle (documented limit).
	for _, g := range TaperWeights(5, 0) {
		if g != 1 {
			t.Errorf("sigma 0: weight %g, want 1", g)
		}
	}
}

// winMixedSeries returns T x p correlated series: regions share three latent
// AR(1) signals with region-specific loadings, plus noise, scaled by amp on
// an offset. AR(1) keeps the window correlations varied.
func winMixedSeries(rng *rand.Rand, T, p int, offset, amp float64) Series {
	const f = 3
	load := make([]float64, p*f)
	for i := range load {
		load[i] = rng.NormFloat64()
	}
	lat := make([]float64, f)
	y := NewSeries(T, p)
	for t := 0; t < T; t++ {
		for k := range lat {
			lat[k] = 0.9*lat[k] + rng.NormFloat64()
		}
		for j := 0; j < p; j++ {
			v := 0.5 * rng.NormFloat64()
			for k := range lat {
				v += load[j*f+k] * lat[k]
			}
			y.Data[t*p+j] = offset + amp*v
		}
	}
	return y
}

// winLevelShiftSeries is winMixedSeries (400 x 5) whose region 0 jumps by
// 1e6 halfway and otherwise varies by ~1e-3: a window's spread is then
// ~1e-9 of the series spread, so the running-sum formula would cancel away
// and SlidingCorrelations takes its two-pass fallback there.
func winLevelShiftSeries(rng *rand.Rand) Series {
	y := winMixedSeries(rng, 400, 5, 0, 1)
	for tp := 0; tp < y.T; tp++ {
		v := 1e-3 * rng.NormFloat64()
		if tp >= y.T/2 {
			v += 1e6
		}
		y.Data[tp*y.P] = v
	}
	return y
}

// winCheckAgainstGonum compares every window and pair with gonum's
// stat.Correlation on the raw window (weights g, nil for the rectangle),
// optionally through math.Atanh.
func winCheckAgainstGonum(t *testing.T, y Series, opt WindowOptions, g []float64, tol float64) {
	t.Helper()
	got, err := SlidingCorrelations(y, opt)
	if err != nil {
		t.Fatal(err)
	}
	W := NumWindows(y.T, opt.Width, opt.Step)
	if got.Rows != W || got.Cols != PairCount(y.P) {
		t.Fatalf("shape %dx%d, want %dx%d", got.Rows, got.Cols, W, PairCount(y.P))
	}
	cols := make([][]float64, y.P)
	for j := range cols {
		cols[j] = y.Column(j)
	}
	var worst float64
	for i := 0; i < W; i++ {
		a := WindowStart(i, opt.Step)
		row := got.Row(i)
		for j := 0; j < y.P; j++ {
			for k := j + 1; k < y.P; k++ {
				want := stat.Correlation(cols[j][a:a+opt.Width], cols[k][a:a+opt.Width], g)
				if opt.FisherZ {
					want = math.Atanh(math.Max(-FisherClamp, math.Min(FisherClamp, want)))
				}
				v := float64(row[PairIndex(y.P, j, k)])
				if math.IsNaN(v) {
					t.Fatalf("window %d pair (%d,%d): NaN", i, j, k)
				}
				d := math.Abs(v - want)
				worst = math.Max(worst, d)
				if d > tol {
					t.Fatalf("window %d pair (%d,%d): got %.8g, gonum gives %.8g (diff %g)", i, j, k, v, want, d)
				}
			}
		}
	}
	t.Logf("largest difference from gonum: %.3g", worst)
}

// SlidingCorrelations against gonum stat.Correlation window by window
// (docs/methods.md §2 names gonum as the outside check). The cases cover the
// running-sum path (2s < w) and the direct path (2s >= w), a long series at
// step 1, and a series on an offset of 1000 with a 1 % signal.
func TestSlidingCorrelationsMatchGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(10, 10))
	step := winLevelShiftSeries(rng) // the two-pass fallback is used in some windows
	for _, tc := range []struct {
		name string
		y    Series
		opt  WindowOptions
	}{
		{"running_w30_s1", winMixedSeries(rng, 300, 7, 0, 1), WindowOptions{Width: 30, Step: 1}},
		{"running_w30_s4", winMixedSeries(rng, 300, 7, 0, 1), WindowOptions{Width: 30, Step: 4}},
		{"direct_w20_s10", winMixedSeries(rng, 300, 7, 0, 1), WindowOptions{Width: 20, Step: 10}},
		{"direct_w10_s25", winMixedSeries(rng, 300, 7, 0, 1), WindowOptions{Width: 10, Step: 25}},
		{"w2", winMixedSeries(rng, 40, 3, 0, 1), WindowOptions{Width: 2, Step: 1}},
		{"whole_series", winMixedSeries(rng, 60, 4, 0, 1), WindowOptions{Width: 60, Step: 1}},
		// Long run of running sums (T = 2000, step 1, > 7 refreshes).
		{"long_T2000_s1", winMixedSeries(rng, 2000, 6, 0, 1), WindowOptions{Width: 50, Step: 1}},
		// docs/methods.md §2 precision: offset 1000, 1 % signal.
		{"offset1000_running", winMixedSeries(rng, 2000, 6, 1000, 2.5), WindowOptions{Width: 50, Step: 1}},
		{"offset1000_direct", winMixedSeries(rng, 600, 6, 1000, 2.5), WindowOptions{Width: 40, Step: 20}},
		{"step_change", step, WindowOptions{Width: 40, Step: 1}},
		{"fisher_running", winMixedSeries(rng, 300, 5, 1000, 2.5), WindowOptions{Width: 30, Step: 2, FisherZ: true}},
		{"fisher_direct", winMixedSeries(rng, 300, 5, 0, 1), WindowOptions{Width: 30, Step: 30, FisherZ: true}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			// Storing float32 rounds r by at most 6e-8 (half the float32
			// spacing below 1); 1e-6 leaves room for float64 rounding and is
			// tighter than the 1e-5 docs/methods.md §2 asks of stored correlations. Fisher z
			// values reach ~4 here, where half the float32 spacing is 2.4e-7.
			winCheckAgainstGonum(t, tc.y, tc.opt, nil, 1e-6)
		})
	}
}

// Tapered windows against gonum stat.Correlation with weights computed in the
// test from gonum's Normal CDF (the convolution in TaperWeights' comment).
func TestSlidingCorrelationsTaperMatchGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 11))
	weights := func(w int, sigma float64) []float64 {
		n := distuv.Normal{Mu: 0, Sigma: sigma}
		g := make([]float64, w)
		for i := range g {
			x := float64(i) + 0.5
			g[i] = n.CDF(x) - n.CDF(x-float64(w))
		}
		return g
	}
	for _, tc := range []struct {
		name  string
		y     Series
		opt   WindowOptions
		sigma float64 // the sigma the weights must use
	}{
		{"default_sigma", winMixedSeries(rng, 200, 6, 0, 1), WindowOptions{Width: 40, Step: 3, Taper: TaperGauss}, DefaultGaussSigma},
		{"sigma8", winMixedSeries(rng, 200, 6, 0, 1), WindowOptions{Width: 40, Step: 1, Taper: TaperGauss, GaussSigma: 8}, 8},
		{"offset1000", winMixedSeries(rng, 300, 5, 1000, 2.5), WindowOptions{Width: 50, Step: 5, Taper: TaperGauss, GaussSigma: 4}, 4},
		{"fisher", winMixedSeries(rng, 200, 5, 0, 1), WindowOptions{Width: 30, Step: 7, Taper: TaperGauss, FisherZ: true}, DefaultGaussSigma},
	} {
		t.Run(tc.name, func(t *testing.T) {
			winCheckAgainstGonum(t, tc.y, tc.opt, weights(tc.opt.Width, tc.sigma), 1e-6) // as above
		})
	}
	// The taper must make a difference: with sigma 8 over w = 40 the weighted
	// and plain correlations differ somewhere by more than the tolerance.
	y := winMixedSeries(rng, 200, 6, 0, 1)
	a, err := SlidingCorrelations(y, WindowOptions{Width: 40, Step: 1, Taper: TaperGauss, GaussSigma: 8})
	if err != nil {
		t.Fatal(err)
	}
	b, err := SlidingCorrelations(y, WindowOptions{Width: 40, Step: 1})
	if err != nil {
		t.Fatal(err)
	}
	var d float64
	for i := range a.Data {
		d = math.Max(d, math.Abs(float64(a.Data[i]-b.Data[i])))
	}
	if d < 1e-3 {
		t.Errorf("tapered and plain windows differ by at most %g", d)
	}
}

// Perfectly correlated regions: r = 1 exactly (Pearson), so Fisher z is the
// clamp atanh(FisherClamp) from the math library, and -1 maps to its negative.
func TestSlidingCorrelationsFisherClamp(t *testing.T) {
	rng := rand.New(rand.NewPCG(12, 12))
	base := ppNormColumn(rng, 80)
	up, down := make([]float64, 80), make([]float64, 80)
	for i, v := range base {
		up[i] = 2*v + 3
		down[i] = -0.5*v + 1000
	}
	y := ppSeriesOf(base, up, down)
	for _, step := range []int{1, 20} { // running and direct paths
		got, err := SlidingCorrelations(y, WindowOptions{Width: 20, Step: step, FisherZ: true})
		if err != nil {
			t.Fatal(err)
		}
		want := float32(math.Atanh(1 - 1e-7))
		for i := 0; i < got.Rows; i++ {
			r := got.Row(i)
			if r[PairIndex(3, 0, 1)] != want || r[PairIndex(3, 0, 2)] != -want || r[PairIndex(3, 1, 2)] != -want {
				t.Fatalf("step %d window %d: %v, want ±%v", step, i, r, want)
			}
		}
	}
}

func TestSlidingCorrelationsErrors(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 13))
	good := func() Series { return winMixedSeries(rng, 100, 4, 0, 1) }
	// Region 2 constant over time points 10..69: with w = 50, s = 1 the first
	// window wholly inside is window 10 (start 10); with s = 4 it is window 3
	// (start 12); windows 0..9 still see variation.
	flat := good()
	for tp := 10; tp < 70; tp++ {
		flat.Data[tp*flat.P+2] = 0.25
	}
	allFlat := good()
	for tp := 0; tp < allFlat.T; tp++ {
		allFlat.Data[tp*allFlat.P+1] = -3
	}
	nan := good()
	nan.Data[17*nan.P+3] = math.NaN()
	huge := good()
	for tp := 0; tp < huge.T; tp++ {
		huge.Data[tp*huge.P] = 1e308 // the region's sum overflows float64
	}
	type want struct {
		is                   error
		region, time, window int // -2: not a RegionError
		start                int
	}
	noRegion := want{nil, -2, 0, 0, 0}
	for _, tc := range []struct {
		name     string
		y        Series
		opt      WindowOptions
		want     want
		contains string
	}{
		{"T<w", good(), WindowOptions{Width: 101, Step: 1}, noRegion, "fewer than the window width"},
		{"s<1", good(), WindowOptions{Width: 10, Step: 0}, noRegion, "step"},
		{"w<2", good(), WindowOptions{Width: 1, Step: 1}, noRegion, "width"},
		{"bad taper", good(), WindowOptions{Width: 10, Step: 1, Taper: Taper(7)}, noRegion, "taper"},
		{"negative sigma", good(), WindowOptions{Width: 10, Step: 1, Taper: TaperGauss, GaussSigma: -1}, noRegion, "sigma"},
		{"P<2", ppSeriesOf(ppNormColumn(rng, 50)), WindowOptions{Width: 10, Step: 1}, noRegion, "regions"},
		{"NaN", nan, WindowOptions{Width: 10, Step: 1}, want{ErrNonFinite, 3, 17, -1, 0}, "NaN"},
		{"overflow", huge, WindowOptions{Width: 10, Step: 1}, want{ErrNonFinite, 0, -1, -1, 0}, "too large"},
		{"flat running", flat, WindowOptions{Width: 50, Step: 1}, want{ErrZeroVariance, 2, -1, 10, 10}, "window 10 (time points 10..59)"},
		{"flat s4", flat, WindowOptions{Width: 50, Step: 4}, want{ErrZeroVariance, 2, -1, 3, 12}, "window 3 (time points 12..61)"},
		{"flat direct", flat, WindowOptions{Width: 50, Step: 30}, noRegion, ""}, // T=100: windows 0..49 and 30..79, neither wholly flat
		{"flat taper", flat, WindowOptions{Width: 50, Step: 2, Taper: TaperGauss}, want{ErrZeroVariance, 2, -1, 5, 10}, "zero variance"},
		{"constant region", allFlat, WindowOptions{Width: 20, Step: 1}, want{ErrZeroVariance, 1, -1, 0, 0}, "region 1"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			m, err := SlidingCorrelations(tc.y, tc.opt)
			if tc.contains == "" { // a valid case next to the failing ones
				if err != nil {
					t.Fatalf("unexpected error %v", err)
				}
				for _, v := range m.Data {
					if math.IsNaN(float64(v)) {
						t.Fatal("NaN in output")
					}
				}
				return
			}
			if err == nil {
				t.Fatal("no error")
			}
			if !strings.HasPrefix(err.Error(), "compute: ") || !strings.Contains(err.Error(), tc.contains) {
				t.Errorf("error %q: want prefix \"compute: \" and %q", err, tc.contains)
			}
			if tc.want.is != nil && !errors.Is(err, tc.want.is) {
				t.Errorf("error %q is not %v", err, tc.want.is)
			}
			if tc.want.region == -2 {
				return
			}
			var re *RegionError
			if !errors.As(err, &re) {
				t.Fatalf("error %q is not a *RegionError", err)
			}
			if re.Region != tc.want.region || re.Time != tc.want.time || re.Window != tc.want.window ||
				(re.Window >= 0 && re.Start != tc.want.start) {
				t.Errorf("RegionError %+v, want region %d time %d window %d start %d", re, tc.want.region, tc.want.time, tc.want.window, tc.want.start)
			}
		})
	}
}

// WindowVariance against gonum stat.PopVariance row by row.
func TestWindowVariance(t *testing.T) {
	rng := rand.New(rand.NewPCG(14, 14))
	m := NewMatrix32(6, 45)
	for i := range m.Data {
		m.Data[i] = float32(rng.NormFloat64()*float64(1+i/45) + 0.3)
	}
	got := WindowVariance(m)
	for i := 0; i < m.Rows; i++ {
		row := make([]float64, m.Cols)
		for k, v := range m.Row(i) {
			row[k] = float64(v)
		}
		if want := stat.PopVariance(row, nil); math.Abs(got[i]-want) > 1e-12*want {
			t.Errorf("row %d: variance %g, gonum PopVariance %g", i, got[i], want)
		}
	}
}

// LocalMaxima: expected indices worked by hand from the rule in its doc
// comment (v[i] > v[i-1], v[i] >= v[i+1], missing neighbours are -Inf).
func TestLocalMaxima(t *testing.T) {
	nan := math.NaN()
	for _, tc := range []struct {
		name string
		v    []float64
		want []int
	}{
		{"empty", nil, nil},
		{"single", []float64{2}, []int{0}},
		{"peaks", []float64{0, 3, 1, 2, 5, 4}, []int{1, 4}},
		{"ends", []float64{5, 1, 2, 0, 3}, []int{0, 2, 4}},
		{"plateau first point", []float64{1, 3, 3, 1}, []int{1}},
		{"plateau at start", []float64{3, 3, 1}, []int{0}},
		{"rising", []float64{1, 2, 3}, []int{2}},
		{"falling", []float64{3, 2, 1}, []int{0}},
		{"flat", []float64{2, 2, 2}, []int{0}},
		{"NaN", []float64{1, nan, 2, 1, nan}, nil},
		{"NaN alone", []float64{nan}, nil},
	} {
		t.Run(tc.name, func(t *testing.T) {
			got := LocalMaxima(tc.v)
			if len(got) != len(tc.want) {
				t.Fatalf("LocalMaxima(%v) = %v, want %v", tc.v, got, tc.want)
			}
			for i := range got {
				if got[i] != tc.want[i] {
					t.Fatalf("LocalMaxima(%v) = %v, want %v", tc.v, got, tc.want)
				}
			}
		})
	}
}

// BenchmarkSlidingCorrelations: one subject of our typical cohort (p = 100
// regions, T = 1000, w = 50, s = 1), rectangular windows.
func BenchmarkSlidingCorrelations(b *testing.B) {
	y := winMixedSeries(rand.New(rand.NewPCG(15, 15)), 1000, 100, 1000, 2.5)
	opt := WindowOptions{Width: 50, Step: 1}
	for b.Loop() {
		if _, err := SlidingCorrelations(y, opt); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkSlidingCorrelationsTaper: the same subject with the Gaussian taper
// (direct O(w p^2) per window).
func BenchmarkSlidingCorrelationsTaper(b *testing.B) {
	y := winMixedSeries(rand.New(rand.NewPCG(15, 15)), 1000, 100, 1000, 2.5)
	opt := WindowOptions{Width: 50, Step: 1, Taper: TaperGauss}
	for b.Loop() {
		if _, err := SlidingCorrelations(y, opt); err != nil {
			b.Fatal(err)
		}
	}
}

// Regions 1 and 2 are exact affine images of region 0, so by the definition
// of Pearson's r every window gives r = +1 for (0,1) and -1 for (0,2), (1,2).
func ExampleSlidingCorrelations() {
	y := NewSeries(8, 3)
	for t, v := range []float64{3, 1, 4, 1, 5, 9, 2, 6} {
		y.Data[t*3+0] = v
		y.Data[t*3+1] = 1000 + 2*v
		y.Data[t*3+2] = -v
	}
	win, err := SlidingCorrelations(y, WindowOptions{Width: 4, Step: 2})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(win.Rows, "windows of", win.Cols, "pairs")
	for i := 0; i < win.Rows; i++ {
		fmt.Println(WindowStart(i, 2), win.Row(i))
	}
	// Output:
	// 3 windows of 3 pairs
	// 0 [1 -1 -1]
	// 2 [1 -1 -1]
	// 4 [1 -1 -1]
}
