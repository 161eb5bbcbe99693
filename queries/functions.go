package queries

import (
	"context"
	"database/sql"
	"database/sql/driver"
	"fmt"
	"io/fs"
	"math"
	"math/rand/v2"
	"strings"

	"github.com/marcboeker/go-duckdb"

	"github.com/topostate/topostate/compute"
)

// Function documents one SQL function that Register adds to a connection.
type Function struct {
	Name      string
	Signature string // SQL argument and result types
	Doc       string
	in        []duckdb.TypeInfo
	out       duckdb.TypeInfo
	fn        func(args []driver.Value) (any, error)
}

// Config and Executor make a Function a duckdb.ScalarFunc.
//
// Every function is declared volatile although it is deterministic: with
// DuckDB 1.1.3 and go-duckdb 1.8.5, folding a call on constant arguments at
// prepare time hands the driver a chunk it cannot read when an argument is
// a constant list literal that is empty or holds a NULL (ks_test([]::DOUBLE[],
// [1.0]) aborted the whole process with a C++ InternalException). Volatile
// functions are not folded; they are evaluated once per row like any other
// expression, which costs nothing here.
func (f *Function) Config() duckdb.ScalarFuncConfig {
	return duckdb.ScalarFuncConfig{InputTypeInfos: f.in, ResultTypeInfo: f.out, Volatile: true}
}

// Executor runs the adapter row by row. DuckDB calls it from its own worker
// threads; every adapter is a pure function of its arguments.
func (f *Function) Executor() duckdb.ScalarFuncExecutor {
	return duckdb.ScalarFuncExecutor{RowExecutor: f.call}
}

// call runs the adapter. A panic must not unwind through DuckDB's C++ frames
// (that would take the user's whole session down), so one is turned into an
// error here, at the cgo boundary; the adapters validate their arguments and
// are not expected to panic.
func (f *Function) call(args []driver.Value) (res any, err error) {
	defer func() {
		if r := recover(); r != nil {
			res, err = nil, fmt.Errorf("queries: %s: internal error: %v", f.Name, r)
		}
	}()
	res, err = f.fn(args)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", f.Name, err)
	}
	return res, nil
}

// ksExactMaxCells bounds (m+1)(n+1) for ks_pvalue_exact: the lattice
// recursion visits at most that many cells (about 1e9 a second), so larger
// sizes are refused with a pointer to ks_pvalue_asymptotic rather than
// left to run for minutes.
const ksExactMaxCells = 2e9

func must(t duckdb.TypeInfo, err error) duckdb.TypeInfo {
	if err != nil {
		panic(err) // a fixed type built at start-up
	}
	return t
}

func structOf(fields ...string) duckdb.TypeInfo {
	var entries []duckdb.StructEntry
	for i := 0; i < len(fields); i += 2 {
		t := tDouble
		if fields[i+1] == "VARCHAR" {
			t = tVarchar
		}
		e, err := duckdb.NewStructEntry(t, fields[i])
		if err != nil {
			panic(err)
		}
		entries = append(entries, e)
	}
	return must(duckdb.NewStructInfo(entries[0], entries[1:]...))
}

var (
	tDouble   = must(duckdb.NewTypeInfo(duckdb.TYPE_DOUBLE))
	tBigint   = must(duckdb.NewTypeInfo(duckdb.TYPE_BIGINT))
	tInteger  = must(duckdb.NewTypeInfo(duckdb.TYPE_INTEGER))
	tVarchar  = must(duckdb.NewTypeInfo(duckdb.TYPE_VARCHAR))
	tList     = must(duckdb.NewListInfo(tDouble))
	tListList = must(duckdb.NewListInfo(tList))
	tTextList = must(duckdb.NewListInfo(tVarchar))
	tTextLL   = must(duckdb.NewListInfo(tTextList))
)

