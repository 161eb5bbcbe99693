package compute

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"

	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/lapack/lapack64"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"
)

// The linear model with permutation inference under nuisance covariates
// (docs/methods.md §8).

// Factor is one categorical covariate: Values[i] is row i's level. It is
// coded as indicator columns, one per level except the reference level,
// which is the first level in byte-wise sorted order of the levels present.
type Factor struct {
	Name   string
	Values []string
}

// Covariate is one numeric covariate: Values[i] is row i's value.
type Covariate struct {
	Name   string
	Values []float64
}

// LMTerm is one column of a fitted linear model.
type LMTerm struct {
	Name     string
	Estimate float64 // least-squares coefficient
	SE       float64 // standard error sqrt(s^2 [(X'X)^-1]_jj)
	T        float64 // Estimate / SE
	P        float64 // two-sided Student t p-value on DF degrees of freedom
}

// LMFit is an ordinary least-squares fit.
type LMFit struct {
	Terms []LMTerm
	N, DF int     // rows, residual degrees of freedom N - columns
	RSS   float64 // residual sum of squares
}

// Design builds the design matrix of a model for n rows: an intercept
// column "(intercept)", the numeric covariates in the order given, then for
// each factor one indicator column "name=level" per level other than the
// reference (the first level in sorted order), levels in sorted order. It
// returns the matrix and the column names. A factor with one level present
// contributes no column (it is constant, absorbed by the intercept).
func Design(n int, covs []Covariate, factors []Factor) (*mat.Dense, []string, error) {
	if n < 1 {
		return nil, nil, errors.New("compute: linear model: no rows")
	}
	names := []string{"(intercept)"}
	cols := [][]float64{ones(n)}
	for _, c := range covs {
		if len(c.Values) != n {
			return nil, nil, fmt.Errorf("compute: linear model: covariate %s has %d values for %d rows", c.Name, len(c.Values), n)
		}
		if err := checkFinite("covariate "+c.Name, c.Values); err != nil {
			return nil, nil, err
		}
		names, cols = append(names, c.Name), append(cols, slices.Clone(c.Values))
	}
	for _, f := range factors {
		if len(f.Values) != n {
			return nil, nil, fmt.Errorf("compute: linear model: factor %s has %d values for %d rows", f.Name, len(f.Values), n)
		}
		levels := slices.Clone(f.Values)
		slices.Sort(levels)
		levels = slices.Compact(levels)
		for _, lv := range levels[1:] {
			col := make([]float64, n)
			for i, v := range f.Values {
				if v == lv {
					col[i] = 1
				}
			}
			names, cols = append(names, f.Name+"="+lv), append(cols, col)
		}
	}
	x := mat.NewDense(n, len(cols), nil)
	for j, c := range cols {
		x.SetCol(j, c)
	}
	return x, names, nil
}

func ones(n int) []float64 {
	o := make([]float64, n)
	for i := range o {
		o[i] = 1
	}
	return o
}

// rankTol is the relative singular-value tolerance of the rank test: a
// singular value at or below max(n, p) * eps * s_max counts as zero, the
// usual numerical rank (Golub and Van Loan, Matrix Computations, 4th ed.,
// §5.4.1).
func rankTol(n, p int) float64 { return float64(max(n, p)) * 0x1p-52 }

func matrixRank(x mat.Matrix) int {
	var svd mat.SVD
	if !svd.Factorize(x, mat.SVDNone) {
		return -1
	}
	n, p := x.Dims()
	return svd.Rank(rankTol(n, p))
}

// CheckDesign refuses a design that cannot be fitted: fewer than p + 2
// rows for p columns (at least 2 residual degrees of freedom; common
// practice, no source), or columns that are linearly dependent. For the
// latter it names the first column that is a combination of the columns
// before it (e.g. a constant covariate, or a factor that coincides with the
// group).
func CheckDesign(x *mat.Dense, names []string) error {
	n, p := x.Dims()
	if n < p+2 {
		return fmt.Errorf("compute: linear model: %d rows for %d model columns (%s): need at least %d (2 residual degrees of freedom); use fewer covariates or more subjects",
			n, p, strings.Join(names, ", "), p+2)
	}
	if matrixRank(x) == p {
		return nil
	}
	for j := 1; j <= p; j++ {
		if matrixRank(x.Slice(0, n, 0, j)) < j {
			return fmt.Errorf("compute: linear model: the design is rank deficient: column %q is constant or a linear combination of %s (a covariate that does not vary, or one determined by the others or by the tested term); drop it",
				names[j-1], strings.Join(names[:j-1], ", "))
		}
	}
	return errors.New("compute: linear model: the design is rank deficient")
}

