package compute

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"
)

func normals(rng *rand.Rand, n int, mean float64) []float64 {
	x := make([]float64, n)
	for i := range x {
		x[i] = rng.NormFloat64() + mean
	}
	return x
}

// forEachSplit calls f with every way of choosing m of the indices 0..m+n-1
// as group A (all C(m+n, m) splits).
func forEachSplit(m, n int, f func(inA []bool)) {
	inA := make([]bool, m+n)
	var rec func(pos, left int)
	rec = func(pos, left int) {
		if left == 0 {
			f(inA)
			return
		}
		if m+n-pos < left {
			return
		}
		inA[pos] = true
		rec(pos+1, left-1)
		inA[pos] = false
		rec(pos+1, left)
	}
	rec(0, m)
}

// welchT is Welch's t of a against b computed with gonum's
// stat.MeanVariance (the unbiased variance), an outside reference for the
// statistic of PermutationTestMean.
func welchT(a, b []float64) float64 {
	ma, va := stat.MeanVariance(a, nil)
	mb, vb := stat.MeanVariance(b, nil)
	return (ma - mb) / math.Sqrt(va/float64(len(a))+vb/float64(len(b)))
}

// The Monte Carlo permutation p-value against the exact permutation
// p-value obtained by enumerating every relabelling (the definition of the
// permutation distribution of the studentised statistic, Janssen 1997;
// Phipson and Smyth 2010 for the (1+b)/(1+N) estimator): with N
// permutations drawn at random, p_hat has mean (1 + N p_exact)/(1 + N) and
// standard deviation below sqrt(p(1-p)/N); the check allows 5 standard
// deviations (a fixed seed, so deterministic).
func TestPermutationTestMeanEnumeration(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 22))
	for _, c := range []struct {
		name  string
		a, b  []float64
		nPerm int
	}{
		{"4v5 shift", normals(rng, 4, 0.8), normals(rng, 5, 0), 20000},
		{"5v5 null", normals(rng, 5, 0), normals(rng, 5, 0), 20000},
		{"3v6 reversed", normals(rng, 3, -1), normals(rng, 6, 0), 20000},
		{"ties", []float64{1, 2, 2, 3}, []float64{2, 3, 3, 4, 1}, 20000},
		// occupancy of a state one group never visits: zeros, group A
		// constant, relabellings with infinite T* (both groups constant)
		{"zeros, one group constant", []float64{0, 0, 0, 0}, []float64{0, 0.4, 0, 0.1, 0.4}, 20000},
		{"zeros", []float64{0, 0.2, 0, 0}, []float64{0.3, 0, 0.1, 0, 0, 0.3}, 20000},
	} {
		t.Run(c.name, func(t *testing.T) {
			pooled := append(append([]float64{}, c.a...), c.b...)
			split := func(inA []bool) (x, y []float64) {
				for i, v := range pooled {
					if inA[i] {
						x = append(x, v)
					} else {
						y = append(y, v)
					}
				}
				return x, y
			}
			obs := math.Abs(welchT(c.a, c.b))
			var hit, total int
			forEachSplit(len(c.a), len(c.b), func(inA []bool) {
				total++
				if math.Abs(welchT(split(inA))) >= obs*(1-1e-9) {
					hit++
				}
			})
			exact := float64(hit) / float64(total)
			res, err := PermutationTestMean(c.a, c.b, c.nPerm, rand.New(rand.NewPCG(7, 8)))
			if err != nil {
				t.Fatal(err)
			}
			n := float64(c.nPerm)
			want := (1 + n*exact) / (1 + n)
			sd := math.Sqrt(max(exact*(1-exact), 1/n) / n)
			if math.Abs(res.PValue-want) > 5*sd {
				t.Errorf("p = %v, exact permutation p %v (%d/%d) gives E[p] = %v, sd %.2g", res.PValue, exact, hit, total, want, sd)
			}
			if want := welchT(c.a, c.b); math.Abs(res.Statistic-want) > 1e-12*max(1, math.Abs(want)) {
				t.Errorf("T = %v, Welch t %v", res.Statistic, want)
			}
		})
	}
}