// Functions returns the SQL functions, freshly built (RegisterScalarUDF
// takes ownership of each).
func Functions() []*Function {
	return []*Function{
		{
			Name:      "ks_pvalue_exact",
			Signature: "ks_pvalue_exact(m BIGINT, n BIGINT, d DOUBLE) -> DOUBLE",
			Doc: "Exact P(D >= d) for the two-sample Kolmogorov-Smirnov statistic D of samples of sizes m and n " +
				"(no ties), by counting lattice paths (every ordering of the pooled values equally likely). D only takes values k/L, L = lcm(m, n): " +
				"a d within float rounding of such a value is snapped to it; any other d is raised to the next " +
				"attainable value, because for D on that grid P(D >= d) = P(D >= ceil(d*L)/L) exactly (rounding to " +
				"the nearest value could move a d just above a grid point down and report a larger tail than the true " +
				"one). d = 0 gives 1. Refused when (m+1)(n+1) > 2e9; use ks_pvalue_asymptotic there.",
			in: []duckdb.TypeInfo{tBigint, tBigint, tDouble}, out: tDouble,
			fn: func(a []driver.Value) (any, error) {
				m, n, d := a[0].(int64), a[1].(int64), a[2].(float64)
				if err := checkSizes(m, n); err != nil {
					return nil, err
				}
				if (float64(m)+1)*(float64(n)+1) > ksExactMaxCells {
					return nil, fmt.Errorf("sizes m=%d n=%d are too large for the exact recursion; use ks_pvalue_asymptotic", m, n)
				}
				return compute.KSPValueExact(int(m), int(n), d)
			},
		},
		{
			Name:      "ks_pvalue_asymptotic",
			Signature: "ks_pvalue_asymptotic(m BIGINT, n BIGINT, d DOUBLE) -> DOUBLE",
			Doc: "Large-sample p-value of a two-sample KS statistic d: Q(d sqrt(mn/(m+n))) with Kolmogorov's " +
				"Q(lambda) = 2 sum_{j>=1} (-1)^(j-1) exp(-2 j^2 lambda^2).",
			in: []duckdb.TypeInfo{tBigint, tBigint, tDouble}, out: tDouble,
			fn: func(a []driver.Value) (any, error) {
				m, n, d := a[0].(int64), a[1].(int64), a[2].(float64)
				if err := checkSizes(m, n); err != nil {
					return nil, err
				}
				return compute.KSPValueAsymptotic(int(m), int(n), d)
			},
		},
		{
			Name:      "ks_test",
			Signature: "ks_test(a DOUBLE[], b DOUBLE[]) -> STRUCT(statistic DOUBLE, pvalue DOUBLE, method VARCHAR)",
			Doc: "Two-sample KS test: D = max |F_a - F_b| and P(D >= D_observed), exact when the lattice recursion " +
				"has at most 1e8 cells (method 'exact'), else asymptotic (method 'asymptotic'). The exact p-value " +
				"assumes no ties; with ties it is conservative.",
			in: []duckdb.TypeInfo{tList, tList}, out: structOf("statistic", "DOUBLE", "pvalue", "DOUBLE", "method", "VARCHAR"),
			fn: func(a []driver.Value) (any, error) {
				x, y, err := pair(a)
				if err != nil {
					return nil, err
				}
				r, err := compute.KSTest(x, y)
				if err != nil {
					return nil, err
				}
				return map[string]any{"statistic": r.Statistic, "pvalue": r.PValue, "method": r.Method}, nil
			},
		},
		{
			Name:      "curve_distance",
			Signature: "curve_distance(a DOUBLE[], b DOUBLE[]) -> DOUBLE",
			Doc:       "Sup-norm distance max_g |a[g] - b[g]| of two curves on the same grid; an error when the lengths differ.",
			in:        []duckdb.TypeInfo{tList, tList}, out: tDouble,
			fn: func(a []driver.Value) (any, error) {
				x, y, err := pair(a)
				if err != nil {
					return nil, err
				}
				return compute.CurveDistance(x, y)
			},
		},
		{
			Name:      "perm_test_mean",
			Signature: "perm_test_mean(a DOUBLE[], b DOUBLE[], n_perm INTEGER, seed BIGINT) -> STRUCT(statistic DOUBLE, pvalue DOUBLE)",
			Doc: "Studentised two-sided permutation test of equal means: the statistic is Welch's t of a against b, " +
				"recomputed under n_perm random relabellings of whole observations (subjects); " +
				"p = (1 + #{|T*| >= |T|}) / (1 + n_perm) (Phipson and Smyth 2010). Valid for equal means when the " +
				"variances differ (Janssen 1997; Chung and Romano 2013). The relabellings come from math/rand/v2's PCG " +
				"generator seeded with (seed, 0), drawn for the two groups sorted and in a canonical order: the same " +
				"contrast gives the same p whichever group is named first and in whatever order the values are listed. " +
				"An error when a group has fewer than 2 values or both variances are 0.",
			in: []duckdb.TypeInfo{tList, tList, tInteger, tBigint}, out: structOf("statistic", "DOUBLE", "pvalue", "DOUBLE"),
			fn: func(a []driver.Value) (any, error) {
				x, y, err := pair(a)
				if err != nil {
					return nil, err
				}
				r, err := compute.PermutationTestMean(x, y, int(a[2].(int32)), seeded(a[3].(int64)))
				if err != nil {
					return nil, err
				}
				return map[string]any{"statistic": r.Statistic, "pvalue": r.PValue}, nil
			},
		},
		{
			Name:      "curve_perm_test",
			Signature: "curve_perm_test(a DOUBLE[][], b DOUBLE[][], n_perm INTEGER, seed BIGINT) -> STRUCT(statistic DOUBLE, pvalue DOUBLE)",
			Doc: "Permutation test between two groups of curves on one grid (one list per subject): T = max over the " +
				"grid of |mean curve of a - mean curve of b|, subject labels permuted n_perm times (PCG seeded with " +
				"(seed, 0), drawn for the groups in a canonical order, so swapping a and b gives the same p); " +
				"p = (1 + #{T* >= T}) / (1 + n_perm).",
			in: []duckdb.TypeInfo{tListList, tListList, tInteger, tBigint}, out: structOf("statistic", "DOUBLE", "pvalue", "DOUBLE"),
			fn: func(a []driver.Value) (any, error) {
				x, err := curves("a", a[0])
				if err != nil {
					return nil, err
				}
				y, err := curves("b", a[1])
				if err != nil {
					return nil, err
				}
				r, err := compute.PermutationTestCurves(x, y, int(a[2].(int32)), seeded(a[3].(int64)))
				if err != nil {
					return nil, err
				}
				return map[string]any{"statistic": r.Statistic, "pvalue": r.PValue}, nil
			},
		},
		{
			Name:      "welch_t_test",
			Signature: "welch_t_test(a DOUBLE[], b DOUBLE[]) -> STRUCT(t DOUBLE, df DOUBLE, pvalue DOUBLE)",
			Doc: "Welch's t-test of mean(a) - mean(b): t, the Welch-Satterthwaite degrees of freedom and the " +
				"two-sided p-value. An error when a group has fewer than 2 values or both variances are 0.",
			in: []duckdb.TypeInfo{tList, tList}, out: structOf("t", "DOUBLE", "df", "DOUBLE", "pvalue", "DOUBLE"),
			fn: func(a []driver.Value) (any, error) {
				x, y, err := pair(a)
				if err != nil {
					return nil, err
				}
				r, err := compute.WelchTTest(x, y)
				if err != nil {
					return nil, err
				}
				return map[string]any{"t": r.T, "df": r.DF, "pvalue": r.PValue}, nil
			},
		},
		{
			Name:      "pearson_test",
			Signature: "pearson_test(x DOUBLE[], y DOUBLE[]) -> STRUCT(r DOUBLE, t DOUBLE, df DOUBLE, pvalue DOUBLE)",
			Doc: "Pearson's correlation of paired lists (x[i] and y[i] belong to one subject) with its t-test: " +
				"t = r sqrt((n-2)/(1-r^2)), df = n-2, two-sided p. An error when the lengths differ, an element is " +
				"NULL, n < 3 or a list is constant. Leave out incomplete pairs with one filter for both lists: " +
				"list(x ORDER BY id) FILTER (WHERE x IS NOT NULL AND y IS NOT NULL) and the same for y.",
			in: []duckdb.TypeInfo{tList, tList}, out: structOf("r", "DOUBLE", "t", "DOUBLE", "df", "DOUBLE", "pvalue", "DOUBLE"),
			fn: func(a []driver.Value) (any, error) {
				x, y, err := pairedDoubles(a[0], a[1])
				if err != nil {
					return nil, err
				}
				r, err := compute.CorrelationTest(x, y)
				if err != nil {
					return nil, err
				}
				return map[string]any{"r": r.R, "t": r.T, "df": r.DF, "pvalue": r.PValue}, nil
			},
		},
		{
			Name: "lm_test",
			Signature: "lm_test(y DOUBLE[], x DOUBLE[], covariates DOUBLE[][], factors VARCHAR[][], names VARCHAR[], ids VARCHAR[], n_perm INTEGER, seed BIGINT) " +
				"-> STRUCT(estimate DOUBLE, se DOUBLE, t DOUBLE, df DOUBLE, p DOUBLE, perm_p DOUBLE)",
			Doc: "Least-squares test of the term x in y = b0 + b1 x + covariates + factors + e, one list element per row " +
				"(subject): covariates[i] holds row i's numeric covariates and factors[i] its categorical ones (as text; " +
				"each coded as indicator columns, the first level in sorted order the reference; [] for none), names the " +
				"names of the covariates then of the factors, for messages ([] numbers them), ids[i] row i's subject. estimate is b1 (with x a 0/1 group indicator: the adjusted difference of group 1 minus group 0), " +
				"se its standard error, t = estimate/se on df = n - columns degrees of freedom, p the two-sided Student t " +
				"p-value, perm_p the Freedman-Lane (1983) permutation p-value (Winkler et al. 2014): the residuals of the " +
				"model without x are permuted n_perm times, added back to its fitted values and t recomputed; " +
				"perm_p = (1 + #{|t*| >= |t|}) / (1 + n_perm). Rows are sorted by id first and the permutations drawn " +
				"from PCG seeded with (seed, 0), so the result does not depend on the order of the subjects. Rows that " +
				"share an id (sessions of one subject) are permuted as whole blocks (whole-block exchangeability, blocks " +
				"of equal size), and p is then NULL: the t distribution assumes independent rows. An error for a " +
				"rank-deficient design (the message names the column), fewer than columns + 2 rows, lists of unequal " +
				"length or a NULL element.",
			in:  []duckdb.TypeInfo{tList, tList, tListList, tTextLL, tTextList, tTextList, tInteger, tBigint},
			out: structOf("estimate", "DOUBLE", "se", "DOUBLE", "t", "DOUBLE", "df", "DOUBLE", "p", "DOUBLE", "perm_p", "DOUBLE"),
			fn:  lmTest,
		},
		{
			Name:      "lm_design_problem",
			Signature: "lm_design_problem(x DOUBLE[], covariates DOUBLE[][], factors VARCHAR[][], names VARCHAR[]) -> VARCHAR",
			Doc: "Why lm_test would refuse this design, or NULL when it can be fitted: fewer rows than model columns + 2, " +
				"or a rank-deficient design (the message names the first dependent column). Arguments as in lm_test. " +
				"Lets a query leave out one test whose subjects cannot support the model (e.g. a level of a site " +
				"that only one group's visitors of a state have) instead of stopping.",
			in:  []duckdb.TypeInfo{tList, tListList, tTextLL, tTextList},
			out: tVarchar,
			fn:  lmDesignProblem,
		},
		{
			Name:      "graph_filtration_events",
			Signature: "graph_filtration_events(weights DOUBLE[], dimension BIGINT) -> DOUBLE[]",
			Doc: "The filtration events of a network given as its upper triangle (pairs i < j in row-major order, " +
				"p(p-1)/2 values): dimension 0 gives the p-1 maximum-spanning-tree weights (where beta0 steps), " +
				"dimension 1 the other edge weights (where beta1 steps), both ascending.",
			in: []duckdb.TypeInfo{tList, tBigint}, out: tList,
			fn: func(a []driver.Value) (any, error) {
				w, err := doubles("weights", a[0])
				if err != nil {
					return nil, err
				}
				dim := a[1].(int64)
				if dim != 0 && dim != 1 {
					return nil, fmt.Errorf("dimension %d: want 0 or 1", dim)
				}
				p := int(math.Round((1 + math.Sqrt(1+8*float64(len(w)))) / 2))
				if p < 2 || compute.PairCount(p) != len(w) {
					return nil, fmt.Errorf("%d weights is not p(p-1)/2 for any p >= 2", len(w))
				}
				f, err := compute.GraphFiltration(p, w)
				if err != nil {
					return nil, err
				}
				ev := f.Beta0Events
				if dim == 1 {
					ev = f.Beta1Events
				}
				out := make([]any, len(ev))
				for i, v := range ev {
					out[i] = v
				}
				return out, nil
			},
		},
	}
}

