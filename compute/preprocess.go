package compute

import (
	"errors"
	"fmt"
	"math"
	"strings"
)

// ErrNonFinite is wrapped by the error for a NaN or infinite value in a series.
var ErrNonFinite = errors.New("compute: value is not finite")

// ErrZeroVariance is wrapped by the error for a region whose values do not
// vary, over the whole series or within one window; its correlations are not
// defined.
var ErrZeroVariance = errors.New("compute: zero variance")

// RegionError reports a problem with one region of a series, at one time
// point or in one window when that applies. Use errors.Is with ErrNonFinite
// or ErrZeroVariance to tell the kinds apart, and errors.As to read the
// position.
type RegionError struct {
	Region int // 0-based region (column) index
	Time   int // 0-based time point, or -1 when the problem is not at one point
	Window int // 0-based window index, or -1 when no window is involved
	Start  int // first time point of the window (meaningful when Window >= 0)
	Width  int // window width in time points (meaningful when Window >= 0)
	Err    error
}

func (e *RegionError) Error() string {
	var b strings.Builder
	fmt.Fprintf(&b, "compute: region %d", e.Region)
	if e.Time >= 0 {
		fmt.Fprintf(&b, ", time point %d", e.Time)
	}
	if e.Window >= 0 {
		fmt.Fprintf(&b, ", window %d (time points %d..%d)", e.Window, e.Start, e.Start+e.Width-1)
	}
	b.WriteString(": ")
	b.WriteString(strings.TrimPrefix(e.Err.Error(), "compute: "))
	return b.String()
}

func (e *RegionError) Unwrap() error { return e.Err }

// PreprocessOptions selects the optional steps of Preprocess. The zero value
// only demeans.
type PreprocessOptions struct {
	// Detrend removes each region's least-squares straight line in the time
	// index (after demeaning).
	Detrend bool
	// SmoothK is the highest cosine term kept (docs/methods.md §1): 0 means
	// no smoothing; otherwise terms k = 0..SmoothK are used. It must be at
	// most T-1.
	SmoothK int
	// SmoothSigma is the heat-kernel weight sigma >= 0 of docs/methods.md §1:
	// term k is weighted by exp(-k^2 pi^2 sigma). 0 gives the plain truncated
	// cosine series. It is ignored when SmoothK is 0.
	SmoothSigma float64
}

// Validate checks the options against a series of t time points.
func (o PreprocessOptions) Validate(t int) error {
	switch {
	case o.SmoothK < 0:
		return fmt.Errorf("compute: smoothing order SmoothK=%d is negative", o.SmoothK)
	case o.SmoothK > 0 && o.SmoothK > t-1:
		return fmt.Errorf("compute: smoothing order SmoothK=%d exceeds T-1=%d", o.SmoothK, t-1)
	case math.IsNaN(o.SmoothSigma) || math.IsInf(o.SmoothSigma, 0) || o.SmoothSigma < 0:
		return fmt.Errorf("compute: smoothing sigma %v is not a finite number >= 0", o.SmoothSigma)
	}
	return nil
}

// checkSeriesValues checks the shape of y and that every value is finite.
func checkSeriesValues(y Series) error {
	if y.T < 0 || y.P < 0 || len(y.Data) != y.T*y.P {
		return fmt.Errorf("compute: series holds %d values, want T*P = %d*%d", len(y.Data), y.T, y.P)
	}
	if y.T < 2 {
		return fmt.Errorf("compute: series has %d time points, need at least 2", y.T)
	}
	if y.P < 2 {
		return fmt.Errorf("compute: series has %d regions, need at least 2", y.P)
	}
	for i, v := range y.Data {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return &RegionError{Region: i % y.P, Time: i / y.P, Window: -1,
				Err: fmt.Errorf("%w (%v)", ErrNonFinite, v)}
		}
	}
	return nil
}