// olsFit is a least-squares fit's factorisation: the pseudo-inverse
// (X'X)^-1 X' (p x n) and the diagonal of (X'X)^-1, both from a Householder
// QR of X (X = QR, (X'X)^-1 = R^-1 R^-T).
type olsFit struct {
	x          *mat.Dense
	pinv       *mat.Dense
	xtxInvDiag []float64
	n, p       int
}

func newOLS(x *mat.Dense) (*olsFit, error) {
	n, p := x.Dims()
	var qr mat.QR
	qr.Factorize(x)
	// The pseudo-inverse's transpose X (X'X)^-1 = Q R^-T (n x p) is the
	// minimum-norm solution W of X'W = I_p, which gonum's QR solves
	// without forming an n x n matrix.
	var pinvT mat.Dense
	if err := qr.SolveTo(&pinvT, true, mat.NewDiagDense(p, ones(p))); err != nil {
		return nil, fmt.Errorf("compute: linear model: %w", err)
	}
	pinv := mat.DenseCopyOf(pinvT.T())
	var r mat.Dense
	qr.RTo(&r)
	rt := mat.NewTriDense(p, mat.Upper, nil)
	for i := range p {
		for j := i; j < p; j++ {
			rt.SetTri(i, j, r.At(i, j))
		}
	}
	var rinv mat.TriDense
	if err := rinv.InverseTri(rt); err != nil {
		return nil, fmt.Errorf("compute: linear model: %w", err)
	}
	diag := make([]float64, p)
	for j := range p {
		for k := j; k < p; k++ {
			v := rinv.At(j, k)
			diag[j] += v * v
		}
	}
	return &olsFit{x: x, pinv: pinv, xtxInvDiag: diag, n: n, p: p}, nil
}

// fit returns the coefficients and the residual sum of squares of y. beta
// and resid are scratch of lengths p and n.
func (o *olsFit) fit(y, beta, resid []float64) float64 {
	mat.NewVecDense(o.p, beta).MulVec(o.pinv, mat.NewVecDense(o.n, y))
	rv := mat.NewVecDense(o.n, resid)
	rv.MulVec(o.x, mat.NewVecDense(o.p, beta))
	var rss float64
	for i := range resid {
		resid[i] = y[i] - resid[i]
		rss += resid[i] * resid[i]
	}
	return rss
}

// FitOLS fits y on the columns of x by least squares (Householder QR) after
// CheckDesign, and returns every coefficient with its standard error, t and
// two-sided Student t p-value on n - p degrees of freedom.
func FitOLS(x *mat.Dense, names []string, y []float64) (LMFit, error) {
	n, p := x.Dims()
	if len(y) != n || len(names) != p {
		return LMFit{}, fmt.Errorf("compute: linear model: %d outcomes, %d names for a %d x %d design", len(y), len(names), n, p)
	}
	if err := checkFinite("outcome", y); err != nil {
		return LMFit{}, err
	}
	if err := CheckDesign(x, names); err != nil {
		return LMFit{}, err
	}
	o, err := newOLS(x)
	if err != nil {
		return LMFit{}, err
	}
	beta, resid := make([]float64, p), make([]float64, n)
	rss := o.fit(y, beta, resid)
	df := n - p
	tdist := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(df)}
	out := LMFit{N: n, DF: df, RSS: rss}
	s2 := rss / float64(df)
	for j := range p {
		se := math.Sqrt(s2 * o.xtxInvDiag[j])
		t := beta[j] / se
		out.Terms = append(out.Terms, LMTerm{Name: names[j], Estimate: beta[j], SE: se, T: t, P: 2 * tdist.CDF(-math.Abs(t))})
	}
	return out, nil
}

// LMTest is the test of one term of a linear model.
type LMTest struct {
	LMTerm
	DF int
	// PermP is the Freedman-Lane permutation p-value of the term.
	PermP float64
	// Blocked is true when some rows share a block (repeated sessions of a
	// subject): P is then NaN, because the Student t distribution assumes
	// independent rows, and only PermP is a test.
	Blocked bool
}