// lmTest is the adapter of lm_test.
func lmTest(a []driver.Value) (any, error) {
	y, err := doubles("y", a[0])
	if err != nil {
		return nil, err
	}
	x, covs, facs, err := lmDesign(a[1], a[2], a[3], a[4])
	if err != nil {
		return nil, err
	}
	ids, err := texts("ids", a[5])
	if err != nil {
		return nil, err
	}
	if n := len(x); len(y) != n || len(ids) != n {
		return nil, fmt.Errorf("y has %d values, x %d and ids %d: give one element per subject in each", len(y), n, len(ids))
	}
	r, err := compute.FreedmanLaneTest(y, x, covs, facs, ids, int(a[6].(int32)), seeded(a[7].(int64)))
	if err != nil {
		return nil, err
	}
	var p any = r.P
	if r.Blocked {
		p = nil
	}
	return map[string]any{"estimate": r.Estimate, "se": r.SE, "t": r.T, "df": float64(r.DF), "p": p, "perm_p": r.PermP}, nil
}

// lmDesignProblem is the adapter of lm_design_problem.
func lmDesignProblem(a []driver.Value) (any, error) {
	x, covs, facs, err := lmDesign(a[0], a[1], a[2], a[3])
	if err != nil {
		return nil, err
	}
	if err := compute.CheckTestDesign(x, covs, facs); err != nil {
		return strings.TrimPrefix(err.Error(), "compute: "), nil
	}
	return nil, nil
}

