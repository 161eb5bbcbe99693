package compute

import (
	"fmt"
	"math"
	"math/big"
	"math/rand/v2"
	"strings"
	"testing"
)

// gnedenkoKorolyuk returns P(D >= k/q) for two samples of size q by the
// closed form of Gnedenko and Korolyuk (1951), quoted in docs/methods.md §6:
//
//	P(D >= k/q) = 2 sum_{j>=1} (-1)^(j+1) C(2q, q-jk) / C(2q, q),
//
// evaluated in exact integer arithmetic (math/big), then rounded once to
// float64. It shares no code with the lattice recursion under test.
func gnedenkoKorolyuk(q, k int) float64 {
	if k <= 0 {
		return 1
	}
	num := new(big.Int)
	for j := 1; q-j*k >= 0; j++ {
		c := new(big.Int).Binomial(int64(2*q), int64(q-j*k))
		if j%2 == 1 {
			num.Add(num, c)
		} else {
			num.Sub(num, c)
		}
	}
	num.Lsh(num, 1)
	den := new(big.Int).Binomial(int64(2*q), int64(q))
	f, _ := new(big.Rat).SetFrac(num, den).Float64()
	return f
}

func relClose(got, want, tol float64) bool {
	if got == want {
		return true
	}
	return math.Abs(got-want) <= tol*math.Abs(want)
}

// KSPValueExact against the Gnedenko-Korolyuk (1951) closed form for equal
// sample sizes m = n = q (docs/methods.md §6), computed exactly with
// math/big in the test.
func TestKSPValueExactGnedenkoKorolyuk(t *testing.T) {
	type tc struct{ q, k int }
	var cases []tc
	for q := 1; q <= 40; q++ { // every k for small q
		for k := 0; k <= q; k++ {
			cases = append(cases, tc{q, k})
		}
	}
	for _, k := range []int{1, 2, 10, 30, 50, 60, 70, 80, 120, 200, 1000} {
		cases = append(cases, tc{1000, k})
	}
	for _, k := range []int{5, 40, 70, 90, 150, 400} {
		cases = append(cases, tc{1500, k})
	}
	// q = 4,851: the Betti-1 event count of a 100-region network.
	for _, k := range []int{60, 134, 250} {
		cases = append(cases, tc{4851, k})
	}
	for _, c := range cases {
		t.Run(fmt.Sprintf("q=%d/k=%d", c.q, c.k), func(t *testing.T) {
			want := gnedenkoKorolyuk(c.q, c.k)
			got, err := KSPValueExact(c.q, c.q, float64(c.k)/float64(c.q))
			if err != nil {
				t.Fatal(err)
			}
			// Relative 1e-9 while p is a normal float64; the recursion sums
			// positive terms, so relative precision holds for small p too.
			if want > 1e-290 && !relClose(got, want, 1e-9) {
				t.Errorf("P(D >= %d/%d) = %.17g, Gnedenko-Korolyuk closed form gives %.17g (rel err %.3g)",
					c.k, c.q, got, want, math.Abs(got-want)/want)
			}
			if want <= 1e-290 && got > 1e-280 {
				t.Errorf("P(D >= %d/%d) = %g, closed form gives %g", c.k, c.q, got, want)
			}
		})
	}
}

// enumerateKS walks every one of the C(m+n, m) orderings of two samples of
// sizes m and n (a direct enumeration of the definition of D, independent
// of the lattice recursion) and returns, for each threshold kk = 0..L on
// the L = lcm(m, n) scale, how many orderings have L*D >= kk, and the total.
func enumerateKS(m, n int) (atLeast []int64, total int64) {
	l := int(lcm(int64(m), int64(n)))
	atLeast = make([]int64, l+2)
	var walk func(u, v, gap int)
	walk = func(u, v, gap int) {
		if u == m && v == n {
			total++
			for kk := 0; kk <= gap; kk++ {
				atLeast[kk]++
			}
			return
		}
		if u < m {
			d := (u+1)*(l/m) - v*(l/n)
			walk(u+1, v, max(gap, abs(d)))
		}
		if v < n {
			d := u*(l/m) - (v+1)*(l/n)
			walk(u, v+1, max(gap, abs(d)))
		}
	}
	walk(0, 0, 0)
	return atLeast, total
}

func abs(x int) int {
	if x < 0 {
		return -x
	}
	return x
}