// rawDiffPermP is the permutation test of the raw mean difference (the
// statistic perm_test_mean used before it was studentised), kept here only
// to show that the false-positive check below can fail: it tests
// exchangeability, not equal means, and rejects far too often when the
// smaller group has the larger variance.
func rawDiffPermP(a, b []float64, nPerm int, rng *rand.Rand) float64 {
	pooled := append(append([]float64{}, a...), b...)
	obs := math.Abs(stat.Mean(a, nil) - stat.Mean(b, nil))
	idx := make([]int, len(pooled))
	for i := range idx {
		idx[i] = i
	}
	count := 0
	x, y := make([]float64, len(a)), make([]float64, len(b))
	for range nPerm {
		rng.Shuffle(len(idx), func(i, j int) { idx[i], idx[j] = idx[j], idx[i] })
		for k, i := range idx {
			if k < len(a) {
				x[k] = pooled[i]
			} else {
				y[k-len(a)] = pooled[i]
			}
		}
		if math.Abs(stat.Mean(x, nil)-stat.Mean(y, nil)) >= obs*(1-1e-9) {
			count++
		}
	}
	return float64(1+count) / float64(1+nPerm)
}

// binomialUpper returns the smallest k with P(X <= k) >= 1 - tail for
// X ~ Binomial(n, p), from gonum's stat/distuv: a rejection count above it
// has probability below tail when the true rejection rate is p.
func binomialUpper(n int, p, tail float64) int {
	d := distuv.Binomial{N: float64(n), P: p}
	for k := 0; k <= n; k++ {
		if d.CDF(float64(k)) >= 1-tail {
			return k
		}
	}
	return n
}

// False-positive rate of the studentised permutation test where the means
// are equal but the variances are not: SD 3 in a group of 8 against SD 1 in
// a group of 30 (the case of issue 11, where the raw-difference permutation
// rejected 27.7% at alpha 0.05). 2000 null data sets, 199 relabellings
// each, fixed seeds (deterministic, cannot flake). Studentised permutation
// tests are asymptotically exact for equal means under unequal variances
// (Janssen 1997; Chung and Romano 2013, Theorem 2.1); at these sizes we
// allow the rejection count up to the 0.999 binomial quantile of a test
// whose true rate is 0.06 (0.05 plus 0.01 for small-sample error, common
// practice, no source). The raw-difference version must exceed the same
// bound, which shows the check can fail.
func TestPermutationTestMeanUnequalVariances(t *testing.T) {
	const reps, nPerm, alpha = 2000, 199, 0.05
	bound := binomialUpper(reps, 0.06, 0.001)
	var rejStud, rejRaw int
	for r := range reps {
		rng := rand.New(rand.NewPCG(1101, uint64(r)))
		a := normals(rng, 8, 0)
		for i := range a {
			a[i] *= 3
		}
		b := normals(rng, 30, 0)
		res, err := PermutationTestMean(a, b, nPerm, rand.New(rand.NewPCG(1102, uint64(r))))
		if err != nil {
			t.Fatal(err)
		}
		if res.PValue <= alpha {
			rejStud++
		}
		if r < 500 && rawDiffPermP(a, b, nPerm, rand.New(rand.NewPCG(1103, uint64(r)))) <= alpha {
			rejRaw++
		}
	}
	t.Logf("studentised: %d/%d rejections (%.1f%%), bound %d; raw difference: %d/500", rejStud, reps, 100*float64(rejStud)/reps, bound, rejRaw)
	if rejStud > bound {
		t.Errorf("studentised permutation test rejects %d of %d null data sets at alpha %v, above the bound %d", rejStud, reps, alpha, bound)
	}
	if rawBound := binomialUpper(500, 0.06, 0.001); rejRaw <= rawBound {
		t.Errorf("raw-difference permutation rejected %d/500, not above %d: the check cannot tell the two apart", rejRaw, rawBound)
	}
}