// FreedmanLaneTest tests the coefficient of the tested regressor in the
// model y = b0 + b1 tested + covariates + factors + e (docs/methods.md §8).
// The statistic is the term's t. Its permutation distribution follows
// Freedman and Lane (1983) as set out by Winkler et al. (2014, NeuroImage
// 92:381-397), who compare it with the other schemes: fit the reduced
// model without the tested term, permute its residuals, add them back to
// the reduced model's fitted values, refit the full model and recompute t. The two-sided p-value is
// p = (1 + #{|t*| >= |t|}) / (1 + nPerm) (Phipson and Smyth, 2010), with
// the float tolerance of permRelTol.
//
// blocks, when not nil, gives each row's exchangeability block, e.g. the
// subject of a session. Rows of one block move together: whole-block
// exchangeability (Winkler et al., 2014, section on exchangeability
// blocks), in which the blocks are permuted as wholes and the order of the
// rows inside each block is kept; it needs blocks of equal size. Rows are first sorted by block
// (stably), so the draws do not depend on the order of the blocks in the
// input. With every block of size 1 (or blocks nil) the scheme is the plain
// permutation of rows, and rows are sorted by their block label when given.
//
// It returns an error for a design CheckDesign refuses, a NaN or infinite
// value, blocks of unequal size, nPerm < 1 or a nil rng.
func FreedmanLaneTest(y, tested []float64, covs []Covariate, factors []Factor, blocks []string, nPerm int, rng *rand.Rand) (LMTest, error) {
	n := len(y)
	if n < 1 {
		return LMTest{}, errors.New("compute: linear model: no rows")
	}
	if len(tested) != n {
		return LMTest{}, fmt.Errorf("compute: linear model: %d outcomes and %d values of the tested term", n, len(tested))
	}
	if blocks != nil && len(blocks) != n {
		return LMTest{}, fmt.Errorf("compute: linear model: %d outcomes and %d block labels", n, len(blocks))
	}
	if err := checkPermArgs(nPerm, rng); err != nil {
		return LMTest{}, err
	}
	if err := checkFinite("outcome", y); err != nil {
		return LMTest{}, err
	}
	if err := checkFinite("tested term", tested); err != nil {
		return LMTest{}, err
	}
	// Canonical row order: by block label, stably.
	order := make([]int, n)
	for i := range order {
		order[i] = i
	}
	if blocks != nil {
		slices.SortStableFunc(order, func(a, b int) int { return strings.Compare(blocks[a], blocks[b]) })
	}
	reorderF := func(v []float64) []float64 {
		out := make([]float64, n)
		for k, i := range order {
			out[k] = v[i]
		}
		return out
	}
	ys := reorderF(y)
	covsS := make([]Covariate, len(covs))
	for k, c := range covs {
		if len(c.Values) != n {
			return LMTest{}, fmt.Errorf("compute: linear model: covariate %s has %d values for %d rows", c.Name, len(c.Values), n)
		}
		covsS[k] = Covariate{Name: c.Name, Values: reorderF(c.Values)}
	}
	factorsS := make([]Factor, len(factors))
	for k, f := range factors {
		if len(f.Values) != n {
			return LMTest{}, fmt.Errorf("compute: linear model: factor %s has %d values for %d rows", f.Name, len(f.Values), n)
		}
		v := make([]string, n)
		for j, i := range order {
			v[j] = f.Values[i]
		}
		factorsS[k] = Factor{Name: f.Name, Values: v}
	}
	// Blocks as runs of the sorted rows.
	var starts []int
	for k := range n {
		if k == 0 || blocks == nil || blocks[order[k]] != blocks[order[k-1]] {
			starts = append(starts, k)
		}
	}
	size := n / len(starts)
	for b, s := range starts {
		end := n
		if b+1 < len(starts) {
			end = starts[b+1]
		}
		if end-s != blockLen(starts, 0, n) {
			return LMTest{}, fmt.Errorf("compute: linear model: block %q has %d rows and block %q has %d: whole-block permutation needs blocks of equal size; average the sessions of each subject (one row per subject) or give every subject the same number",
				blocks[order[s]], end-s, blocks[order[0]], blockLen(starts, 0, n))
		}
	}
	testedS := reorderF(tested)
	full, nuis, names, err := testDesign(testedS, covsS, factorsS)
	if err != nil {
		return LMTest{}, err
	}
	fit, err := FitOLS(full, names, ys)
	if err != nil {
		return LMTest{}, err
	}
	res := LMTest{LMTerm: fit.Terms[1], DF: fit.DF, Blocked: size > 1}
	res.Name = ""
	if res.Blocked {
		res.P = math.NaN()
	}
	tObs := fit.Terms[1].T
	if math.IsNaN(tObs) || math.IsInf(tObs, 0) {
		return LMTest{}, errors.New("compute: linear model: the tested term's t is not finite (the outcome is fitted exactly)")
	}
	null, err := newFLNull(nuis, testedS, ys)
	if err != nil {
		return LMTest{}, err
	}
	threshold := math.Abs(tObs) * (1 - permRelTol)
	count := null.count(len(starts), size, nPerm, threshold, rng)
	res.PermP = float64(1+count) / float64(1+nPerm)
	return res, nil
}

