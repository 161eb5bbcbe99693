package compute

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"slices"
	"strconv"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"
)

// lmData is a random design with two numeric covariates, a three-level and
// a two-level factor.
func lmData(rng *rand.Rand, n int) (y, g []float64, covs []Covariate, facs []Factor) {
	age, motion := make([]float64, n), make([]float64, n)
	sex, site := make([]string, n), make([]string, n)
	y, g = make([]float64, n), make([]float64, n)
	for i := range n {
		age[i] = 20 + 40*rng.Float64()
		motion[i] = 0.1 + 0.05*rng.NormFloat64()
		sex[i] = []string{"F", "M"}[rng.IntN(2)]
		site[i] = []string{"north", "east", "west"}[rng.IntN(3)]
		g[i] = float64(rng.IntN(2))
		y[i] = 3 + 0.02*age[i] - 4*motion[i] + 0.3*g[i] + rng.NormFloat64()
		if site[i] == "west" {
			y[i] += 0.5
		}
	}
	return y, g, []Covariate{{"age", age}, {"motion", motion}}, []Factor{{"sex", sex}, {"site", site}}
}

// normalEquations is the outside reference of FitOLS: the coefficients
// solve X'X b = X'y by gonum's Cholesky factorisation (a decomposition
// other than FitOLS's QR), and (X'X)^-1 comes from the same factorisation;
// se_j = sqrt(RSS/(n-p) [(X'X)^-1]_jj) and t_j = b_j/se_j (the textbook
// formulas, e.g. Seber and Lee, Linear Regression Analysis, 2nd ed., §3.3
// and §4.3).
func normalEquations(t *testing.T, x *mat.Dense, y []float64) (b, se, tt []float64) {
	n, p := x.Dims()
	var xtx mat.SymDense
	xtx.SymOuterK(1, x.T())
	var chol mat.Cholesky
	if !chol.Factorize(&xtx) {
		t.Fatal("X'X is not positive definite")
	}
	var xty, bv mat.VecDense
	xty.MulVec(x.T(), mat.NewVecDense(n, y))
	if err := chol.SolveVecTo(&bv, &xty); err != nil {
		t.Fatal(err)
	}
	var inv mat.SymDense
	if err := chol.InverseTo(&inv); err != nil {
		t.Fatal(err)
	}
	var fitted mat.VecDense
	fitted.MulVec(x, &bv)
	var rss float64
	for i := range n {
		d := y[i] - fitted.AtVec(i)
		rss += d * d
	}
	for j := range p {
		b = append(b, bv.AtVec(j))
		se = append(se, math.Sqrt(rss/float64(n-p)*inv.At(j, j)))
		tt = append(tt, b[j]/se[j])
	}
	return b, se, tt
}

func lmClose(a, b, tol float64) bool { return math.Abs(a-b) <= tol*math.Max(1, math.Abs(b)) }

func TestFitOLSAgainstNormalEquationsAndSVD(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for _, n := range []int{9, 40, 250} {
		y, _, covs, facs := lmData(rng, n)
		x, names, err := Design(n, covs, facs)
		if err != nil {
			t.Fatal(err)
		}
		want := []string{"(intercept)", "age", "motion", "sex=M", "site=north", "site=west"}
		if !slices.Equal(names, want) {
			t.Fatalf("names %v, want %v (reference levels F and east, the first in sorted order)", names, want)
		}
		fit, err := FitOLS(x, names, y)
		if err != nil {
			t.Fatal(err)
		}
		b, se, tt := normalEquations(t, x, y)
		// A third decomposition for the coefficients: gonum's SVD solve.
		var svd mat.SVD
		if !svd.Factorize(x, mat.SVDThin) {
			t.Fatal("svd")
		}
		var bs mat.VecDense
		svd.SolveVecTo(&bs, mat.NewVecDense(n, y), len(names))
		if fit.DF != n-6 {
			t.Errorf("n %d: df %d", n, fit.DF)
		}
		for j, term := range fit.Terms {
			p := 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(n - 6)}.CDF(-math.Abs(tt[j]))
			if !lmClose(term.Estimate, b[j], 1e-10) || !lmClose(term.Estimate, bs.AtVec(j), 1e-10) ||
				!lmClose(term.SE, se[j], 1e-10) || !lmClose(term.T, tt[j], 1e-10) || !lmClose(term.P, p, 1e-9) {
				t.Errorf("n %d %s: estimate %v se %v t %v p %v; Cholesky %v %v %v %v, SVD %v", n, term.Name,
					term.Estimate, term.SE, term.T, term.P, b[j], se[j], tt[j], p, bs.AtVec(j))
			}
		}
	}
}