// Swapping the groups, or listing the values in another order, gives the
// same p-value and the statistic with its sign flipped (issue 14 item 8:
// the seed stream must not depend on which group is named first).
func TestPermutationOrderInvariant(t *testing.T) {
	rng := rand.New(rand.NewPCG(31, 32))
	for _, c := range []struct{ m, n int }{{9, 11}, {10, 10}, {12, 7}} {
		a, b := normals(rng, c.m, 0.5), normals(rng, c.n, 0)
		ab, err := PermutationTestMean(a, b, 999, rand.New(rand.NewPCG(5, 0)))
		if err != nil {
			t.Fatal(err)
		}
		ba, err := PermutationTestMean(b, a, 999, rand.New(rand.NewPCG(5, 0)))
		if err != nil {
			t.Fatal(err)
		}
		ar := slices.Clone(a)
		slices.Reverse(ar)
		shuffled, err := PermutationTestMean(ar, b, 999, rand.New(rand.NewPCG(5, 0)))
		if err != nil {
			t.Fatal(err)
		}
		if ab.PValue != ba.PValue || ab.PValue != shuffled.PValue {
			t.Errorf("%dv%d: p = %v (a,b), %v (b,a), %v (a reversed)", c.m, c.n, ab.PValue, ba.PValue, shuffled.PValue)
		}
		if math.Abs(ab.Statistic+ba.Statistic) > 1e-12*math.Abs(ab.Statistic) {
			t.Errorf("%dv%d: T = %v and %v, want opposite signs", c.m, c.n, ab.Statistic, ba.Statistic)
		}
		ca, cb := randomCurves(rng, c.m, 15, 0.3), randomCurves(rng, c.n, 15, 0)
		cab, err := PermutationTestCurves(ca, cb, 999, rand.New(rand.NewPCG(6, 0)))
		if err != nil {
			t.Fatal(err)
		}
		cba, err := PermutationTestCurves(cb, ca, 999, rand.New(rand.NewPCG(6, 0)))
		if err != nil {
			t.Fatal(err)
		}
		if cab != cba {
			t.Errorf("%dv%d curves: %v (a,b) vs %v (b,a)", c.m, c.n, cab, cba)
		}
	}
}

// uniformChiSquare bins p-values of the form (1+c)/(1+nPerm) into 10 bins
// each holding exactly 10% of the attainable values, and returns Pearson's
// chi-square statistic against the uniform law. Under a null hypothesis the
// Phipson-Smyth p-value is exactly uniform on {1, ..., 1+nPerm}/(1+nPerm)
// (the observed statistic and the permuted ones are exchangeable, so its
// rank is uniform), so the statistic is approximately chi-square with 9
// degrees of freedom (Pearson 1900).
func uniformChiSquare(t *testing.T, ps []float64, nPerm int) float64 {
	t.Helper()
	if (nPerm+1)%10 != 0 {
		t.Fatalf("nPerm+1 = %d is not a multiple of 10", nPerm+1)
	}
	var bins [10]int
	for _, p := range ps {
		r := int(math.Round(p * float64(nPerm+1))) // 1 + c
		// Phipson and Smyth (2010): p = (1+c)/(1+nPerm), never 0.
		if math.Abs(p*float64(nPerm+1)-float64(r)) > 1e-9 || r < 1 || r > nPerm+1 {
			t.Fatalf("p = %v is not of the form (1+c)/(1+%d), 0 <= c <= %d", p, nPerm, nPerm)
		}
		bins[(r-1)*10/(nPerm+1)]++
	}
	want := float64(len(ps)) / 10
	var chi2 float64
	for _, o := range bins {
		chi2 += (float64(o) - want) * (float64(o) - want) / want
	}
	t.Logf("bins %v, chi-square %.2f (critical %.2f)", bins, chi2, chiSquareCritical9)
	return chi2
}

// chiSquareCritical9 is the 0.999 quantile of chi-square with 9 degrees of
// freedom from gonum's stat/distuv (about 27.9): a uniform sample exceeds
// it with probability 0.001; a test that ignores the data (p constant) or
// is badly miscalibrated gives a chi-square in the hundreds.
var chiSquareCritical9 = distuv.ChiSquared{K: 9}.Quantile(0.999)