// testDesign returns the full design [intercept, tested, nuisance] of
// FreedmanLaneTest, the nuisance design [intercept, nuisance] and the full
// design's column names.
func testDesign(tested []float64, covs []Covariate, factors []Factor) (full, nuis *mat.Dense, names []string, err error) {
	n := len(tested)
	nuis, nuisNames, err := Design(n, covs, factors)
	if err != nil {
		return nil, nil, nil, err
	}
	_, q := nuis.Dims()
	full = mat.NewDense(n, q+1, nil)
	full.Slice(0, n, 0, 1).(*mat.Dense).Copy(nuis.Slice(0, n, 0, 1))
	full.SetCol(1, tested)
	if q > 1 {
		full.Slice(0, n, 2, q+1).(*mat.Dense).Copy(nuis.Slice(0, n, 1, q))
	}
	names = append([]string{nuisNames[0], "(tested term)"}, nuisNames[1:]...)
	return full, nuis, names, nil
}

// CheckTestDesign reports whether FreedmanLaneTest can fit the model with
// this tested term and these covariates: nil, or the error it would give
// for the design (too few rows for its columns, or a rank-deficient
// design; see CheckDesign).
func CheckTestDesign(tested []float64, covs []Covariate, factors []Factor) error {
	if err := checkFinite("tested term", tested); err != nil {
		return err
	}
	full, _, names, err := testDesign(tested, covs, factors)
	if err != nil {
		return err
	}
	return CheckDesign(full, names)
}

func blockLen(starts []int, b, n int) int {
	if b+1 < len(starts) {
		return starts[b+1] - starts[b]
	}
	return n - starts[b]
}

// flNull computes the t* of the relabellings of FreedmanLaneTest without
// refitting (docs/methods.md §8). Order the full design's columns as
// X = [Z*, x] (nuisance, then the tested term) and let X = Q R be its
// Householder QR with thin Q = [q_1 .. q_p] (n x p), so that q_1 .. q_p-1
// span the nuisance columns Z*. For y* = H_Z y + P e, e = (I - H_Z) y:
//
//   - the hat matrix of X is Q Q', and H_Z y lies in the span of Z*, inside
//     that of X, so the residual of y* is (I - QQ') P e and
//     RSS* = ||P e||^2 - ||Q'P e||^2 = ||e||^2 - sum_j (q_j'P e)^2
//     (a permutation keeps the sum of squares);
//   - the last coefficient solves the last row of R b = Q'y*, so
//     b_x = q_p'y* / r_pp = q_p'P e / r_pp, because q_p is orthogonal to
//     the span of Z*, where H_Z y lies; the direct refit's q_p'H_Z y is
//     rounding only and is left out;
//   - [(X'X)^-1]_pp = [R^-1 R^-T]_pp = 1 / r_pp^2 (the last row of the
//     triangular R^-1 is 1/r_pp at the diagonal),
//
// so |t*| = |q_p'P e| / sqrt(RSS* / (n - p)): p dot products of length n
// per relabelling. The difference ||e||^2 - sum_j c_j^2 (c_j = q_j'P e)
// loses digits when the model explains nearly all of P e: a computed dot
// product x'y is within about n eps |x|'|y| of its value (Higham, Accuracy
// and Stability of Numerical Algorithms, 2nd ed., 2002, §3.1), so with
// ||q_j|| = 1 each of ||e||^2 and the c_j^2 is within about n eps ||e||^2,
// and RSS* within a relative (2p + 1) n eps ||e||^2 / RSS*. When RSS* is
// below flDirectBelow ||e||^2, the residual P e - Q c is formed instead and
// orthogonalised against Q once more ("twice is enough": Giraud, Langou
// and Rozloznik, 2005, from memory), as accurate as the direct refit.
// Tested against gonum refits: TestFreedmanLaneTStarEqualsRefit (which
// fails without the direct residual) and TestFreedmanLaneEqualsSerialRefit.
type flNull struct {
	n, p  int
	df    float64
	q     []float64 // column j of the thin Q at q[j*n : (j+1)*n]
	resid []float64 // e, the reduced model's residuals
	ee    float64   // ||e||^2
}

// flDirectBelow is the share of ||e||^2 below which flNull forms the
// residual of a relabelling directly: at it, the bound (2p + 1) n eps / 0.05
// is 4e-11 for n = 1,000 and p = 4, and random relabellings of n >> p rows
// almost never fall below it (the model explains about p/n of P e).
const flDirectBelow = 0.05

