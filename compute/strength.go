package compute

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
)

// StrengthOptions configures PredictionStrength (docs/methods.md §3.x). Zero
// fields take the defaults noted beside them.
type StrengthOptions struct {
	// Splits is the number of random halvings of the sample; each gives two
	// estimates (each half predicting the other). 0 means 5.
	Splits int
	// Sample caps the rows used: when x has more rows, a subsample of Sample
	// rows drawn without replacement stands for it (with Groups: each half
	// is capped at Sample/2 rows). 0 means 1000.
	Sample int
	// Groups, when not nil, holds one label per row of x (any integers):
	// rows with the same label always fall in the same half, so that rows
	// which are not independent of each other (overlapping windows of one
	// subject) cannot stand on both sides of a split. Nil halves by row.
	Groups []int
	// Threshold is the prediction strength a k must reach to be picked; 0
	// means DefaultStrengthThreshold.
	Threshold float64
	// Restarts and MaxIter configure the k-means fits of the halves; 0
	// means 5 restarts and 100 iterations.
	Restarts, MaxIter int
	Distance          Distance
	Workers           int         // as KMeansOptions.Workers; results do not depend on it
	Stop              func() bool // as KMeansOptions.Stop
	Done              func()      // called after each split
}

// DefaultStrengthThreshold is the prediction strength a number of clusters
// must reach: the middle of the range 0.8-0.9 Tibshirani and Walther (2005)
// recommend; 0.85 did best of 0.8, 0.85 and 0.9 in a one-off measurement
// when the rule was introduced (5 simulated cohorts per true k in
// {1, 2, 3, 5} at two noise levels, window 30: 17 of 20 right at noise 0.3).
const DefaultStrengthThreshold = 0.85

// StrengthPoint is the prediction strength at one k.
type StrengthPoint struct {
	K        int
	Strength float64 // mean over the 2 x Splits estimates
	SE       float64 // their standard deviation / sqrt(2 x Splits)
}

// Strength is the prediction strength over a range of k and its pick.
type Strength struct {
	Points    []StrengthPoint
	K         int     // StrengthPick of the points
	Rows      int     // rows of the (sub)sample; with groups, of both halves of the first split
	Groups    int     // distinct groups halved (0: halved by row)
	Splits    int     // random halvings
	Threshold float64 // the threshold of the pick
}

const strengthStream = 0x5e7 << 40 // seed stream of the subsample and the halvings