// KSPValueExact for unequal (and some equal) sizes against the direct
// enumeration of all C(m+n, m) orderings, at every multiple of 1/lcm(m,n).
func TestKSPValueExactEnumeration(t *testing.T) {
	for _, sz := range [][2]int{{1, 1}, {1, 4}, {2, 2}, {3, 5}, {4, 6}, {5, 7}, {6, 6}, {4, 10}, {6, 8}, {7, 9}, {9, 4}} {
		m, n := sz[0], sz[1]
		t.Run(fmt.Sprintf("m=%d/n=%d", m, n), func(t *testing.T) {
			atLeast, total := enumerateKS(m, n)
			l := int(lcm(int64(m), int64(n)))
			for kk := 0; kk <= l; kk++ {
				want := float64(atLeast[kk]) / float64(total)
				got, err := KSPValueExact(m, n, float64(kk)/float64(l))
				if err != nil {
					t.Fatal(err)
				}
				if !relClose(got, want, 1e-12) {
					t.Errorf("P(D >= %d/%d) = %.17g, enumeration gives %d/%d = %.17g", kk, l, got, atLeast[kk], total, want)
				}
				if kk == 0 {
					continue
				}
				// A d strictly between two grid points: D >= d exactly when
				// L*D >= kk, by the same enumeration.
				for _, frac := range []float64{0.5, 0.9} {
					d := (float64(kk) - frac) / float64(l)
					got, err := KSPValueExact(m, n, d)
					if err != nil {
						t.Fatal(err)
					}
					if !relClose(got, want, 1e-12) {
						t.Errorf("P(D >= %v) = %.17g, enumeration gives %.17g", d, got, want)
					}
				}
			}
		})
	}
}

// Properties of a probability (no outside source needed: P(D >= d) of any
// statistic is in [0,1], is 1 at d = 0 and cannot increase with d), over
// every multiple of 1/lcm for equal and unequal sizes.
func TestKSPValueExactMonotone(t *testing.T) {
	for _, sz := range [][2]int{{100, 100}, {37, 53}, {60, 90}} {
		m, n := sz[0], sz[1]
		t.Run(fmt.Sprintf("m=%d/n=%d", m, n), func(t *testing.T) {
			l := lcm(int64(m), int64(n))
			prev := math.Inf(1)
			for kk := int64(0); kk <= l; kk++ {
				p, err := KSPValueExact(m, n, float64(kk)/float64(l))
				if err != nil {
					t.Fatal(err)
				}
				if math.IsNaN(p) || p < 0 || p > 1 {
					t.Fatalf("P(D >= %d/%d) = %v, not a probability", kk, l, p)
				}
				if kk == 0 && p != 1 {
					t.Fatalf("P(D >= 0) = %v, want 1", p)
				}
				if p > prev {
					t.Fatalf("P(D >= %d/%d) = %v > P at the previous threshold %v", kk, l, p, prev)
				}
				prev = p
			}
		})
	}
}

// Snapping: a d within float rounding of k/L gives the p of k/L exactly
// (the documented rule), whichever side of k/L it falls on.
func TestKSPValueExactSnapping(t *testing.T) {
	for _, sz := range [][2]int{{30, 45}, {4851, 4851}, {1000, 999}} {
		m, n := sz[0], sz[1]
		l := float64(lcm(int64(m), int64(n)))
		for _, k := range []float64{1, 7, 50, 89} {
			want, _ := KSPValueExact(m, n, k/l)
			// The statistic as KSStatistic computes it, g/(m*n), and its
			// float neighbours.
			g := k * float64(m) * float64(n) / l
			for _, d := range []float64{g / (float64(m) * float64(n)), math.Nextafter(k/l, 0), math.Nextafter(k/l, 1), k/l + 1e-12, k/l - 1e-12} {
				got, err := KSPValueExact(m, n, d)
				if err != nil {
					t.Fatal(err)
				}
				if got != want {
					t.Errorf("m=%d n=%d d=%.17g: p=%v, want the p of %v/L = %v", m, n, d, got, k, want)
				}
			}
		}
	}
}