// count returns the number of relabellings whose |t*| reaches threshold,
// for nPerm relabellings of nb blocks of size rows each drawn from rng.
//
// Each relabelling shuffles the block order perm of the previous one by
// Fisher-Yates (rng.IntN(i + 1) for i = nb - 1 down to 1), and its permuted
// residuals are v[b*size+k] = e[perm[b]*size+k]. Swapping the values of v
// as the shuffle swaps block numbers keeps that equality, so v is shuffled
// in place with no index array and no gather.
//
// The draws are about half of the work (n rng.IntN per relabelling) and
// are serial by nature; drawing in one goroutine and evaluating in another
// gave no gain on a loaded two-core machine and cost 60-90 % more CPU, so
// the loop is serial.
func (f *flNull) count(nb, size, nPerm int, threshold float64, rng *rand.Rand) int {
	v := slices.Clone(f.resid)
	sc := f.scratch()
	count := 0
	for range nPerm {
		for i := nb - 1; i > 0; i-- { // Fisher-Yates
			j := rng.IntN(i + 1)
			if size == 1 {
				v[i], v[j] = v[j], v[i]
			} else if i != j {
				a, b := v[i*size:(i+1)*size], v[j*size:(j+1)*size]
				for k := range a {
					a[k], b[k] = b[k], a[k]
				}
			}
		}
		if f.absT(v, sc) >= threshold {
			count++
		}
	}
	return count
}

// flScratch is one goroutine's scratch for flNull.absT.
type flScratch struct{ c, r []float64 }

func (f *flNull) scratch() *flScratch {
	return &flScratch{c: make([]float64, f.p), r: make([]float64, f.n)}
}

func (f *flNull) col(j int) []float64 { return f.q[j*f.n : (j+1)*f.n] }

// newFLNull factorises [nuis, tested] (which must have full column rank,
// as CheckDesign ensures) and computes the residuals of y on nuis by
// projecting out q_1 .. q_p-1 one after another (modified Gram-Schmidt
// with the orthonormal Householder columns).
func newFLNull(nuis *mat.Dense, tested, y []float64) (*flNull, error) {
	n, q := nuis.Dims()
	p := q + 1
	if len(tested) != n || len(y) != n || n <= p {
		return nil, fmt.Errorf("compute: linear model: %d rows, %d tested values and %d outcomes for %d columns", n, len(tested), len(y), p)
	}
	a := blas64.General{Rows: n, Cols: p, Stride: p, Data: make([]float64, n*p)}
	for i := range n {
		for j := range q {
			a.Data[i*p+j] = nuis.At(i, j)
		}
		a.Data[i*p+q] = tested[i]
	}
	tau := make([]float64, p)
	work := []float64{0}
	lapack64.Geqrf(a, tau, work, -1)
	lw := int(work[0])
	lapack64.Orgqr(a, tau, work, -1)
	lw = max(lw, int(work[0]))
	work = make([]float64, lw)
	lapack64.Geqrf(a, tau, work, lw)
	for j := range p {
		if a.Data[j*p+j] == 0 {
			return nil, errors.New("compute: linear model: the design is rank deficient")
		}
	}
	lapack64.Orgqr(a, tau, work, lw)
	f := &flNull{n: n, p: p, df: float64(n - p), q: make([]float64, n*p), resid: slices.Clone(y)}
	for i := range n {
		for j := range p {
			f.q[j*n+i] = a.Data[i*p+j]
		}
	}
	for j := range q {
		qj := f.col(j)
		floats.AddScaled(f.resid, -floats.Dot(qj, f.resid), qj)
	}
	f.ee = floats.Dot(f.resid, f.resid)
	return f, nil
}

// absT returns |t*| of the relabelling whose permuted residuals are u
// (u = P e, a permutation of f.resid).
func (f *flNull) absT(u []float64, s *flScratch) float64 {
	var sum float64
	for j := range f.p {
		s.c[j] = floats.Dot(f.col(j), u)
		sum += s.c[j] * s.c[j]
	}
	rss := f.ee - sum
	if rss < flDirectBelow*f.ee {
		r := s.r
		copy(r, u)
		for range 2 {
			for j := range f.p {
				qj := f.col(j)
				floats.AddScaled(r, -floats.Dot(qj, r), qj)
			}
		}
		rss = floats.Dot(r, r)
	}
	return math.Abs(s.c[f.p-1]) / math.Sqrt(rss/f.df)
}
