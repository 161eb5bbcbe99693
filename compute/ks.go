package compute

import (
	"fmt"
	"math"
	"runtime"
	"slices"
)

// KSStatistic returns the two-sample Kolmogorov-Smirnov statistic
// (docs/methods.md §6)
//
//	D = max_e |F_A(e)/m - F_B(e)/n|,  F_A(e) = #{x in a : x <= e},
//
// with m = len(a), n = len(b), the maximum taken over the pooled values.
// Tied values are handled by evaluating the empirical distribution functions
// only after every value equal to e, in both samples, has been counted.
// Infinite values are allowed (they order as usual). The inputs are not
// modified. It returns an error when a sample is empty or holds a NaN.
func KSStatistic(a, b []float64) (float64, error) {
	g, err := ksGap(a, b)
	if err != nil {
		return 0, err
	}
	return float64(g) / (float64(len(a)) * float64(len(b))), nil
}

// ksGap returns m*n*D as an exact integer: max |F_A(e)*n - F_B(e)*m|.
func ksGap(a, b []float64) (int64, error) {
	if len(a) == 0 || len(b) == 0 {
		return 0, fmt.Errorf("compute: KS statistic needs two non-empty samples, got sizes %d and %d", len(a), len(b))
	}
	for _, s := range [2][]float64{a, b} {
		for i, x := range s {
			if math.IsNaN(x) {
				return 0, fmt.Errorf("compute: KS statistic: value %d is NaN", i)
			}
		}
	}
	sa, sb := slices.Clone(a), slices.Clone(b)
	if len(sa) > 1<<16 && len(sb) > 1<<16 && runtime.GOMAXPROCS(0) > 1 {
		// Pooled events of a cohort-scale warehouse: millions of values
		// per sample; the two sorts are independent.
		done := make(chan struct{})
		go func() {
			slices.Sort(sb)
			close(done)
		}()
		slices.Sort(sa)
		<-done
	} else {
		slices.Sort(sa)
		slices.Sort(sb)
	}
	m, n := int64(len(sa)), int64(len(sb))
	var i, j int
	var best int64
	for i < len(sa) || j < len(sb) {
		var e float64
		switch {
		case i == len(sa):
			e = sb[j]
		case j == len(sb):
			e = sa[i]
		default:
			e = min(sa[i], sb[j])
		}
		for i < len(sa) && sa[i] == e {
			i++
		}
		for j < len(sb) && sb[j] == e {
			j++
		}
		gap := int64(i)*n - int64(j)*m
		if gap < 0 {
			gap = -gap
		}
		best = max(best, gap)
	}
	return best, nil
}

// KSPValueExact returns the exact null probability P(D >= d) of the
// two-sample Kolmogorov-Smirnov statistic for sample sizes m and n,
// assuming continuous data (no ties), by the lattice-path count of docs/methods.md
// §6: every ordering of the pooled values is a monotone path from
// (0,0) to (m,n), all C(m+n, m) equally likely, and D >= d exactly when the
// path visits a cell with |u/m - v/n| >= d.
//
// Every attainable D is a multiple of 1/L, L = lcm(m, n), so d is first
// put on that grid and all later comparisons are in integers,
// |u*(L/m) - v*(L/n)| >= k. The snapping rule (docs/methods.md §6): a d
// within float rounding of a multiple of 1/L, |d*L - round(d*L)| <=
// ksSnapULPs * eps * L (eps = 2^-52; a few ulps relative to the top of the
// grid, D = 1, which bounds the rounding of a D computed as g/(mn) or as a
// difference of two empirical distribution values in [0, 1]), is snapped to
// it, k = round(d*L), so a statistic computed in floating point is never
// moved across the threshold; any other d gives k = ceil(d*L), which is
// what P(D >= d) means when D lives on the grid (d = 0.50000005 with
// m = n = 10 is P(D >= 0.6)). d = 0 gives 1; a d above 1 by no more than
// the same rounding is D = 1.
//
// Overflow-free scheme: instead of counts, the recursion carries
// C(u,v) = probability that a uniformly random path from (0,0) to (u,v)
// has visited a cell outside the band |u/m - v/n| < d. Outside the band
// C = 1; inside, C(0,0) = 0 and
//
//	C(u,v) = u/(u+v) C(u-1,v) + v/(u+v) C(u,v-1)
//
// (the weights are C(u+v-1,u-1)/C(u+v,u) and C(u+v-1,u)/C(u+v,u)), and
// P(D >= d) = C(m,n). Every value is a convex combination of numbers in
// [0,1], so nothing overflows, and because the tail probability is summed
// directly rather than as 1 - (probability of staying inside), small
// p-values keep their relative precision down to the float64 underflow
// limit (values below about 1e-308 lose precision and may be returned as 0).
// The lattice is swept by anti-diagonals u+v = s, which share the divisor s
// and carry no dependency within a diagonal; only the cells inside the band
// are visited. Time is O(cells in the band) <= O((m+1)(n+1)), memory
// O(min(m, n)).
//
// It returns an error when m < 1, n < 1, or d is NaN or outside [0, 1].
func KSPValueExact(m, n int, d float64) (float64, error) {
	if m < 1 || n < 1 {
		return 0, fmt.Errorf("compute: exact KS p-value needs sample sizes >= 1, got m=%d n=%d", m, n)
	}
	if math.IsNaN(d) || d < 0 || d > 1+ksSnapULPs*epsilon {
		return 0, fmt.Errorf("compute: KS statistic d=%v is outside [0, 1]", d)
	}
	l := lcm(int64(m), int64(n))
	return ksTailExact(int64(m), int64(n), snapToGrid(min(d, 1)*float64(l), float64(l))), nil
}