// q = 4,851 (100 regions): finite, no NaN, and close to the asymptotic
// Kolmogorov (1933) / Smirnov (1948) limit Q(d sqrt(q/2)) near p = 0.05.
// Two regimes:
//   - at a grid point d = k/q the Gnedenko-Korolyuk terms
//     C(2q, q-jk)/C(2q, q) tend to Kolmogorov's exp(-2 j^2 lambda^2) term by
//     term (Stirling's formula), with a relative error of order
//     k^4/q^3 + k^2/q^2 (~1e-3 here at worst; 172^4/4851^3 = 7.7e-4); observed about 3e-6, checked
//     to 1e-3 absolute;
//   - between grid points the exact P(D >= d) is a step function (D lives
//     on multiples of 1/q) while Q is smooth, so they differ by up to one
//     step of Q, |dQ/dlambda| / sqrt(2q) ~ 0.27/98.5 ~ 2.7e-3: the known
//     O(1/sqrt(n)) discreteness correction; checked to 1e-2 absolute.
func TestKSPValueExactLargeVsAsymptotic(t *testing.T) {
	const q = 4851
	// lambda = k/sqrt(2q) ~ 1.358 (Q = 0.05) gives k ~ 133.8.
	for _, c := range []struct {
		k, off, tol float64
	}{
		{128, 0, 1e-3}, {133, 0, 1e-3}, {134, 0, 1e-3}, {138, 0, 1e-3}, {172, 0, 1e-3},
		{133, -0.3, 1e-2}, {134, -0.5, 1e-2}, {134, -0.9, 1e-2}, {138, -0.7, 1e-2},
	} {
		t.Run(fmt.Sprintf("k=%g/off=%g", c.k, c.off), func(t *testing.T) {
			d := (c.k + c.off) / q
			exact, err := KSPValueExact(q, q, d)
			if err != nil {
				t.Fatal(err)
			}
			if math.IsNaN(exact) || math.IsInf(exact, 0) || exact <= 0 || exact > 1 {
				t.Fatalf("exact p = %v", exact)
			}
			asym, err := KSPValueAsymptotic(q, q, d)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(exact-asym) > c.tol {
				t.Errorf("exact %v vs asymptotic %v differ by more than %v", exact, asym, c.tol)
			}
		})
	}
}

func TestKSPValueErrors(t *testing.T) {
	for _, c := range []struct {
		name string
		m, n int
		d    float64
	}{
		{"m=0", 0, 5, 0.1}, {"n<0", 5, -1, 0.1}, {"d<0", 5, 5, -0.01},
		{"d>1", 5, 5, 1.01}, {"NaN", 5, 5, math.NaN()}, {"Inf", 5, 5, math.Inf(1)},
	} {
		t.Run(c.name, func(t *testing.T) {
			for fname, f := range map[string]func(int, int, float64) (float64, error){
				"exact": KSPValueExact, "asymptotic": KSPValueAsymptotic,
			} {
				_, err := f(c.m, c.n, c.d)
				if err == nil || !strings.HasPrefix(err.Error(), "compute: ") {
					t.Errorf("%s: err = %v, want a compute: error", fname, err)
				}
			}
		})
	}
}

// KolmogorovQ against the standard table of the Kolmogorov distribution's
// critical values. docs/methods.md §6 quotes them "from memory of the
// standard table"; so are they here (from memory). The lambdas carry 4
// decimals, which moves Q by up to ~1.4e-5 at Q = 0.05, hence the 5e-4
// relative tolerance.
func TestKolmogorovQTable(t *testing.T) {
	for _, c := range []struct{ lambda, want float64 }{
		{1.2238, 0.10}, {1.3581, 0.05}, {1.6276, 0.01}, {1.9495, 0.001},
	} {
		t.Run(fmt.Sprint(c.lambda), func(t *testing.T) {
			if got := KolmogorovQ(c.lambda); !relClose(got, c.want, 5e-4) {
				t.Errorf("Q(%v) = %.6g, table (from memory) %v", c.lambda, got, c.want)
			}
		})
	}
}

// KolmogorovQ against the defining alternating series (Kolmogorov 1933),
// summed here with 2,000 terms and no switch of representation: this
// checks the Jacobi-theta branch used below lambda = 1.
func TestKolmogorovQSeries(t *testing.T) {
	for _, lambda := range []float64{0.25, 0.4, 0.5, 0.7, 0.9, 0.999, 1, 1.001, 1.2, 2, 3} {
		t.Run(fmt.Sprint(lambda), func(t *testing.T) {
			var sum float64
			for j := 2000; j >= 1; j-- { // smallest terms first
				term := math.Exp(-2 * float64(j*j) * lambda * lambda)
				if j%2 == 0 {
					term = -term
				}
				sum += term
			}
			want := 2 * sum
			if got := KolmogorovQ(lambda); math.Abs(got-want) > 1e-13 {
				t.Errorf("Q(%v) = %.17g, series gives %.17g", lambda, got, want)
			}
		})
	}
	for _, lambda := range []float64{0, -1, math.Inf(-1), 1e-300} {
		if got := KolmogorovQ(lambda); got != 1 {
			t.Errorf("Q(%v) = %v, want 1 (documented convention)", lambda, got)
		}
	}
	if got := KolmogorovQ(math.Inf(1)); got != 0 {
		t.Errorf("Q(+Inf) = %v, want 0", got)
	}
}