// ConstantRegions returns, in increasing order, the indices of the regions
// whose values are all equal (zero variance over the whole series), so a
// caller can apply its own policy (drop them, or refuse the subject). A region
// holding a NaN is not reported as constant. It returns nil when there are
// none or the series is empty.
func ConstantRegions(y Series) []int {
	if y.T == 0 || len(y.Data) != y.T*y.P {
		return nil
	}
	var out []int
	for j := 0; j < y.P; j++ {
		first := y.Data[j]
		constant := true
		for t := 1; t < y.T; t++ {
			if y.Data[t*y.P+j] != first {
				constant = false
				break
			}
		}
		if constant {
			out = append(out, j)
		}
	}
	return out
}

// leftoverRatio is the fraction of a region's demeaned sum of squares below
// which what survives detrending or smoothing is treated as rounding noise:
// such a region (an exact straight line, for example) has no variance left.
const leftoverRatio = 1e-20

// Preprocess returns a new series in which each region j has been
//
//  1. demeaned: y_j(t) - mean_t y_j(t);
//  2. if opt.Detrend, detrended: the least-squares line a + b*t in the time
//     index t = 0..T-1 is subtracted (after step 1, a = -b*(T-1)/2);
//  3. if opt.SmoothK > 0, replaced by CosineSmooth(y_j, opt.SmoothK,
//     opt.SmoothSigma), the heat-kernel weighted cosine series of docs/methods.md
//     §1.
//
// y is not modified. All arithmetic is float64.
//
// Errors (text starting "compute: "): T < 2 or P < 2; bad options (see
// PreprocessOptions.Validate); a NaN or infinite value (a *RegionError naming
// region and time point, wrapping ErrNonFinite); a region constant over the
// whole series (a *RegionError wrapping ErrZeroVariance, naming the first such
// region; ConstantRegions lists them all); values so large that their sums
// overflow float64 (ErrNonFinite); and a region with no variance
// left after steps 2-3, i.e. a sum of squares below 1e-20 times its demeaned
// sum of squares (also ErrZeroVariance).
func Preprocess(y Series, opt PreprocessOptions) (Series, error) {
	if err := checkSeriesValues(y); err != nil {
		return Series{}, err
	}
	if err := opt.Validate(y.T); err != nil {
		return Series{}, err
	}
	if c := ConstantRegions(y); len(c) > 0 {
		return Series{}, &RegionError{Region: c[0], Time: -1, Window: -1,
			Err: fmt.Errorf("%w over the whole series (%d constant region(s) in all)", ErrZeroVariance, len(c))}
	}

	T, P := y.T, y.P
	out := NewSeries(T, P)
	col := make([]float64, T)
	var tab *cosineTable
	if opt.SmoothK > 0 {
		tab = newCosineTable(T)
	}
	// Centred time index for detrending: u_t = t - (T-1)/2, sum u_t^2 = T(T^2-1)/12.
	tc := float64(T-1) / 2
	suu := float64(T) * (float64(T)*float64(T) - 1) / 12

	for j := 0; j < P; j++ {
		var mean float64
		for t := 0; t < T; t++ {
			col[t] = y.Data[t*P+j]
			mean += col[t]
		}
		mean /= float64(T)
		var ss0 float64
		for t := range col {
			col[t] -= mean
			ss0 += col[t] * col[t]
		}
		if opt.Detrend {
			var suy float64
			for t, v := range col {
				suy += (float64(t) - tc) * v
			}
			b := suy / suu
			for t := range col {
				col[t] -= b * (float64(t) - tc)
			}
		}
		res := col
		if tab != nil {
			res = tab.smooth(col, opt.SmoothK, opt.SmoothSigma)
		}
		var ss float64
		for t, v := range res {
			ss += v * v
			out.Data[t*P+j] = v
		}
		if math.IsNaN(ss0) || math.IsInf(ss0, 0) || math.IsNaN(ss) || math.IsInf(ss, 0) {
			return Series{}, &RegionError{Region: j, Time: -1, Window: -1,
				Err: fmt.Errorf("%w: values too large for float64 sums", ErrNonFinite)}
		}
		if ss <= leftoverRatio*ss0 {
			return Series{}, &RegionError{Region: j, Time: -1, Window: -1,
				Err: fmt.Errorf("%w left after detrending/smoothing", ErrZeroVariance)}
		}
	}
	return out, nil
}