// PredictionStrength computes the prediction strength of Tibshirani and
// Walther (J. Comput. Graph. Statist. 14:511-528, 2005), docs/methods.md
// §3.x, for k = kmin..kmax. The rows of x (or a subsample of opt.Sample
// rows, drawn from rand.NewPCG(seed, strengthStream)) are split at random
// into two halves (split s from rand.NewPCG(seed, strengthStream+1+s)); both
// halves are clustered by k-means at every k. For the test half Y with its
// own clusters A_1..A_k and the centroids C of the training half,
//
//	ps(k) = min_j 1/(n_j (n_j - 1)) sum_{i != i' in A_j} D[C, Y]_{ii'}
//
// where D[C, Y]_{ii'} = 1 when C puts test rows i and i' in the same cluster
// (nearest centroid) and n_j = |A_j|; clusters with fewer than two rows are
// left out of the minimum. Each split gives two estimates (each half as the
// test half); Strength is their mean. ps(1) = 1.
//
// With opt.Groups the halving is by group instead (docs/methods.md §3.x):
// split s permutes the distinct labels with rand.NewPCG(seed,
// strengthStream+1+s) and gives each group in turn to the half with fewer
// rows so far; a half with more than opt.Sample/2 rows is then subsampled
// to that many from the same generator. The method assumes independent
// observations (Tibshirani and Walther, 2005, section 2); overlapping
// windows of one series are not, and when they fall on both sides of a
// halving any partition of them "reproduces".
//
// The pick is StrengthPick with opt.Threshold. Errors: kmin < 1, kmax <
// kmin, kmax larger than a half, fewer than 2 groups or a label per row
// missing, any error of KMeans, ErrStopped.
func PredictionStrength(x Matrix32, kmin, kmax int, opt StrengthOptions, seed uint64) (Strength, error) {
	checkMatrix("x", x)
	if kmin < 1 || kmax < kmin {
		return Strength{}, fmt.Errorf("compute: prediction strength needs 1 <= kmin <= kmax, got %d..%d", kmin, kmax)
	}
	splits, m, th := opt.Splits, opt.Sample, opt.Threshold
	if splits == 0 {
		splits = 5
	}
	if m == 0 {
		m = 1000
	}
	if th == 0 {
		th = DefaultStrengthThreshold
	}
	if splits < 1 || m < 2 || !(th > 0 && th <= 1) || opt.Restarts < 0 || opt.MaxIter < 0 {
		return Strength{}, fmt.Errorf("compute: prediction strength options out of range (splits %d, sample %d, threshold %v, restarts %d, max iterations %d)", splits, m, th, opt.Restarts, opt.MaxIter)
	}
	var halve func(s int) (Matrix32, Matrix32, error)
	rows, groups := 0, 0
	if opt.Groups != nil {
		if len(opt.Groups) != x.Rows {
			return Strength{}, fmt.Errorf("compute: prediction strength has %d group labels for %d rows", len(opt.Groups), x.Rows)
		}
		members := map[int][]int{}
		for i, g := range opt.Groups {
			members[g] = append(members[g], i)
		}
		labels := make([]int, 0, len(members))
		for g := range members {
			labels = append(labels, g)
		}
		slices.Sort(labels)
		if len(labels) < 2 {
			return Strength{}, fmt.Errorf("compute: prediction strength by group needs at least 2 groups to halve, have %d", len(labels))
		}
		groups = len(labels)
		halve = func(s int) (Matrix32, Matrix32, error) {
			r := rand.New(rand.NewPCG(seed, strengthStream+1+uint64(s)))
			var a, b []int
			for _, g := range r.Perm(len(labels)) {
				// Greedy: each group, in random order, joins the half
				// with fewer rows, so the halves are as even as the
				// group sizes allow.
				if len(a) <= len(b) {
					a = append(a, members[labels[g]]...)
				} else {
					b = append(b, members[labels[g]]...)
				}
			}
			a, b = capRows(r, a, m/2), capRows(r, b, m/2)
			if min(len(a), len(b)) < kmax {
				return Matrix32{}, Matrix32{}, fmt.Errorf("compute: prediction strength at k = %d needs at least that many rows in each half, a halving by group has %d and %d", kmax, len(a), len(b))
			}
			return subRows(x, a), subRows(x, b), nil
		}
	} else {
		sub := x
		if x.Rows > m {
			r := rand.New(rand.NewPCG(seed, strengthStream))
			idx := r.Perm(x.Rows)[:m]
			slices.Sort(idx)
			sub = subRows(x, idx)
		}
		half := sub.Rows / 2
		if kmax > half {
			return Strength{}, fmt.Errorf("compute: prediction strength at k = %d needs at least that many rows in each half, have %d", kmax, half)
		}
		rows = sub.Rows
		halve = func(s int) (Matrix32, Matrix32, error) {
			perm := rand.New(rand.NewPCG(seed, strengthStream+1+uint64(s))).Perm(sub.Rows)
			a, b := perm[:half], perm[half:]
			slices.Sort(a)
			slices.Sort(b)
			return subRows(sub, a), subRows(sub, b), nil
		}
	}
	km := KMeansOptions{Restarts: 5, MaxIter: opt.MaxIter, Distance: opt.Distance, Workers: opt.Workers, Stop: opt.Stop}
	if opt.Restarts > 0 {
		km.Restarts = opt.Restarts
	}
	est := make([][]float64, kmax-kmin+1) // [k][estimate]
	for s := 0; s < splits; s++ {
		if opt.Stop != nil && opt.Stop() {
			return Strength{}, ErrStopped
		}
		xa, xb, err := halve(s)
		if err != nil {
			return Strength{}, err
		}
		if s == 0 && groups > 0 {
			rows = xa.Rows + xb.Rows
		}
		_, fa, err := ElbowScan(xa, kmin, kmax, km, seed+2*uint64(s)+1)
		if err != nil {
			return Strength{}, fmt.Errorf("compute: prediction strength, split %d: %w", s+1, err)
		}
		_, fb, err := ElbowScan(xb, kmin, kmax, km, seed+2*uint64(s)+2)
		if err != nil {
			return Strength{}, fmt.Errorf("compute: prediction strength, split %d: %w", s+1, err)
		}
		for i := range est {
			k := kmin + i
			predB, _ := Assign(xb, fa[i].Centroids, opt.Distance, opt.Workers)
			predA, _ := Assign(xa, fb[i].Centroids, opt.Distance, opt.Workers)
			est[i] = append(est[i], StrengthOf(fb[i].Labels, predB, k), StrengthOf(fa[i].Labels, predA, k))
		}
		if opt.Done != nil {
			opt.Done()
		}
	}
	out := Strength{Rows: rows, Groups: groups, Splits: splits, Threshold: th}
	for i, e := range est {
		mu, sd := meanSD(e)
		out.Points = append(out.Points, StrengthPoint{K: kmin + i, Strength: mu, SE: sd / math.Sqrt(float64(len(e)))})
	}
	ks, ps := make([]int, len(out.Points)), make([]float64, len(out.Points))
	for i, p := range out.Points {
		ks[i], ps[i] = p.K, p.Strength
	}
	out.K = StrengthPick(ks, ps, th)
	return out, nil
}