// Under no group effect the permutation p-values are uniform (see
// uniformChiSquare); 400 data sets drawn from one normal law, 199
// permutations each. Also the share of p <= 0.05 must be near 0.05
// (binomial sd 0.011 for 400 draws; +-4 sd).
func TestPermutationTestMeanNullUniform(t *testing.T) {
	const datasets, nPerm = 400, 199
	rng := rand.New(rand.NewPCG(31, 32))
	ps := make([]float64, datasets)
	small := 0
	for i := range ps {
		res, err := PermutationTestMean(normals(rng, 10, 0), normals(rng, 12, 0), nPerm, rng)
		if err != nil {
			t.Fatal(err)
		}
		ps[i] = res.PValue
		if res.PValue <= 0.05 {
			small++
		}
	}
	if chi2 := uniformChiSquare(t, ps, nPerm); chi2 > chiSquareCritical9 {
		t.Errorf("null p-values not uniform: chi-square %.1f > %.1f", chi2, chiSquareCritical9)
	}
	if frac := float64(small) / datasets; math.Abs(frac-0.05) > 4*math.Sqrt(0.05*0.95/datasets) {
		t.Errorf("share of p <= 0.05 under the null = %v, want about 0.05", frac)
	}
}

// A strong effect in either direction (two-sided test) gives the smallest
// attainable p-value 1/(1+nPerm) (Phipson and Smyth 2010: never 0), up to the rare permutation that
// reproduces the observed split (probability 2/C(20,10) ~ 1e-5 each).
func TestPermutationTestStrongEffect(t *testing.T) {
	const nPerm = 199
	rng := rand.New(rand.NewPCG(41, 42))
	for _, shift := range []float64{5, -5} {
		t.Run(fmt.Sprint("mean/shift=", shift), func(t *testing.T) {
			res, err := PermutationTestMean(normals(rng, 10, shift), normals(rng, 10, 0), nPerm, rng)
			if err != nil {
				t.Fatal(err)
			}
			if res.PValue > 2.0/(1+nPerm) || res.PValue < 1.0/(1+nPerm) {
				t.Errorf("p = %v, want about 1/%d and never less", res.PValue, 1+nPerm)
			}
		})
		t.Run(fmt.Sprint("curves/shift=", shift), func(t *testing.T) {
			// Twice the shift: the random walks' variance grows to 15 at the
			// grid's end, where the sup statistic's noise lives.
			a, b := randomCurves(rng, 10, 15, 2*shift), randomCurves(rng, 10, 15, 0)
			res, err := PermutationTestCurves(a, b, nPerm, rng)
			if err != nil {
				t.Fatal(err)
			}
			if res.PValue > 2.0/(1+nPerm) || res.PValue < 1.0/(1+nPerm) {
				t.Errorf("p = %v, want about 1/%d and never less", res.PValue, 1+nPerm)
			}
		})
	}
}

// randomCurves returns n curves of g points: a random walk plus shift on
// the middle third of the grid.
func randomCurves(rng *rand.Rand, n, g int, shift float64) [][]float64 {
	c := make([][]float64, n)
	for i := range c {
		c[i] = make([]float64, g)
		var x float64
		for k := range c[i] {
			x += rng.NormFloat64()
			c[i][k] = x
			if k >= g/3 && k < 2*g/3 {
				c[i][k] += shift
			}
		}
	}
	return c
}