// lmDesign decodes the x, covariates, factors and names arguments of
// lm_test and lm_design_problem.
func lmDesign(xv, covv, facv, namesv driver.Value) (x []float64, covs []compute.Covariate, facs []compute.Factor, err error) {
	if x, err = doubles("x", xv); err != nil {
		return nil, nil, nil, err
	}
	n := len(x)
	covRows, err := curves("covariates", covv)
	if err != nil {
		return nil, nil, nil, err
	}
	facRows, err := textRows("factors", facv)
	if err != nil {
		return nil, nil, nil, err
	}
	names, err := texts("names", namesv)
	if err != nil {
		return nil, nil, nil, err
	}
	if len(covRows) != n || len(facRows) != n {
		return nil, nil, nil, fmt.Errorf("x has %d values, covariates %d rows and factors %d rows: give one element per subject in each",
			n, len(covRows), len(facRows))
	}
	if n > 0 {
		for j := range covRows[0] {
			covs = append(covs, compute.Covariate{Name: fmt.Sprintf("covariate %d", j+1), Values: make([]float64, n)})
		}
		for j := range facRows[0] {
			facs = append(facs, compute.Factor{Name: fmt.Sprintf("factor %d", j+1), Values: make([]string, n)})
		}
	}
	if len(names) > 0 {
		if len(names) != len(covs)+len(facs) {
			return nil, nil, nil, fmt.Errorf("names has %d elements for %d covariates and %d factors: give one name each, or []", len(names), len(covs), len(facs))
		}
		for j := range covs {
			covs[j].Name = names[j]
		}
		for j := range facs {
			facs[j].Name = names[len(covs)+j]
		}
	}
	for i := range n {
		if len(covRows[i]) != len(covs) || len(facRows[i]) != len(facs) {
			return nil, nil, nil, fmt.Errorf("row %d has %d covariates and %d factors, row 1 has %d and %d: every row needs the same", i+1,
				len(covRows[i]), len(facRows[i]), len(covs), len(facs))
		}
		for j, v := range covRows[i] {
			covs[j].Values[i] = v
		}
		for j, v := range facRows[i] {
			facs[j].Values[i] = v
		}
	}
	return x, covs, facs, nil
}