// With only an intercept and a group indicator, the coefficient of the
// group is the difference of means and its t is Student's pooled-variance
// two-sample t, t = (m1 - m0) / (s_p sqrt(1/n1 + 1/n0)) (Student's t test
// as in any statistics text; means and variances from gonum's stat).
func TestFreedmanLaneTwoGroupsIsStudentT(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	var a, b, y, g []float64
	for i := range 23 {
		v := rng.NormFloat64() * 2
		if i%3 == 0 {
			a, g = append(a, v+1), append(g, 1)
			y = append(y, v+1)
		} else {
			b, g = append(b, v), append(g, 0)
			y = append(y, v)
		}
	}
	ma, va := stat.MeanVariance(a, nil)
	mb, vb := stat.MeanVariance(b, nil)
	na, nb := float64(len(a)), float64(len(b))
	sp2 := ((na-1)*va + (nb-1)*vb) / (na + nb - 2)
	tt := (ma - mb) / math.Sqrt(sp2*(1/na+1/nb))
	p := 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: na + nb - 2}.CDF(-math.Abs(tt))
	r, err := FreedmanLaneTest(y, g, nil, nil, nil, 99, rand.New(rand.NewPCG(1, 0)))
	if err != nil {
		t.Fatal(err)
	}
	if !lmClose(r.Estimate, ma-mb, 1e-12) || !lmClose(r.T, tt, 1e-10) || !lmClose(r.P, p, 1e-9) || r.DF != len(y)-2 {
		t.Errorf("estimate %v t %v p %v df %d; Student %v %v %v", r.Estimate, r.T, r.P, r.DF, ma-mb, tt, p)
	}
}

// Simple regression: slope Sxy/Sxx (gonum's stat.LinearRegression) and
// se = sqrt(s^2 / Sxx), the closed form of any regression text.
func TestFitOLSSimpleRegression(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 9))
	n := 31
	xs, ys := make([]float64, n), make([]float64, n)
	for i := range n {
		xs[i] = rng.Float64() * 10
		ys[i] = 2 - 0.7*xs[i] + rng.NormFloat64()
	}
	x, names, _ := Design(n, []Covariate{{"x", xs}}, nil)
	fit, err := FitOLS(x, names, ys)
	if err != nil {
		t.Fatal(err)
	}
	alpha, beta := stat.LinearRegression(xs, ys, nil, false)
	mx := stat.Mean(xs, nil)
	var sxx, rss float64
	for i := range n {
		sxx += (xs[i] - mx) * (xs[i] - mx)
		d := ys[i] - alpha - beta*xs[i]
		rss += d * d
	}
	se := math.Sqrt(rss / float64(n-2) / sxx)
	if !lmClose(fit.Terms[0].Estimate, alpha, 1e-10) || !lmClose(fit.Terms[1].Estimate, beta, 1e-10) ||
		!lmClose(fit.Terms[1].SE, se, 1e-10) || !lmClose(fit.Terms[1].T, beta/se, 1e-10) {
		t.Errorf("fit %+v; closed form alpha %v beta %v se %v", fit.Terms, alpha, beta, se)
	}
}