// The curve permutation test: exact enumeration of all relabellings for
// small groups (as for the mean test), and uniform p-values under the null.
func TestPermutationTestCurves(t *testing.T) {
	t.Run("enumeration", func(t *testing.T) {
		rng := rand.New(rand.NewPCG(51, 52))
		a, b := randomCurves(rng, 3, 12, 1), randomCurves(rng, 4, 12, 0)
		pooled := append(append([][]float64{}, a...), b...)
		supMeanDiff := func(inA []bool) float64 {
			ma, mb := make([]float64, 12), make([]float64, 12)
			for i, c := range pooled {
				dst, size := mb, float64(len(b))
				if inA[i] {
					dst, size = ma, float64(len(a))
				}
				for k, x := range c {
					dst[k] += x / size
				}
			}
			d, err := CurveDistance(ma, mb)
			if err != nil {
				t.Fatal(err)
			}
			return d
		}
		obsSplit := make([]bool, 7)
		for i := range a {
			obsSplit[i] = true
		}
		obs := supMeanDiff(obsSplit)
		var hit, total int
		forEachSplit(3, 4, func(inA []bool) {
			total++
			if supMeanDiff(inA) >= obs-1e-12 {
				hit++
			}
		})
		exact := float64(hit) / float64(total)
		const nPerm = 20000
		res, err := PermutationTestCurves(a, b, nPerm, rand.New(rand.NewPCG(1, 2)))
		if err != nil {
			t.Fatal(err)
		}
		want := (1 + nPerm*exact) / (1 + nPerm)
		sd := math.Sqrt(max(exact*(1-exact), 1.0/nPerm) / nPerm)
		if math.Abs(res.PValue-want) > 5*sd {
			t.Errorf("p = %v, exact permutation p %v (%d/%d)", res.PValue, exact, hit, total)
		}
		if math.Abs(res.Statistic-obs) > 1e-12 {
			t.Errorf("T = %v, want %v", res.Statistic, obs)
		}
	})
	t.Run("null uniform", func(t *testing.T) {
		const datasets, nPerm = 300, 199
		rng := rand.New(rand.NewPCG(61, 62))
		ps := make([]float64, datasets)
		for i := range ps {
			res, err := PermutationTestCurves(randomCurves(rng, 8, 20, 0), randomCurves(rng, 9, 20, 0), nPerm, rng)
			if err != nil {
				t.Fatal(err)
			}
			ps[i] = res.PValue
		}
		if chi2 := uniformChiSquare(t, ps, nPerm); chi2 > chiSquareCritical9 {
			t.Errorf("null p-values not uniform: chi-square %.1f > %.1f", chi2, chiSquareCritical9)
		}
	})
}

// A fixed seed gives the same p-value (the caller owns the randomness).
func TestPermutationReproducible(t *testing.T) {
	rng := rand.New(rand.NewPCG(71, 72))
	a, b := normals(rng, 9, 0.4), normals(rng, 11, 0)
	r1, _ := PermutationTestMean(a, b, 999, rand.New(rand.NewPCG(5, 5)))
	r2, _ := PermutationTestMean(a, b, 999, rand.New(rand.NewPCG(5, 5)))
	if r1 != r2 {
		t.Errorf("same seed, different results: %v vs %v", r1, r2)
	}
}

func TestContrastErrors(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	curves := [][]float64{{1, 2}, {2, 3}}
	for _, c := range []struct {
		name string
		err  error
	}{
		{"mean empty", second(PermutationTestMean(nil, []float64{1}, 9, rng))},
		{"mean nPerm=0", second(PermutationTestMean([]float64{1}, []float64{2}, 0, rng))},
		{"mean nil rng", second(PermutationTestMean([]float64{1}, []float64{2}, 9, nil))},
		{"mean NaN", second(PermutationTestMean([]float64{1, math.NaN()}, []float64{2}, 9, rng))},
		{"mean Inf", second(PermutationTestMean([]float64{1}, []float64{math.Inf(1)}, 9, rng))},
		{"curves empty group", second(PermutationTestCurves(curves, nil, 9, rng))},
		{"curves ragged", second(PermutationTestCurves(curves, [][]float64{{1}}, 9, rng))},
		{"curves empty curves", second(PermutationTestCurves([][]float64{{}}, [][]float64{{}}, 9, rng))},
		{"curves NaN", second(PermutationTestCurves(curves, [][]float64{{1, math.NaN()}}, 9, rng))},
		{"curves nil rng", second(PermutationTestCurves(curves, curves, 9, nil))},
		{"distance lengths", second(CurveDistance([]float64{1}, []float64{1, 2}))},
		{"distance empty", second(CurveDistance(nil, nil))},
		{"distance NaN", second(CurveDistance([]float64{math.NaN()}, []float64{1}))},
		{"welch n=1", second(WelchTTest([]float64{1}, []float64{1, 2}))},
		{"welch zero variances", second(WelchTTest([]float64{3, 3}, []float64{4, 4, 4}))},
		{"welch NaN", second(WelchTTest([]float64{1, math.NaN()}, []float64{1, 2}))},
	} {
		t.Run(c.name, func(t *testing.T) {
			if c.err == nil || !strings.HasPrefix(c.err.Error(), "compute: ") {
				t.Errorf("err = %v, want a compute: error", c.err)
			}
		})
	}
}