// texts converts a VARCHAR[] argument; a NULL element is an error.
func texts(arg string, v driver.Value) ([]string, error) {
	l, ok := v.([]any)
	if !ok {
		return nil, fmt.Errorf("argument %s: want VARCHAR[], got %T", arg, v)
	}
	out := make([]string, len(l))
	for i, x := range l {
		s, ok := x.(string)
		if !ok {
			if x == nil {
				return nil, fmt.Errorf("argument %s: element %d is NULL; leave out subjects with a missing value", arg, i+1)
			}
			return nil, fmt.Errorf("argument %s: element %d is %T, want VARCHAR", arg, i+1, x)
		}
		out[i] = s
	}
	return out, nil
}

// textRows converts a VARCHAR[][] argument.
func textRows(arg string, v driver.Value) ([][]string, error) {
	l, ok := v.([]any)
	if !ok {
		return nil, fmt.Errorf("argument %s: want VARCHAR[][], got %T", arg, v)
	}
	out := make([][]string, len(l))
	for i, x := range l {
		if x == nil {
			return nil, fmt.Errorf("argument %s: row %d is NULL", arg, i+1)
		}
		r, err := texts(fmt.Sprintf("%s[%d]", arg, i+1), x)
		if err != nil {
			return nil, err
		}
		out[i] = r
	}
	return out, nil
}