// cosineTable holds cos(pi*m/(2T)) for m = 0..4T-1, so that
// cos(k*pi*t_j) = cos(pi*k*(2j+1)/(2T)) is an exact table lookup at
// m = k*(2j+1) mod 4T, with t_j = (j+1/2)/T.
type cosineTable struct {
	n   int // T
	cos []float64
}

func newCosineTable(n int) *cosineTable {
	c := make([]float64, 4*n)
	for m := range c {
		c[m] = math.Cos(math.Pi * float64(m) / float64(2*n))
	}
	return &cosineTable{n: n, cos: c}
}

// coefficients returns c_0..c_K of docs/methods.md §1.
func (tb *cosineTable) coefficients(y []float64, K int) []float64 {
	n := tb.n
	n4 := 4 * n
	c := make([]float64, K+1)
	invN := 1 / float64(n)
	for k := 0; k <= K; k++ {
		step := (2 * k) % n4
		m := k % n4
		var s float64
		for _, v := range y {
			s += v * tb.cos[m]
			m += step
			if m >= n4 {
				m -= n4
			}
		}
		s *= invN
		if k > 0 {
			s *= math.Sqrt2
		}
		c[k] = s
	}
	return c
}

// smooth evaluates sum_{k=0..K} exp(-k^2 pi^2 sigma) c_k psi_k(t_j).
func (tb *cosineTable) smooth(y []float64, K int, sigma float64) []float64 {
	n := tb.n
	n4 := 4 * n
	c := tb.coefficients(y, K)
	out := make([]float64, n)
	for k := 0; k <= K; k++ {
		a := c[k] * math.Exp(-float64(k)*float64(k)*math.Pi*math.Pi*sigma)
		if a == 0 {
			continue
		}
		if k > 0 {
			a *= math.Sqrt2
		}
		step := (2 * k) % n4
		m := k % n4
		for j := range out {
			out[j] += a * tb.cos[m]
			m += step
			if m >= n4 {
				m -= n4
			}
		}
	}
	return out
}

// CosineCoefficients returns c_0..c_K of the cosine series representation of
// docs/methods.md §1 for one series y of length T:
//
//	c_k = (1/T) sum_{j=0..T-1} y_j psi_k(t_j),  t_j = (j + 1/2)/T,
//	psi_0 = 1, psi_k(t) = sqrt(2) cos(k pi t) for k >= 1.
//
// Up to the scale factors these are the DCT-II of y. K may exceed T-1 (the
// terms then alias lower ones). It panics if y is empty or K < 0.
func CosineCoefficients(y []float64, K int) []float64 {
	if len(y) == 0 || K < 0 {
		panic(fmt.Sprintf("compute: CosineCoefficients needs a non-empty series and K >= 0 (len %d, K %d)", len(y), K))
	}
	return newCosineTable(len(y)).coefficients(y, K)
}

// CosineSmooth returns the heat-kernel weighted cosine series of docs/methods.md
// §1 evaluated at the sample points t_j = (j + 1/2)/T:
//
//	y_hat(t_j) = sum_{k=0..K} exp(-k^2 pi^2 sigma) c_k psi_k(t_j),
//
// with c_k from CosineCoefficients. sigma = 0 gives the plain truncated
// expansion, and K = T-1 with sigma = 0 reproduces y up to rounding. It panics
// if y is empty, K < 0 or sigma is negative or not finite.
func CosineSmooth(y []float64, K int, sigma float64) []float64 {
	if len(y) == 0 || K < 0 || !(sigma >= 0) || math.IsInf(sigma, 1) {
		panic(fmt.Sprintf("compute: CosineSmooth needs a non-empty series, K >= 0 and finite sigma >= 0 (len %d, K %d, sigma %v)", len(y), K, sigma))
	}
	return newCosineTable(len(y)).smooth(y, K, sigma)
}