// StrengthOf is the prediction strength of one test half: own are the
// test rows' labels from their own clustering (0..k-1), pred their labels
// from the training half's centroids (any non-negative integers). It is
// the minimum over own clusters with at least two rows of the share of
// their pairs that pred also puts together (Tibshirani and Walther, 2005,
// eq. 2.1); 1 when no cluster has two rows. It panics if the lengths
// differ.
func StrengthOf(own, pred []int, k int) float64 {
	if len(own) != len(pred) {
		panic("compute: slice length mismatch")
	}
	counts := make([]map[int]int, k)
	sizes := make([]int, k)
	for i, c := range own {
		if counts[c] == nil {
			counts[c] = map[int]int{}
		}
		counts[c][pred[i]]++
		sizes[c]++
	}
	ps := 1.0
	for c, n := range sizes {
		if n < 2 {
			continue
		}
		same := 0
		for _, v := range counts[c] {
			same += v * (v - 1)
		}
		ps = math.Min(ps, float64(same)/float64(n*(n-1)))
	}
	return ps
}

// StrengthPick returns the largest k_i whose prediction strength reaches
// threshold (Tibshirani and Walther, 2005, section 3), or ks[0] when none
// does (k = 1 has strength 1, so a scan from 1 always has an answer). NaN
// never qualifies. It returns 0 for empty input and panics if the lengths
// differ.
func StrengthPick(ks []int, ps []float64, threshold float64) int {
	if len(ks) != len(ps) {
		panic("compute: slice length mismatch")
	}
	if len(ks) == 0 {
		return 0
	}
	best := ks[0]
	for i, k := range ks {
		if ps[i] >= threshold && k > best {
			best = k
		}
	}
	return best
}

// capRows returns idx when it has at most m entries, else m of them drawn
// uniformly without replacement from r, in increasing order.
func capRows(r *rand.Rand, idx []int, m int) []int {
	if len(idx) <= m {
		slices.Sort(idx)
		return idx
	}
	out := make([]int, m)
	for i, p := range r.Perm(len(idx))[:m] {
		out[i] = idx[p]
	}
	slices.Sort(out)
	return out
}

// subRows returns a new matrix holding the rows idx of x, in that order.
func subRows(x Matrix32, idx []int) Matrix32 {
	out := NewMatrix32(len(idx), x.Cols)
	for i, j := range idx {
		copy(out.Row(i), x.Row(j))
	}
	return out
}