func TestFreedmanLaneRefusals(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	y, g, covs, facs := lmData(rng, 20)
	seeded := rand.New(rand.NewPCG(1, 0))
	twice := make([]float64, 20)
	for i := range g {
		twice[i] = 2*g[i] + 1
	}
	same := make([]string, 20)
	for i := range g {
		same[i] = strconv.Itoa(int(g[i]))
	}
	blocks := make([]string, 20)
	for i := range blocks {
		blocks[i] = fmt.Sprint(i / 3) // the last block has 2 rows
	}
	for _, c := range []struct {
		name string
		err  error
		want string
	}{
		{"collinear numeric", errOf(FreedmanLaneTest(y, g, []Covariate{{"dose", twice}}, nil, nil, 9, seeded)), `column "dose" is constant or a linear combination of (intercept), (tested term)`},
		{"factor equal to the group", errOf(FreedmanLaneTest(y, g, nil, []Factor{{"arm", same}}, nil, 9, seeded)), `column "arm=1"`},
		{"constant covariate", errOf(FreedmanLaneTest(y, g, []Covariate{{"flat", make([]float64, 20)}}, nil, nil, 9, seeded)), `column "flat"`},
		{"constant tested term", errOf(FreedmanLaneTest(y, make([]float64, 20), covs, facs, nil, 9, seeded)), `column "(tested term)"`},
		{"too few rows", errOf(FreedmanLaneTest(y[:4], g[:4], []Covariate{{"age", covs[0].Values[:4]}}, nil, nil, 9, seeded)), "4 rows for 3 model columns ((intercept), (tested term), age): need at least 5"},
		{"unequal blocks", errOf(FreedmanLaneTest(y, g, covs, nil, blocks, 9, seeded)), "needs blocks of equal size"},
		{"NaN outcome", errOf(FreedmanLaneTest(append([]float64{math.NaN()}, y[1:]...), g, nil, nil, nil, 9, seeded)), "outcome value 0 is NaN"},
		{"no permutations", errOf(FreedmanLaneTest(y, g, nil, nil, nil, 0, seeded)), "nPerm >= 1"},
	} {
		if c.err == nil || !strings.Contains(c.err.Error(), c.want) {
			t.Errorf("%s: %v, want an error containing %q", c.name, c.err, c.want)
		}
	}
}

func errOf(_ LMTest, err error) error { return err }

// The p-value does not depend on the order of the rows when they carry
// block labels (subject ids): rows are sorted by label before permuting.
func TestFreedmanLaneRowOrder(t *testing.T) {
	rng := rand.New(rand.NewPCG(10, 11))
	n := 24
	y, g, covs, facs := lmData(rng, n)
	ids := make([]string, n)
	for i := range ids {
		ids[i] = fmt.Sprintf("sub-%02d", (i*7)%n)
	}
	r1, err := FreedmanLaneTest(y, g, covs, facs, ids, 999, rand.New(rand.NewPCG(7, 0)))
	if err != nil {
		t.Fatal(err)
	}
	shuffle := rng.Perm(n)
	pick := func(v []float64) []float64 {
		out := make([]float64, n)
		for k, i := range shuffle {
			out[k] = v[i]
		}
		return out
	}
	pickS := func(v []string) []string {
		out := make([]string, n)
		for k, i := range shuffle {
			out[k] = v[i]
		}
		return out
	}
	r2, err := FreedmanLaneTest(pick(y), pick(g), []Covariate{{"age", pick(covs[0].Values)}, {"motion", pick(covs[1].Values)}},
		[]Factor{{"sex", pickS(facs[0].Values)}, {"site", pickS(facs[1].Values)}}, pickS(ids), 999, rand.New(rand.NewPCG(7, 0)))
	if err != nil {
		t.Fatal(err)
	}
	if r1.PermP != r2.PermP || !lmClose(r1.T, r2.T, 1e-12) {
		t.Errorf("shuffled rows: p %v t %v, was %v %v", r2.PermP, r2.T, r1.PermP, r1.T)
	}
	if r1.Blocked || math.IsNaN(r1.P) {
		t.Errorf("distinct ids are blocks of one: blocked %v p %v", r1.Blocked, r1.P)
	}
}

