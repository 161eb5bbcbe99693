package compute

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// refitAbsT is the outside reference for one relabelling of
// FreedmanLaneTest: the direct refit of y on x (tested column col) with
// gonum, independent of the package's own fitting code. The coefficients
// come from gonum's Householder QR least-squares solve, the residual sum of
// squares from y - X b, and [(X'X)^-1]_col,col = sum_k V_col,k^2 / s_k^2
// from gonum's SVD X = U S V'; |t| = |b_col| / sqrt(RSS/(n-p)
// [(X'X)^-1]_col,col) (the textbook formulas, Seber and Lee, Linear
// Regression Analysis, 2nd ed., 2003, §3.3 and §4.3).
func refitAbsT(t *testing.T, x *mat.Dense, y []float64, col int) float64 {
	t.Helper()
	n, p := x.Dims()
	var qr mat.QR
	qr.Factorize(x)
	var b mat.VecDense
	if err := qr.SolveVecTo(&b, false, mat.NewVecDense(n, y)); err != nil {
		t.Fatal(err)
	}
	var fitted mat.VecDense
	fitted.MulVec(x, &b)
	var rss float64
	for i := range n {
		d := y[i] - fitted.AtVec(i)
		rss += d * d
	}
	var svd mat.SVD
	if !svd.Factorize(x, mat.SVDThin) {
		t.Fatal("svd")
	}
	var v mat.Dense
	svd.VTo(&v)
	s := svd.Values(nil)
	var inv float64
	for k := range p {
		inv += v.At(col, k) * v.At(col, k) / (s[k] * s[k])
	}
	return math.Abs(b.AtVec(col)) / math.Sqrt(rss/float64(n-p)*inv)
}

// reducedFit returns the fitted values and residuals of y on the columns
// of z (gonum's QR least-squares solve).
func reducedFit(t *testing.T, z *mat.Dense, y []float64) (fitted, resid []float64) {
	t.Helper()
	n, _ := z.Dims()
	var qr mat.QR
	qr.Factorize(z)
	var g, f mat.VecDense
	if err := qr.SolveVecTo(&g, false, mat.NewVecDense(n, y)); err != nil {
		t.Fatal(err)
	}
	f.MulVec(z, &g)
	fitted, resid = make([]float64, n), make([]float64, n)
	for i := range n {
		fitted[i] = f.AtVec(i)
		resid[i] = y[i] - fitted[i]
	}
	return fitted, resid
}

// sessionData is a cohort of subjects with sessions rows each: the group,
// an age per subject, a session-level motion covariate and a scanner
// factor that varies between sessions; ids are the subjects, listed in a
// shuffled order.
func sessionData(rng *rand.Rand, subjects, sessions int, effect float64) (y, g []float64, covs []Covariate, facs []Factor, ids []string) {
	var age, motion []float64
	var scanner []string
	for s := range subjects {
		gs, as, u := float64(s%2), 20+40*rng.Float64(), rng.NormFloat64()
		for k := range sessions {
			m := 0.1 + 0.05*rng.NormFloat64()
			sc := []string{"old", "new"}[(s+k)%2]
			v := 1 + effect*gs + 0.02*as - 2*m + u + 0.5*rng.NormFloat64()
			if sc == "new" {
				v += 0.3
			}
			y, g, age, motion = append(y, v), append(g, gs), append(age, as), append(motion, m)
			scanner, ids = append(scanner, sc), append(ids, fmt.Sprintf("sub-%03d", s))
		}
	}
	perm := rng.Perm(len(y))
	pf := func(v []float64) []float64 {
		out := make([]float64, len(v))
		for k, i := range perm {
			out[k] = v[i]
		}
		return out
	}
	ps := func(v []string) []string {
		out := make([]string, len(v))
		for k, i := range perm {
			out[k] = v[i]
		}
		return out
	}
	return pf(y), pf(g), []Covariate{{"age", pf(age)}, {"motion", pf(motion)}}, []Factor{{"scanner", ps(scanner)}}, ps(ids)
}