// seeded returns the generator the permutation functions document: PCG
// seeded with (seed, 0).
func seeded(seed int64) *rand.Rand { return rand.New(rand.NewPCG(uint64(seed), 0)) }

func checkSizes(m, n int64) error {
	if m < 1 || n < 1 {
		return fmt.Errorf("sample sizes must be >= 1, got m=%d n=%d", m, n)
	}
	if m > math.MaxInt32 || n > math.MaxInt32 {
		return fmt.Errorf("sample sizes m=%d n=%d are beyond 2^31", m, n)
	}
	return nil
}

// pairedDoubles converts the x and y lists of a paired function. A NULL in
// either is an error whose advice keeps the pairs together: filtering each
// list on its own NULLs would shift one list against the other.
func pairedDoubles(xv, yv driver.Value) (x, y []float64, err error) {
	lists := [2][]float64{}
	for k, v := range []driver.Value{xv, yv} {
		arg := [2]string{"x", "y"}[k]
		l, ok := v.([]any)
		if !ok {
			return nil, nil, fmt.Errorf("argument %s: want DOUBLE[], got %T", arg, v)
		}
		out := make([]float64, len(l))
		for i, e := range l {
			f, ok := e.(float64)
			if !ok {
				if e == nil {
					return nil, nil, fmt.Errorf("argument %s: element %d is NULL; leave out incomplete pairs with one filter on both lists, "+
						"list(x ORDER BY id) FILTER (WHERE x IS NOT NULL AND y IS NOT NULL) and the same for y "+
						"(filtering each list on its own NULLs breaks the pairing)", arg, i+1)
				}
				return nil, nil, fmt.Errorf("argument %s: element %d is %T, want DOUBLE", arg, i+1, e)
			}
			out[i] = f
		}
		lists[k] = out
	}
	if len(lists[0]) != len(lists[1]) {
		return nil, nil, fmt.Errorf("x has %d values and y %d: the lists must be paired, one element per subject in the same order", len(lists[0]), len(lists[1]))
	}
	return lists[0], lists[1], nil
}

// pair decodes the two DOUBLE[] arguments a and b that most functions take.
func pair(a []driver.Value) (x, y []float64, err error) {
	if x, err = doubles("a", a[0]); err != nil {
		return nil, nil, err
	}
	if y, err = doubles("b", a[1]); err != nil {
		return nil, nil, err
	}
	return x, y, nil
}

// doubles converts a DOUBLE[] argument. A NULL element is an error: dropping
// it silently would change the sample size.
func doubles(arg string, v driver.Value) ([]float64, error) {
	l, ok := v.([]any)
	if !ok {
		return nil, fmt.Errorf("argument %s: want DOUBLE[], got %T", arg, v)
	}
	out := make([]float64, len(l))
	for i, x := range l {
		f, ok := x.(float64)
		if !ok {
			if x == nil {
				return nil, fmt.Errorf("argument %s: element %d is NULL; leave NULLs out (list(x) FILTER (WHERE x IS NOT NULL))", arg, i+1)
			}
			return nil, fmt.Errorf("argument %s: element %d is %T, want DOUBLE", arg, i+1, x)
		}
		out[i] = f
	}
	return out, nil
}

// curves converts a DOUBLE[][] argument.
func curves(arg string, v driver.Value) ([][]float64, error) {
	l, ok := v.([]any)
	if !ok {
		return nil, fmt.Errorf("argument %s: want DOUBLE[][], got %T", arg, v)
	}
	out := make([][]float64, len(l))
	for i, x := range l {
		if x == nil {
			return nil, fmt.Errorf("argument %s: curve %d is NULL", arg, i+1)
		}
		c, err := doubles(fmt.Sprintf("%s[%d]", arg, i+1), x)
		if err != nil {
			return nil, err
		}
		out[i] = c
	}
	return out, nil
}

// Register adds every SQL function of Functions and the macros of fsys's
// MacrosFile to one connection. Registration is per connection: run every
// later statement on conn.
func Register(ctx context.Context, conn *sql.Conn, fsys fs.FS) error {
	for _, f := range Functions() {
		if err := duckdb.RegisterScalarUDF(conn, f.Name, f); err != nil {
			return fmt.Errorf("queries: register %s: %w", f.Name, err)
		}
	}
	macros, err := Macros(fsys)
	if err != nil {
		return err
	}
	if _, err := conn.ExecContext(ctx, macros); err != nil {
		return fmt.Errorf("queries: create macros: %w", err)
	}
	return nil
}
