package compute

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"

	"gonum.org/v1/gonum/mat"
)

// GapOptions configures GapStatistic (docs/methods.md §3.x). Zero fields
// take the defaults noted beside them.
type GapOptions struct {
	// References is B, the number of reference sets; 0 means 10.
	References int
	// Sample caps the rows used: when x has more rows, a subsample of
	// Sample rows drawn without replacement stands for it (both the data's
	// W(k) and the reference sets have that many rows); 0 means 400.
	Sample int
	// Restarts and MaxIter configure the k-means fits of the data and of
	// every reference set (the same for both, so the comparison is fair);
	// 0 means 2 restarts and 100 iterations.
	Restarts, MaxIter int
	Distance          Distance
	Workers           int         // as KMeansOptions.Workers; results do not depend on it
	Stop              func() bool // as KMeansOptions.Stop
	Done              func()      // called after each reference set (and once for the data)
}

// GapPoint is the gap statistic at one k.
type GapPoint struct {
	K       int
	LogW    float64 // log W(k) of the (sub)sampled data
	RefLogW float64 // mean over the reference sets of log W*_b(k)
	Gap     float64 // RefLogW - LogW
	SE      float64 // s(k) = sd_k sqrt(1 + 1/B)
}

// Gap is the gap statistic over a range of k and its pick.
type Gap struct {
	Points     []GapPoint
	K          int // GapPick of the points
	Rows       int // rows of the (sub)sample the statistic was computed on
	Components int // principal components spanning the reference box
	References int // B
}

const gapStream = 0x9a9 << 40 // seed stream of the subsample and reference draws