// serialFreedmanLane is FreedmanLaneTest's permutation p-value written out
// as docs/methods.md §8 states it, with every relabelling refitted
// directly (refitAbsT): rows sorted by block label (stably), blocks
// permuted as wholes by a Fisher-Yates shuffle of the block order drawn
// from rng (rng.IntN(i + 1) for i = blocks - 1 down to 1, each shuffle
// continuing from the previous order), y* = fitted + P e of the reduced
// model, p = (1 + #{|t*| >= |t| (1 - 1e-9)}) / (1 + nPerm). tObs is the
// observed t of the test under check.
func serialFreedmanLane(t *testing.T, y, g []float64, covs []Covariate, facs []Factor, blocks []string, nPerm int, rng *rand.Rand, tObs float64) (p float64, count int) {
	t.Helper()
	n := len(y)
	order := make([]int, n)
	for i := range order {
		order[i] = i
	}
	if blocks != nil {
		slices.SortStableFunc(order, func(a, b int) int { return strings.Compare(blocks[a], blocks[b]) })
	}
	pick := func(v []float64) []float64 {
		out := make([]float64, n)
		for k, i := range order {
			out[k] = v[i]
		}
		return out
	}
	ys := pick(y)
	var cs []Covariate
	for _, c := range covs {
		cs = append(cs, Covariate{c.Name, pick(c.Values)})
	}
	var fs []Factor
	for _, f := range facs {
		v := make([]string, n)
		for k, i := range order {
			v[k] = f.Values[i]
		}
		fs = append(fs, Factor{f.Name, v})
	}
	z, _, err := Design(n, cs, fs)
	if err != nil {
		t.Fatal(err)
	}
	_, q := z.Dims()
	x := mat.NewDense(n, q+1, nil)
	gs := pick(g)
	for i := range n {
		x.Set(i, 0, 1)
		x.Set(i, 1, gs[i])
		for j := 1; j < q; j++ {
			x.Set(i, j+1, z.At(i, j))
		}
	}
	nb := n
	if blocks != nil {
		nb = 0
		for k := range n {
			if k == 0 || blocks[order[k]] != blocks[order[k-1]] {
				nb++
			}
		}
	}
	size := n / nb
	fitted, resid := reducedFit(t, z, ys)
	perm := make([]int, nb)
	for i := range perm {
		perm[i] = i
	}
	ystar := make([]float64, n)
	threshold := math.Abs(tObs) * (1 - 1e-9)
	for range nPerm {
		for i := nb - 1; i > 0; i-- {
			j := rng.IntN(i + 1)
			perm[i], perm[j] = perm[j], perm[i]
		}
		for b, src := range perm {
			for k := range size {
				ystar[b*size+k] = fitted[b*size+k] + resid[src*size+k]
			}
		}
		if refitAbsT(t, x, ystar, 1) >= threshold {
			count++
		}
	}
	return float64(1+count) / float64(1+nPerm), count
}

// FreedmanLaneTest's p-value equals the serial loop of its definition with
// each relabelling refitted directly by gonum (serialFreedmanLane): the
// same draws in the same order, and a t* that agrees with the refit, so
// the counts are equal (a t* within rounding of the threshold could differ;
// with continuous outcomes that has probability about 1e-9 per draw).
func TestFreedmanLaneEqualsSerialRefit(t *testing.T) {
	rng := rand.New(rand.NewPCG(31, 32))
	y, g, covs, facs := lmData(rng, 60)
	ids := make([]string, 60)
	for i := range ids {
		ids[i] = fmt.Sprintf("sub-%02d", (i*37)%60)
	}
	ys, gs, scovs, sfacs, sids := sessionData(rng, 30, 2, 0.7)
	for _, c := range []struct {
		name   string
		y, g   []float64
		covs   []Covariate
		facs   []Factor
		blocks []string
	}{
		{"60 subjects, 2 covariates and 2 factors", y, g, covs, facs, ids},
		{"no blocks", y, g, covs, facs, nil},
		{"30 subjects with 2 sessions, whole-block", ys, gs, scovs, sfacs, sids},
	} {
		const nPerm = 999
		r, err := FreedmanLaneTest(c.y, c.g, c.covs, c.facs, c.blocks, nPerm, rand.New(rand.NewPCG(5, 0)))
		if err != nil {
			t.Fatal(err)
		}
		want, count := serialFreedmanLane(t, c.y, c.g, c.covs, c.facs, c.blocks, nPerm, rand.New(rand.NewPCG(5, 0)), r.T)
		if r.PermP != want {
			t.Errorf("%s: perm p %v, serial refit %v (%d of %d)", c.name, r.PermP, want, count, nPerm)
		}
		if count == 0 || count == nPerm {
			t.Errorf("%s: count %d of %d: the check needs a p strictly inside (0, 1)", c.name, count, nPerm)
		}
		t.Logf("%s: t %.4f, perm p %v (serial refit %d of %d)", c.name, r.T, r.PermP, count, nPerm)
	}
}