// ksSnapULPs is the snapping tolerance of KSPValueExact in ulps of 1.
const ksSnapULPs = 8

// epsilon is the float64 machine epsilon, 2^-52.
const epsilon = 0x1p-52

// snapToGrid returns the integer threshold k for x = d*L on a grid of top
// L: round(x) when x is within ksSnapULPs ulps (relative to L) of an
// integer, else ceil(x).
func snapToGrid(x, l float64) int64 {
	r := math.Round(x)
	if math.Abs(x-r) <= ksSnapULPs*epsilon*l {
		return int64(r)
	}
	return int64(math.Ceil(x))
}

// ksTailExact returns P(max |u*(L/m) - v*(L/n)| >= k) over uniformly random
// lattice paths, with L = lcm(m, n) and k an integer on the L scale.
func ksTailExact(m, n, k int64) float64 {
	if k <= 0 {
		return 1
	}
	// Let u run over the smaller sample: D is symmetric in the two samples.
	if m > n {
		m, n = n, m
	}
	l := lcm(m, n)
	a, b := l/m, l/n // |u/m - v/n| = |u*a - v*b| / l
	// On diagonal s (v = s-u) the band |u*a - (s-u)*b| < k is
	// (s*b - k) < u*(a+b) < (s*b + k).
	ab := a + b
	// c[u+1] holds C(u, s-u) on the current diagonal; c[0] is a sentinel
	// for u = -1 (its weight is always 0). Cells outside the band hold 1.
	c := make([]float64, m+2)
	for i := range c {
		c[i] = 1
	}
	c[1] = 0 // C(0,0): the empty path is inside the band since k > 0.
	lo := int64(0)
	for s := int64(1); s <= m+n; s++ {
		nlo := max(floorDiv(s*b-k, ab)+1, s-n, 0)
		nhi := min(ceilDiv(s*b+k, ab)-1, s, m)
		if nlo > nhi {
			// Every path crosses this diagonal outside the band.
			return 1
		}
		inv := 1 / float64(s)
		// Descending u so that c[u] (cell (u-1, s-u)) is still the
		// previous diagonal's value when cell (u, s-u) reads it.
		fs := float64(s)
		for u := nhi; u >= nlo; u-- {
			fu := float64(u)
			c[u+1] = (fu*c[u] + (fs-fu)*c[u+1]) * inv
		}
		// Cells that have left the band on the low side read as 1 from now
		// on. The band's ends never decrease, so nothing above nhi was ever
		// written.
		for u := lo; u < nlo; u++ {
			c[u+1] = 1
		}
		lo = nlo
	}
	return c[m+1]
}

// ksBandCells returns the number of lattice cells ksTailExact visits.
func ksBandCells(m, n, k int64) int64 {
	if k <= 0 {
		return 0
	}
	if m > n {
		m, n = n, m
	}
	l := lcm(m, n)
	a, b := l/m, l/n
	ab := a + b
	var cells int64
	for s := int64(1); s <= m+n; s++ {
		lo := max(floorDiv(s*b-k, ab)+1, s-n, 0)
		hi := min(ceilDiv(s*b+k, ab)-1, s, m)
		if lo > hi {
			return cells
		}
		cells += hi - lo + 1
	}
	return cells
}

func gcd(a, b int64) int64 {
	for b != 0 {
		a, b = b, a%b
	}
	return a
}

func lcm(a, b int64) int64 { return a / gcd(a, b) * b }