// The Monte Carlo p-value agrees with the exact Freedman-Lane p-value,
// enumerated over all n! permutations of the reduced model's residuals by
// a second implementation that refits with the normal equations (Cholesky),
// within its binomial standard error.
func TestFreedmanLaneAgainstEnumeration(t *testing.T) {
	rng := rand.New(rand.NewPCG(12, 13))
	n := 7
	y, g := make([]float64, n), make([]float64, n)
	age := make([]float64, n)
	for i := range n {
		age[i] = rng.Float64() * 10
		g[i] = float64(i % 2)
		y[i] = 0.3*age[i] + 0.8*g[i] + rng.NormFloat64()
	}
	full := mat.NewDense(n, 3, nil)
	red := mat.NewDense(n, 2, nil)
	for i := range n {
		full.SetRow(i, []float64{1, g[i], age[i]})
		red.SetRow(i, []float64{1, age[i]})
	}
	_, _, tObs := normalEquations(t, full, y)
	bR, _, _ := normalEquations(t, red, y)
	fitted, resid := make([]float64, n), make([]float64, n)
	for i := range n {
		fitted[i] = bR[0] + bR[1]*age[i]
		resid[i] = y[i] - fitted[i]
	}
	idx := make([]int, n)
	for i := range idx {
		idx[i] = i
	}
	var hit, all int
	var rec func(k int)
	ystar := make([]float64, n)
	rec = func(k int) {
		if k == n {
			for i := range n {
				ystar[i] = fitted[i] + resid[idx[i]]
			}
			_, _, ts := normalEquations(t, full, ystar)
			all++
			if math.Abs(ts[1]) >= math.Abs(tObs[1])*(1-1e-9) {
				hit++
			}
			return
		}
		for i := k; i < n; i++ {
			idx[k], idx[i] = idx[i], idx[k]
			rec(k + 1)
			idx[k], idx[i] = idx[i], idx[k]
		}
	}
	rec(0)
	exact := float64(hit) / float64(all)
	const nPerm = 20000
	r, err := FreedmanLaneTest(y, g, []Covariate{{"age", age}}, nil, nil, nPerm, rand.New(rand.NewPCG(2, 0)))
	if err != nil {
		t.Fatal(err)
	}
	se := math.Sqrt(exact * (1 - exact) / nPerm)
	if math.Abs(r.PermP-exact) > 4*se+1.0/nPerm {
		t.Errorf("Monte Carlo p %v, exact %v (%d of %d), 4 se = %v", r.PermP, exact, hit, all, 4*se)
	}
	if !lmClose(r.T, tObs[1], 1e-10) {
		t.Errorf("t %v, normal equations %v", r.T, tObs[1])
	}
}

// confounded is a null cohort: the group has no effect on y, but a
// covariate drives both the group (through a threshold) and y. With
// sessions > 1 each subject has that many rows sharing a random subject
// effect; the group and covariate are per subject. skew draws the errors
// from a centred exponential instead of a normal.
func confounded(rng *rand.Rand, subjects, sessions int, skew bool) (y, g, c []float64, ids []string) {
	for s := range subjects {
		cs := rng.NormFloat64()
		gs := 0.0
		if cs+0.5*rng.NormFloat64() > 0 {
			gs = 1
		}
		u := rng.NormFloat64()
		for range sessions {
			e := rng.NormFloat64()
			if skew {
				e = rng.ExpFloat64() - 1
			}
			if sessions > 1 {
				e = 0.5*e + u
			}
			y = append(y, 1.5*cs+e)
			g, c = append(g, gs), append(c, cs)
			ids = append(ids, fmt.Sprintf("sub-%03d", s))
		}
	}
	return y, g, c, ids
}

type rates struct {
	adjusted, parametric, naive, n int
	blocked                        bool
}

func (r rates) String() string {
	f := func(k int) string { return fmt.Sprintf("%d/%d = %.3f", k, r.n, float64(k)/float64(r.n)) }
	if r.blocked {
		return fmt.Sprintf("Freedman-Lane whole-block perm p %s (parametric p not given), rows permuted ignoring subjects %s", f(r.adjusted), f(r.naive))
	}
	return fmt.Sprintf("Freedman-Lane perm p %s, parametric p %s, naive unadjusted studentised permutation %s", f(r.adjusted), f(r.parametric), f(r.naive))
}