// The t* of one relabelling computed by flNull (projections on the thin Q
// of the full design, docs/methods.md §8) equals the direct refit of
// y* = fitted + P e with gonum (refitAbsT) to 1e-10 relative, for random
// permutations of rows and of blocks, designs with numeric covariates and
// factors, and a near-perfect fit, where the identity and single swaps
// leave a residual sum of squares about 1e-10 of ||e||^2 (the case in
// which ||e||^2 - sum (q_j'P e)^2 cancels).
func TestFreedmanLaneTStarEqualsRefit(t *testing.T) {
	rng := rand.New(rand.NewPCG(41, 42))
	type design struct {
		name        string
		y, g        []float64
		covs        []Covariate
		facs        []Factor
		size        int // rows per block (sessions), rows sorted by block
		nearPerfect bool
	}
	var cases []design
	y, g, covs, facs := lmData(rng, 40)
	cases = append(cases, design{name: "40 rows, 2 covariates, 2 factors", y: y, g: g, covs: covs, facs: facs, size: 1})
	{
		ys, gs, cs, fs, ids := sessionData(rng, 20, 3, 0.5)
		order := make([]int, len(ys))
		for i := range order {
			order[i] = i
		}
		slices.SortStableFunc(order, func(a, b int) int { return strings.Compare(ids[a], ids[b]) })
		pick := func(v []float64) []float64 {
			out := make([]float64, len(v))
			for k, i := range order {
				out[k] = v[i]
			}
			return out
		}
		sc := make([]string, len(ys))
		for k, i := range order {
			sc[k] = fs[0].Values[i]
		}
		cases = append(cases, design{name: "20 subjects x 3 sessions, session factor, whole blocks", y: pick(ys), g: pick(gs),
			covs: []Covariate{{"age", pick(cs[0].Values)}, {"motion", pick(cs[1].Values)}}, facs: []Factor{{"scanner", sc}}, size: 3})
	}
	{
		n := 30
		y, g, age := make([]float64, n), make([]float64, n), make([]float64, n)
		for i := range n {
			g[i], age[i] = float64(i%2), 20+40*rng.Float64()
			y[i] = 1 + 3*g[i] + 0.05*age[i] + 1e-5*rng.NormFloat64()
		}
		cases = append(cases, design{name: "near-perfect fit", y: y, g: g, covs: []Covariate{{"age", age}}, size: 1, nearPerfect: true})
	}
	for _, c := range cases {
		n := len(c.y)
		full, nuis, _, err := testDesign(c.g, c.covs, c.facs)
		if err != nil {
			t.Fatal(err)
		}
		fast, err := newFLNull(nuis, c.g, c.y)
		if err != nil {
			t.Fatal(err)
		}
		sc := fast.scratch()
		fitted, resid := reducedFit(t, nuis, c.y)
		nb := n / c.size
		var perms [][]int
		perms = append(perms, identityPerm(nb))
		for range 20 { // single swaps of two blocks
			p := identityPerm(nb)
			i, j := rng.IntN(nb), rng.IntN(nb)
			p[i], p[j] = p[j], p[i]
			perms = append(perms, p)
		}
		for range 200 {
			perms = append(perms, rng.Perm(nb))
		}
		u, ystar := make([]float64, n), make([]float64, n)
		worst := 0.0
		for k, p := range perms {
			for b, src := range p {
				for r := range c.size {
					u[b*c.size+r] = fast.resid[src*c.size+r]
					ystar[b*c.size+r] = fitted[b*c.size+r] + resid[src*c.size+r]
				}
			}
			got, want := fast.absT(u, sc), refitAbsT(t, full, ystar, 1)
			if k == 0 && c.nearPerfect && want < 1e4 {
				t.Fatalf("%s: |t| %v at the identity: not a near-perfect fit", c.name, want)
			}
			rel := math.Abs(got-want) / want
			worst = max(worst, rel)
			if !(rel <= 1e-10) {
				t.Errorf("%s, permutation %d: |t*| %v, refit %v (relative difference %.2g)", c.name, k, got, want, rel)
			}
		}
		t.Logf("%s: largest relative difference %.2g over %d permutations", c.name, worst, len(perms))
	}
}

func identityPerm(n int) []int {
	p := make([]int, n)
	for i := range p {
		p[i] = i
	}
	return p
}