func second[T any](_ T, err error) error { return err }

// CurveDistance: sup-norm worked by hand.
func TestCurveDistance(t *testing.T) {
	for _, c := range []struct {
		a, b []float64
		want float64
	}{
		{[]float64{1, 2, 3}, []float64{1, 2, 3}, 0},
		{[]float64{1, 5, 3}, []float64{2, 2, 2}, 3},
		{[]float64{-4, 0}, []float64{0, 1}, 4},
	} {
		if got, err := CurveDistance(c.a, c.b); err != nil || got != c.want {
			t.Errorf("CurveDistance(%v, %v) = %v, %v; want %v", c.a, c.b, got, err, c.want)
		}
	}
}

// Welch's t-test against the first two worked examples of the Wikipedia
// article "Welch's t-test" (data and results from memory; the results are
// printed there to 2-3 significant digits, hence tolerances of half a unit
// in the last digit).
func TestWelchTTestWorkedExamples(t *testing.T) {
	for _, c := range []struct {
		name              string
		a, b              []float64
		t, df, p          float64
		tolT, tolDF, tolP float64
	}{
		{"example 1",
			[]float64{27.5, 21.0, 19.0, 23.6, 17.0, 17.9, 16.9, 20.1, 21.9, 22.6, 23.1, 19.6, 19.0, 21.7, 21.4},
			[]float64{27.1, 22.0, 20.8, 23.4, 23.4, 23.5, 25.8, 22.0, 24.8, 20.2, 21.9, 22.1, 22.9, 20.5, 24.4},
			-2.46, 25.0, 0.021, 0.005, 0.05, 0.0005},
		{"example 2",
			[]float64{17.2, 20.9, 22.6, 18.1, 21.7, 21.4, 23.5, 24.2, 14.7, 21.8},
			[]float64{21.5, 22.8, 21.0, 23.0, 21.6, 23.6, 22.5, 20.7, 23.4, 21.8, 20.7, 21.7, 21.5, 22.5, 23.6, 21.5, 22.5, 23.5, 21.5, 21.8},
			-1.57, 9.9, 0.149, 0.005, 0.05, 0.0005},
	} {
		t.Run(c.name, func(t *testing.T) {
			got, err := WelchTTest(c.a, c.b)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(got.T-c.t) > c.tolT || math.Abs(got.DF-c.df) > c.tolDF || math.Abs(got.PValue-c.p) > c.tolP {
				t.Errorf("got t=%.4f df=%.3f p=%.4f, worked example t=%v df=%v p=%v", got.T, got.DF, got.PValue, c.t, c.df, c.p)
			}
		})
	}
}

// Welch's t-test against the same formulas evaluated with gonum: stat.Mean
// and stat.StdDev (unbiased) for the moments, and distuv.StudentsT's CDF
// (not Survival, which the code uses) for the two-sided p-value.
func TestWelchTTestGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(81, 82))
	for i := range 20 {
		m, n := 2+rng.IntN(30), 2+rng.IntN(30)
		a, b := normals(rng, m, rng.NormFloat64()), normals(rng, n, 0)
		for j := range b {
			b[j] *= 0.2 + 3*rng.Float64()
		}
		t.Run(fmt.Sprintf("random%d", i), func(t *testing.T) {
			got, err := WelchTTest(a, b)
			if err != nil {
				t.Fatal(err)
			}
			sa, sb := stat.StdDev(a, nil), stat.StdDev(b, nil)
			ea, eb := sa*sa/float64(m), sb*sb/float64(n)
			wantT := (stat.Mean(a, nil) - stat.Mean(b, nil)) / math.Sqrt(ea+eb)
			wantDF := (ea + eb) * (ea + eb) / (ea*ea/float64(m-1) + eb*eb/float64(n-1))
			wantP := 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: wantDF}.CDF(-math.Abs(wantT))
			if !relClose(got.T, wantT, 1e-10) || !relClose(got.DF, wantDF, 1e-10) || !relClose(got.PValue, wantP, 1e-8) {
				t.Errorf("got %+v, gonum formula t=%v df=%v p=%v", got, wantT, wantDF, wantP)
			}
		})
	}
}