// floorDiv returns floor(x/y) for y > 0.
func floorDiv(x, y int64) int64 {
	q := x / y
	if x%y != 0 && x < 0 {
		q--
	}
	return q
}

// ceilDiv returns ceil(x/y) for y > 0.
func ceilDiv(x, y int64) int64 { return -floorDiv(-x, y) }

// KolmogorovQ returns the Kolmogorov distribution's upper tail
// (Kolmogorov 1933; Smirnov 1948)
//
//	Q(lambda) = 2 sum_{j>=1} (-1)^(j-1) exp(-2 j^2 lambda^2),
//
// the large-sample limit of P(sqrt(mn/(m+n)) D >= lambda). For lambda <= 0
// (and for NaN, which is not a valid argument) it returns 1, the limit as
// lambda decreases to 0. For lambda < 1 the alternating series converges
// slowly, so the equivalent Jacobi-theta form
// 1 - Q = sqrt(2 pi)/lambda sum_{j>=1} exp(-(2j-1)^2 pi^2 / (8 lambda^2))
// is summed instead; both are summed until the terms fall below 1e-17
// relative to the sum.
func KolmogorovQ(lambda float64) float64 {
	if !(lambda > 0) {
		return 1
	}
	if lambda < 1 {
		var sum float64
		c := math.Pi * math.Pi / (8 * lambda * lambda)
		for j := 1; j < 100; j++ {
			odd := float64(2*j - 1)
			t := math.Exp(-odd * odd * c)
			sum += t
			if t <= 1e-17*sum {
				break
			}
		}
		return min(1, max(0, 1-math.Sqrt(2*math.Pi)/lambda*sum))
	}
	var sum float64
	sign := 1.0
	for j := 1; j < 100; j++ {
		fj := float64(j)
		t := math.Exp(-2 * fj * fj * lambda * lambda)
		sum += sign * t
		if t <= 1e-17*math.Abs(sum) {
			break
		}
		sign = -sign
	}
	return min(1, max(0, 2*sum))
}

// KSPValueAsymptotic returns the large-sample p-value of a two-sample KS
// statistic d: Q(d sqrt(mn/(m+n))) with Q = KolmogorovQ. It returns an
// error when m < 1, n < 1, or d is NaN or outside [0, 1].
func KSPValueAsymptotic(m, n int, d float64) (float64, error) {
	if m < 1 || n < 1 {
		return 0, fmt.Errorf("compute: KS p-value needs sample sizes >= 1, got m=%d n=%d", m, n)
	}
	if math.IsNaN(d) || d < 0 || d > 1 {
		return 0, fmt.Errorf("compute: KS statistic d=%v is outside [0, 1]", d)
	}
	fm, fn := float64(m), float64(n)
	return KolmogorovQ(d * math.Sqrt(fm*fn/(fm+fn))), nil
}

// KSResult is the outcome of a two-sample Kolmogorov-Smirnov test.
type KSResult struct {
	Statistic, PValue float64
	Method            string // "exact" or "asymptotic"
	M, N              int    // the two sample sizes
}

// KSExactMaxCells is the largest number of lattice cells (inside the band
// |u/m - v/n| < D) for which KSTest computes the exact p-value; beyond it
// KSTest uses the asymptotic one. 1e8 cells take roughly a tenth of a
// second. It always admits m = n = 4,851 (at most 4,852^2 = 2.4e7 cells),
// the Betti-1 event count of a 100-region network; for 200 regions (19,701
// events) the width of the band at the observed D decides.
const KSExactMaxCells = 100_000_000

// KSTest computes the two-sample KS statistic D of a and b and its
// p-value P(D >= D_obs). The p-value is exact (KSPValueExact, computed
// directly on the integer lattice scale, with no rounding of D) when the
// band of the exact recursion holds at most KSExactMaxCells lattice cells,
// otherwise asymptotic (KSPValueAsymptotic). The exact p-value assumes no
// ties; with tied values it is conservative. Errors as for KSStatistic.
func KSTest(a, b []float64) (KSResult, error) {
	g, err := ksGap(a, b)
	if err != nil {
		return KSResult{}, err
	}
	m, n := int64(len(a)), int64(len(b))
	res := KSResult{Statistic: float64(g) / (float64(m) * float64(n)), M: len(a), N: len(b)}
	k := g / gcd(m, n) // D on the lcm scale: g/(mn) = k/L
	if ksBandCells(m, n, k) <= KSExactMaxCells {
		res.PValue, res.Method = ksTailExact(m, n, k), "exact"
		return res, nil
	}
	res.PValue, err = KSPValueAsymptotic(len(a), len(b), res.Statistic)
	res.Method = "asymptotic"
	return res, err
}