// ksDefinition evaluates D = max_e |F_A(e)/m - F_B(e)/n| literally, at
// every pooled value e, counting #{x <= e} by brute force (the definition
// in docs/methods.md §6).
func ksDefinition(a, b []float64) float64 {
	count := func(s []float64, e float64) int {
		c := 0
		for _, x := range s {
			if x <= e {
				c++
			}
		}
		return c
	}
	var d float64
	for _, e := range append(append([]float64{}, a...), b...) {
		d = max(d, math.Abs(float64(count(a, e))/float64(len(a))-float64(count(b, e))/float64(len(b))))
	}
	return d
}

func TestKSStatisticDefinition(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	type tc struct {
		name string
		a, b []float64
	}
	cases := []tc{
		{"identical", []float64{1, 2, 3}, []float64{1, 2, 3}},
		{"separated", []float64{1, 2, 3}, []float64{4, 5}},
		{"all tied", []float64{2, 2, 2}, []float64{2, 2}},
		{"ties across samples", []float64{1, 2, 2, 3}, []float64{2, 2, 2, 4, 5}},
		{"infinities", []float64{math.Inf(-1), 0, 1}, []float64{0.5, math.Inf(1)}},
	}
	for i := range 30 {
		m, n := 1+rng.IntN(40), 1+rng.IntN(40)
		a, b := make([]float64, m), make([]float64, n)
		levels := 3 + rng.IntN(20) // few levels: many ties
		for j := range a {
			a[j] = float64(rng.IntN(levels))
		}
		for j := range b {
			b[j] = float64(rng.IntN(levels)) + 0.5*float64(i%2)*rng.Float64()
		}
		cases = append(cases, tc{fmt.Sprintf("random%d", i), a, b})
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got, err := KSStatistic(c.a, c.b)
			if err != nil {
				t.Fatal(err)
			}
			if want := ksDefinition(c.a, c.b); math.Abs(got-want) > 1e-15 {
				t.Errorf("D = %v, definition gives %v", got, want)
			}
		})
	}
	for _, c := range []struct {
		name string
		a, b []float64
	}{
		{"empty a", nil, []float64{1}}, {"empty b", []float64{1}, []float64{}},
		{"NaN", []float64{1, math.NaN()}, []float64{1}},
	} {
		t.Run("error/"+c.name, func(t *testing.T) {
			if _, err := KSStatistic(c.a, c.b); err == nil || !strings.HasPrefix(err.Error(), "compute: ") {
				t.Errorf("err = %v, want a compute: error", err)
			}
			if _, err := KSTest(c.a, c.b); err == nil {
				t.Errorf("KSTest: no error")
			}
		})
	}
}

// KSTest picks the exact p-value while the band is small enough and the
// asymptotic one otherwise (the documented rule), agreeing with the
// separate entry points.
func TestKSTestMethod(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	sample := func(n int, shift float64) []float64 {
		x := make([]float64, n)
		for i := range x {
			x[i] = rng.NormFloat64() + shift
		}
		return x
	}
	for _, c := range []struct {
		name   string
		m, n   int
		shift  float64
		method string
	}{
		{"small", 30, 50, 0.5, "exact"},
		{"Betti-1 of 100 regions", 4851, 4851, 0.05, "exact"},
		{"large separated", 20000, 20000, 1.5, "asymptotic"},
	} {
		t.Run(c.name, func(t *testing.T) {
			a, b := sample(c.m, 0), sample(c.n, c.shift)
			res, err := KSTest(a, b)
			if err != nil {
				t.Fatal(err)
			}
			if res.Method != c.method || res.M != c.m || res.N != c.n {
				t.Fatalf("got method %q sizes %d,%d; want %q %d,%d", res.Method, res.M, res.N, c.method, c.m, c.n)
			}
			d, _ := KSStatistic(a, b)
			if res.Statistic != d {
				t.Errorf("statistic %v, KSStatistic %v", res.Statistic, d)
			}
			var want float64
			if c.method == "exact" {
				want, _ = KSPValueExact(c.m, c.n, d)
			} else {
				want, _ = KSPValueAsymptotic(c.m, c.n, d)
			}
			if !relClose(res.PValue, want, 1e-12) {
				t.Errorf("p = %v, want %v", res.PValue, want)
			}
		})
	}
}

func BenchmarkKSExact4851(b *testing.B) {
	for b.Loop() {
		if _, err := KSPValueExact(4851, 4851, 0.02); err != nil {
			b.Fatal(err)
		}
	}
}

// Two samples of three that do not overlap: D = 1, and 2 of the C(6,3) = 20
// equally likely orderings (all of A first, or all of B first) reach it.
func ExampleKSTest() {
	res, err := KSTest([]float64{0.1, 0.2, 0.3}, []float64{0.7, 0.8, 0.9})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("D=%.2f p=%.4f method=%s\n", res.Statistic, res.PValue, res.Method)
	// Output: D=1.00 p=0.1000 method=exact
}