// calibrate counts rejections at alpha 0.05 over reps null cohorts. The
// naive test is, for one row per subject, the unadjusted studentised
// permutation test of the group (PermutationTestMean), and with sessions
// the Freedman-Lane test that ignores the subjects (every row its own
// block).
func calibrate(t *testing.T, reps, subjects, sessions, nPerm int, skew bool, seed uint64) rates {
	rng := rand.New(rand.NewPCG(seed, 99))
	r := rates{blocked: sessions > 1}
	for range reps {
		y, g, c, ids := confounded(rng, subjects, sessions, skew)
		prng := rand.New(rand.NewPCG(rng.Uint64(), 0))
		blocks := ids
		res, err := FreedmanLaneTest(y, g, []Covariate{{"c", c}}, nil, blocks, nPerm, prng)
		if err != nil {
			t.Fatal(err)
		}
		r.n++
		if res.PermP <= 0.05 {
			r.adjusted++
		}
		if sessions == 1 && res.P <= 0.05 {
			r.parametric++
		}
		var naiveP float64
		if sessions == 1 {
			var a, b []float64
			for i := range y {
				if g[i] == 1 {
					a = append(a, y[i])
				} else {
					b = append(b, y[i])
				}
			}
			if len(a) < 2 || len(b) < 2 {
				r.n--
				if res.PermP <= 0.05 {
					r.adjusted--
				}
				if res.P <= 0.05 {
					r.parametric--
				}
				continue
			}
			nr, err := PermutationTestMean(a, b, nPerm, prng)
			if err != nil {
				t.Fatal(err)
			}
			naiveP = nr.PValue
		} else {
			rows := make([]string, len(y))
			for i := range rows {
				rows[i] = strconv.Itoa(i)
			}
			nr, err := FreedmanLaneTest(y, g, []Covariate{{"c", c}}, nil, rows, nPerm, prng)
			if err != nil {
				t.Fatal(err)
			}
			naiveP = nr.PermP
		}
		if naiveP <= 0.05 {
			r.naive++
		}
	}
	return r
}

// binomialUpper is the upper end of the normal-approximation binomial 95 %
// interval of the rejection count at alpha 0.05 over n replicates.
func lmBinomialUpper(n int) float64 { return 0.05 + 1.96*math.Sqrt(0.05*0.95/float64(n)) }

// Calibration on confounded nulls (docs/methods.md §8): the adjusted
// permutation p rejects at about alpha, while the unadjusted test rejects
// far more often. The bound 0.09 is loose (the binomial 95 % upper bound
// for 500 replicates is 0.069) so the test does not flake, yet it fails for
// a clearly anti-conservative test such as the naive one. Set
// TOPOSTATE_LM_CALIBRATION=REPS to run the full measurement of README.
func TestFreedmanLaneCalibration(t *testing.T) {
	reps, nPerm := 500, 199
	if v := os.Getenv("TOPOSTATE_LM_CALIBRATION"); v != "" {
		reps, _ = strconv.Atoi(v)
		nPerm = 999
	}
	for _, c := range []struct {
		name               string
		subjects, sessions int
		skew               bool
	}{
		{"normal errors, 30 subjects", 30, 1, false},
		{"skewed errors, 20 subjects", 20, 1, true},
		{"2 sessions each, 24 subjects", 24, 2, false},
	} {
		r := calibrate(t, reps, c.subjects, c.sessions, nPerm, c.skew, 17)
		t.Logf("%s: %s (binomial 95%% upper bound %.3f)", c.name, r, lmBinomialUpper(r.n))
		if rate := float64(r.adjusted) / float64(r.n); rate > 0.09 || rate < 0.02 {
			t.Errorf("%s: Freedman-Lane rejects %.3f at alpha 0.05", c.name, rate)
		}
		if c.sessions == 1 {
			if rate := float64(r.parametric) / float64(r.n); rate > 0.09 || rate < 0.02 {
				t.Errorf("%s: parametric p rejects %.3f at alpha 0.05", c.name, rate)
			}
		}
		// The naive test must fail the same bound: the harness can tell.
		if rate := float64(r.naive) / float64(r.n); rate <= 0.09 {
			t.Errorf("%s: the naive test rejects only %.3f; the bound cannot tell an anti-conservative test", c.name, rate)
		}
	}
}
