package compute

import (
	"fmt"
	"math"
	"math/cmplx"
	"math/rand/v2"

	"gonum.org/v1/gonum/dsp/fourier"
)

// PhaseSurrogate returns a multivariate phase-randomised surrogate of y
// (Prichard and Theiler, Phys. Rev. Lett. 73, 951, 1994; docs/methods.md
// §10). Every region is demeaned and transformed by the real discrete
// Fourier transform X_j(f) = sum_t y_j(t) exp(-2 pi i f t / T); at each
// frequency 0 < f < T/2 one phase phi_f, uniform on [0, 2 pi) and drawn from
// rng in increasing f, is added to every region, X'_j(f) = X_j(f) exp(i
// phi_f); for even T the Nyquist coefficient (real) is multiplied by +1 or
// -1 with probability 1/2 each (a phase of 0 or pi, drawn after the others);
// the DC term stays 0. The inverse transform divided by T, plus each region's
// mean, is the surrogate.
//
// Because the amplitudes |X_j(f)| are unchanged, every region keeps its
// periodogram; because the same phase is added to all regions, every
// cross-spectrum X_j(f) conj(X_l(f)) is unchanged, so the lag-0 sample
// covariance (the sum of the cross-spectra) and with it the static
// correlation matrix are kept to floating-point error. Everything else
// (in particular any change of the correlations over time beyond what a
// stationary linear Gaussian process with these spectra shows) is destroyed.
//
// The caller supplies rng (seeded from (seed, surrogate, subject) in
// topostate). It panics if y has fewer than 2 time points.
func PhaseSurrogate(y Series, rng *rand.Rand) Series {
	if y.T < 2 {
		panic(fmt.Sprintf("compute: PhaseSurrogate: %d time points, need at least 2", y.T))
	}
	T, P := y.T, y.P
	nf := T/2 + 1
	rot := make([]complex128, nf)
	// rot[0] stays 0: the DC term is removed (each region is demeaned).
	for f := 1; f < nf; f++ {
		if T%2 == 0 && f == T/2 {
			continue
		}
		rot[f] = cmplx.Exp(complex(0, 2*math.Pi*rng.Float64()))
	}
	if T%2 == 0 {
		rot[T/2] = 1
		if rng.IntN(2) == 1 {
			rot[T/2] = -1
		}
	}
	fft := fourier.NewFFT(T)
	col := make([]float64, T)
	coef := make([]complex128, nf)
	out := NewSeries(T, P)
	for j := 0; j < P; j++ {
		mean := 0.0
		for t := 0; t < T; t++ {
			col[t] = y.Data[t*P+j]
			mean += col[t]
		}
		mean /= float64(T)
		for t := range col {
			col[t] -= mean
		}
		fft.Coefficients(coef, col)
		for f := range coef {
			coef[f] *= rot[f]
		}
		fft.Sequence(col, coef)
		for t := 0; t < T; t++ {
			out.Data[t*P+j] = col[t]/float64(T) + mean
		}
	}
	return out
}

// TemporalVariability returns the mean over columns (region pairs) of the
// standard deviation over rows (windows) of win, sqrt(sum_w (x_w - xbar)^2 /
// (n - 1)), for a subject's window correlations: how much the windowed
// connectivity moves over time (docs/methods.md §10). It returns 0 for fewer
// than two windows.
func TemporalVariability(win Matrix32) float64 {
	n, D := win.Rows, win.Cols
	if n < 2 || D == 0 {
		return 0
	}
	mean := make([]float64, D)
	for r := 0; r < n; r++ {
		addWiden(mean, win.Row(r)) // the same sums, row by row, in AVX2
	}
	for q := range mean {
		mean[q] /= float64(n)
	}
	ss := make([]float64, D)
	for r := 0; r < n; r++ {
		for q, v := range win.Row(r) {
			d := float64(v) - mean[q]
			ss[q] += d * d
		}
	}
	sum := 0.0
	for _, s := range ss {
		sum += math.Sqrt(s / float64(n-1))
	}
	return sum / float64(D)
}

// BettiSupDistance returns max(sup_e |a0(e) - b0(e)|, sup_e |a1(e) - b1(e)|),
// the sup-norm distance between two networks' Betti-0 and Betti-1 curves on
// the same grid (docs/methods.md §5 and §10). It panics if the lengths differ.
func BettiSupDistance(a0, a1, b0, b1 []int) float64 {
	if len(a0) != len(b0) || len(a1) != len(b1) {
		panic("compute: BettiSupDistance: curve length mismatch")
	}
	d := 0
	for g := range a0 {
		d = max(d, absInt(a0[g]-b0[g]))
	}
	for g := range a1 {
		d = max(d, absInt(a1[g]-b1[g]))
	}
	return float64(d)
}

func absInt(x int) int {
	if x < 0 {
		return -x
	}
	return x
}

// MonteCarloP returns the one-sided Monte-Carlo p-value (1 + #{null_i >=
// observed}) / (1 + N) for N null values (Davison and Hinkley, Bootstrap
// Methods and their Application, 1997, eq. 4.11; North, Curtis and Sham,
// Am. J. Hum. Genet. 71, 2002), and the count #{null_i >= observed}. A NaN
// null value counts as reaching the observed one (conservative). It panics
// if null is empty.
func MonteCarloP(observed float64, null []float64) (p float64, exceed int) {
	if len(null) == 0 {
		panic("compute: MonteCarloP: no null values")
	}
	for _, v := range null {
		if !(v < observed) {
			exceed++
		}
	}
	return float64(1+exceed) / float64(1+len(null)), exceed
}

// ClusterQuality returns 1 - W(k)/W(1), the share of the fitting windows'
// total dispersion W(1) (the within-cluster sum of one cluster) that k
// clusters explain (the ratio of the elbow curve, docs/methods.md §3 and
// §10); 0 when W(1) is 0.
func ClusterQuality(wk, w1 float64) float64 {
	if w1 <= 0 {
		return 0
	}
	return 1 - wk/w1
}

// MeanPairwiseBettiDistance returns the mean of BettiSupDistance over the
// k(k-1)/2 pairs of networks whose Betti-0 and Betti-1 curves are b0[s]
// and b1[s] (docs/methods.md §10); 0 for fewer than two networks.
func MeanPairwiseBettiDistance(b0, b1 [][]int) float64 {
	k := len(b0)
	if k < 2 {
		return 0
	}
	sum := 0.0
	for a := 0; a < k; a++ {
		for b := a + 1; b < k; b++ {
			sum += BettiSupDistance(b0[a], b1[a], b0[b], b1[b])
		}
	}
	return sum / float64(k*(k-1)/2)
}

// CentreNetwork subtracts from every edge weight of a network (its upper
// triangle) the mean edge weight, in place, so that two networks that
// differ only by a uniform shift of all weights have the same Betti curves
// (docs/methods.md §10). It does nothing to an empty slice.
func CentreNetwork(upper []float64) {
	if len(upper) == 0 {
		return
	}
	mean := 0.0
	for _, v := range upper {
		mean += v
	}
	mean /= float64(len(upper))
	for q := range upper {
		upper[q] -= mean
	}
}