// GapStatistic computes the gap statistic of Tibshirani, Walther and Hastie
// (J. R. Statist. Soc. B 63:411-423, 2001), docs/methods.md §3.x, for
// k = kmin..kmax:
//
//	Gap(k) = (1/B) sum_b log W*_b(k) - log W(k)
//	sd_k   = sqrt((1/B) sum_b (log W*_b(k) - mean_b log W*_b(k))^2)
//	s(k)   = sd_k sqrt(1 + 1/B)
//
// W(k) is the k-means objective (the best of opt.Restarts) of the rows of x,
// or of a subsample of opt.Sample rows when x has more (drawn from
// rand.NewPCG(seed, gapStream)). The reference sets are the paper's second
// reference: the sample is centred and rotated onto its principal
// components (X_c = U S V^T; scores Z = X_c V = U S, computed as the
// eigen-decomposition of the Gram matrix X_c X_c^T by gonum), and each
// reference set draws every score uniformly in the range of the data's
// scores on that component, independently (reference b from
// rand.NewPCG(seed, gapStream+1+b)). For the squared Euclidean distance W is
// invariant under the rotation, so the data and the references are both
// clustered in score coordinates (at most rows-1 components); for the L1
// distance, which is not, the references are rotated back, Z* V^T + mean,
// and clustered in the original coordinates.
//
// The pick is GapPick. Errors: kmin < 1, kmax < kmin, kmax > rows of the
// sample, any error of KMeans (non-finite values among them), ErrStopped.
func GapStatistic(x Matrix32, kmin, kmax int, opt GapOptions, seed uint64) (Gap, error) {
	checkMatrix("x", x)
	if kmin < 1 || kmax < kmin {
		return Gap{}, fmt.Errorf("compute: gap statistic needs 1 <= kmin <= kmax, got %d..%d", kmin, kmax)
	}
	b, m := opt.References, opt.Sample
	if b == 0 {
		b = 10
	}
	if m == 0 {
		m = 400
	}
	if b < 1 || m < 2 || opt.Restarts < 0 || opt.MaxIter < 0 {
		return Gap{}, fmt.Errorf("compute: gap statistic options must be positive (references %d, sample %d, restarts %d, max iterations %d)", b, m, opt.Restarts, opt.MaxIter)
	}
	sub := x
	if x.Rows > m {
		r := rand.New(rand.NewPCG(seed, gapStream))
		idx := r.Perm(x.Rows)[:m]
		slices.Sort(idx)
		sub = NewMatrix32(m, x.Cols)
		for i, j := range idx {
			copy(sub.Row(i), x.Row(j))
		}
	}
	if kmax > sub.Rows {
		return Gap{}, fmt.Errorf("compute: gap statistic at k = %d needs at least that many rows, have %d", kmax, sub.Rows)
	}
	km := KMeansOptions{Restarts: max(opt.Restarts, 2), MaxIter: opt.MaxIter, Distance: opt.Distance, Workers: opt.Workers, Stop: opt.Stop}
	if opt.Restarts > 0 {
		km.Restarts = opt.Restarts
	}
	// The data's W(k), in the original coordinates (it checks the values
	// are finite before the Gram matrix is formed).
	data, _, err := ElbowScan(sub, kmin, kmax, km, seed)
	if err != nil {
		return Gap{}, fmt.Errorf("compute: gap statistic, data: %w", err)
	}
	if opt.Done != nil {
		opt.Done()
	}
	scores, mean, basis, err := principalScores(sub, opt.Distance == Manhattan)
	if err != nil {
		return Gap{}, err
	}
	n, r := scores.Dims()
	lo, hi := make([]float64, r), make([]float64, r)
	for j := 0; j < r; j++ {
		lo[j], hi[j] = math.Inf(1), math.Inf(-1)
		for i := 0; i < n; i++ {
			v := scores.At(i, j)
			lo[j], hi[j] = math.Min(lo[j], v), math.Max(hi[j], v)
		}
	}
	refLog := make([][]float64, kmax-kmin+1) // [k][b]
	for i := range refLog {
		refLog[i] = make([]float64, b)
	}
	for ref := 0; ref < b; ref++ {
		if opt.Stop != nil && opt.Stop() {
			return Gap{}, ErrStopped
		}
		rng := rand.New(rand.NewPCG(seed, gapStream+1+uint64(ref)))
		var z Matrix32
		if opt.Distance == Manhattan {
			z = NewMatrix32(n, sub.Cols)
			u := make([]float64, r)
			for i := 0; i < n; i++ {
				for j := range u {
					u[j] = lo[j] + rng.Float64()*(hi[j]-lo[j])
				}
				row := z.Row(i)
				for c := range row {
					s := mean[c]
					for j, uj := range u {
						s += uj * basis.At(c, j)
					}
					row[c] = float32(s)
				}
			}
		} else {
			z = NewMatrix32(n, max(r, 1))
			for i := 0; i < n; i++ {
				for j := 0; j < r; j++ {
					z.Data[i*z.Cols+j] = float32(lo[j] + rng.Float64()*(hi[j]-lo[j]))
				}
			}
		}
		e, _, err := ElbowScan(z, kmin, kmax, km, seed+1+uint64(ref))
		if err != nil {
			return Gap{}, fmt.Errorf("compute: gap statistic, reference set %d: %w", ref+1, err)
		}
		for i, p := range e.Points {
			refLog[i][ref] = safeLog(p.WCSS)
		}
		if opt.Done != nil {
			opt.Done()
		}
	}
	g := Gap{Rows: n, Components: r, References: b}
	for i, p := range data.Points {
		mu, sd := meanSD(refLog[i])
		lw := safeLog(p.WCSS)
		g.Points = append(g.Points, GapPoint{K: p.K, LogW: lw, RefLogW: mu, Gap: mu - lw,
			SE: sd * math.Sqrt(1+1/float64(b))})
	}
	ks, gaps, ses := make([]int, len(g.Points)), make([]float64, len(g.Points)), make([]float64, len(g.Points))
	for i, p := range g.Points {
		ks[i], gaps[i], ses[i] = p.K, p.Gap, p.SE
	}
	g.K = GapPick(ks, gaps, ses)
	return g, nil
}

// safeLog is log(w) with W = 0 (every row on its centre) read as the
// smallest positive float64, so a perfect fit has a large finite gap.
func safeLog(w float64) float64 {
	return math.Log(math.Max(w, math.SmallestNonzeroFloat64))
}