// Benjamini-Hochberg adjusted p-values worked by hand from the 1995
// definition q_(i) = min_{j>=i} (m/j) p_(j), capped at 1.
func TestBenjaminiHochbergHand(t *testing.T) {
	nan := math.NaN()
	for _, c := range []struct {
		name    string
		p, want []float64
	}{
		// sorted 0.005, 0.01, 0.03, 0.04 -> (4/j)p = 0.02, 0.02, 0.04, 0.04
		{"plain", []float64{0.01, 0.04, 0.03, 0.005}, []float64{0.02, 0.04, 0.04, 0.02}},
		// (4/j)p = 0.04, 0.04, 0.0333.., 0.5: the step-up minimum pulls
		// the first two down to 4/3 * 0.025.
		{"step-up", []float64{0.01, 0.02, 0.025, 0.5}, []float64{0.1 / 3, 0.1 / 3, 0.1 / 3, 0.5}},
		// (3/j)p = 1.5, 1.2, 0.9 -> 0.9, 0.9, 0.9 (cap not needed after min)
		{"large", []float64{0.5, 0.6, 0.9}, []float64{0.9, 0.9, 0.9}},
		// m = 2: (2/1)*0.7 = 1.4 capped at 1; (2/2)*0.8 = 0.8
		{"cap", []float64{0.8, 0.7}, []float64{0.8, 0.8}},
		// NaN ignored: m = 2, sorted 0.01, 0.04 -> 0.02, 0.04
		{"NaN", []float64{nan, 0.04, 0.01}, []float64{nan, 0.04, 0.02}},
		{"ties", []float64{0.02, 0.02, 0.02}, []float64{0.02, 0.02, 0.02}},
		{"single", []float64{0.3}, []float64{0.3}},
		{"empty", nil, []float64{}},
	} {
		t.Run(c.name, func(t *testing.T) {
			got := BenjaminiHochberg(c.p)
			if len(got) != len(c.want) {
				t.Fatalf("got %v, want %v", got, c.want)
			}
			for i := range got {
				if math.IsNaN(c.want[i]) != math.IsNaN(got[i]) || (!math.IsNaN(got[i]) && math.Abs(got[i]-c.want[i]) > 1e-15) {
					t.Errorf("got %v, want %v", got, c.want)
				}
			}
		})
	}
	defer func() {
		if recover() == nil {
			t.Errorf("p-value 1.5 did not panic")
		}
	}()
	BenjaminiHochberg([]float64{0.1, 1.5})
}

// The adjusted p-values reproduce the BH (1995) step-up procedure: reject
// H_(1..k) with k the largest i such that p_(i) <= (i/m) alpha. Random
// p-values (with some ties), several alpha; the procedure is coded here
// directly from the paper's statement.
func TestBenjaminiHochbergStepUp(t *testing.T) {
	rng := rand.New(rand.NewPCG(91, 92))
	for trial := range 50 {
		m := 1 + rng.IntN(60)
		p := make([]float64, m)
		for i := range p {
			if rng.IntN(3) == 0 {
				p[i] = math.Round(rng.Float64()*20) / 400 // small, tied
			} else {
				p[i] = rng.Float64()
			}
		}
		q := BenjaminiHochberg(p)
		for _, alpha := range []float64{0.01, 0.05, 0.1, 0.2} {
			// k = max{i : p_(i) <= i alpha / m}: the count of p_j <= p_(i).
			var cut float64 = -1
			for _, pi := range p {
				rank := 0
				for _, pj := range p {
					if pj <= pi {
						rank++
					}
				}
				if pi <= float64(rank)*alpha/float64(m) {
					cut = max(cut, pi)
				}
			}
			for i := range p {
				rejectBH := p[i] <= cut
				rejectQ := q[i] <= alpha*(1+1e-12)
				if rejectBH != rejectQ {
					t.Fatalf("trial %d alpha %v: p=%v q=%v, step-up rejects=%v", trial, alpha, p[i], q[i], rejectBH)
				}
			}
		}
	}
}