// meanSD returns the mean and the population standard deviation (divisor
// n, as sd_k of the gap statistic's definition).
func meanSD(v []float64) (float64, float64) {
	mu := 0.0
	for _, x := range v {
		mu += x
	}
	mu /= float64(len(v))
	ss := 0.0
	for _, x := range v {
		ss += (x - mu) * (x - mu)
	}
	return mu, math.Sqrt(ss / float64(len(v)))
}

// GapPick returns the smallest k_i (i < n-1) with
// Gap(k_i) >= Gap(k_{i+1}) - s(k_{i+1}) (Tibshirani, Walther and Hastie,
// 2001, step 3), or the last k when no k_i qualifies. ks must be strictly
// increasing; NaN gaps never qualify. It returns 0 for empty input and
// panics if the lengths differ.
func GapPick(ks []int, gap, se []float64) int {
	if len(ks) != len(gap) || len(ks) != len(se) {
		panic("compute: slice length mismatch")
	}
	if len(ks) == 0 {
		return 0
	}
	for i := 0; i+1 < len(ks); i++ {
		if gap[i] >= gap[i+1]-se[i+1] {
			return ks[i]
		}
	}
	return ks[len(ks)-1]
}

// principalScores centres the rows of x and returns their principal
// component scores Z = U S (rows x r, r the number of components with a
// positive singular value, r <= rows-1), the column means, and, when
// wantBasis, the D x r right singular vectors V = X_c^T U S^{-1}.
//
// It forms the Gram matrix G = X_c X_c^T (float64 sums of float32
// products) and decomposes it with gonum's EigenSym: G = U diag(lambda) U^T,
// S = sqrt(lambda). Components with lambda <= 1e-10 lambda_max are dropped
// (rank deficiency). Cost O(rows^2 D) for G and O(rows^3) for the
// decomposition, instead of O(rows^2 D) with a larger constant for the SVD
// of the wide matrix.
func principalScores(x Matrix32, wantBasis bool) (*mat.Dense, []float64, *mat.Dense, error) {
	n, d := x.Rows, x.Cols
	mean := make([]float64, d)
	for i := 0; i < n; i++ {
		for j, v := range x.Row(i) {
			mean[j] += float64(v)
		}
	}
	for j := range mean {
		mean[j] /= float64(n)
	}
	xc := NewMatrix32(n, d)
	for i := 0; i < n; i++ {
		row := xc.Row(i)
		for j, v := range x.Row(i) {
			row[j] = float32(float64(v) - mean[j])
		}
	}
	g := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			g.SetSym(i, j, dot32(xc.Row(i), xc.Row(j)))
		}
	}
	var eig mat.EigenSym
	if !eig.Factorize(g, true) {
		return nil, nil, nil, errors.New("compute: gap statistic: the eigen-decomposition of the Gram matrix did not converge")
	}
	vals := eig.Values(nil) // ascending
	var vecs mat.Dense
	eig.VectorsTo(&vecs)
	top := vals[n-1]
	var keep []int
	for c := n - 1; c >= 0; c-- {
		if top > 0 && vals[c] > 1e-10*top {
			keep = append(keep, c)
		}
	}
	r := len(keep)
	scores := mat.NewDense(n, max(r, 1), nil)
	for j, c := range keep {
		s := math.Sqrt(vals[c])
		for i := 0; i < n; i++ {
			scores.Set(i, j, vecs.At(i, c)*s)
		}
	}
	if r == 0 {
		scores = mat.NewDense(n, 1, nil)
	}
	var basis *mat.Dense
	if wantBasis {
		basis = mat.NewDense(d, max(r, 1), nil)
		for j, c := range keep {
			s := math.Sqrt(vals[c])
			for col := 0; col < d; col++ {
				acc := 0.0
				for i := 0; i < n; i++ {
					acc += float64(xc.Data[i*d+col]) * vecs.At(i, c)
				}
				basis.Set(col, j, acc/s)
			}
		}
	}
	return scores, mean, basis, nil
}
