package queries

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"sort"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/topostate/topostate/compute"
)

// choleskyOLS is the outside reference for lm_test: least squares by the
// normal equations X'X b = X'y with gonum's Cholesky factorisation (lm_test
// uses a Householder QR), se_j = sqrt(RSS/(n-p) [(X'X)^-1]_jj), t = b/se and
// the two-sided Student t p-value from gonum's distuv (the textbook
// formulas, e.g. Seber and Lee, Linear Regression Analysis, 2nd ed.).
func choleskyOLS(t *testing.T, x *mat.Dense, y []float64, j int) (b, se, tt, p float64) {
	t.Helper()
	n, k := x.Dims()
	var xtx mat.SymDense
	xtx.SymOuterK(1, x.T())
	var chol mat.Cholesky
	if !chol.Factorize(&xtx) {
		t.Fatal("X'X is not positive definite")
	}
	var xty, bv, fitted mat.VecDense
	xty.MulVec(x.T(), mat.NewVecDense(n, y))
	if err := chol.SolveVecTo(&bv, &xty); err != nil {
		t.Fatal(err)
	}
	var inv mat.SymDense
	if err := chol.InverseTo(&inv); err != nil {
		t.Fatal(err)
	}
	fitted.MulVec(x, &bv)
	var rss float64
	for i := range n {
		d := y[i] - fitted.AtVec(i)
		rss += d * d
	}
	b = bv.AtVec(j)
	se = math.Sqrt(rss / float64(n-k) * inv.At(j, j))
	tt = b / se
	p = 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(n - k)}.CDF(-math.Abs(tt))
	return b, se, tt, p
}

// designOf builds [1, x, numeric..., indicators of each factor's levels but
// the first in sorted order] row by row for the reference fit.
func designOf(x []float64, num [][]float64, fac [][]string) *mat.Dense {
	n := len(x)
	var cols [][]float64
	one := make([]float64, n)
	for i := range one {
		one[i] = 1
	}
	cols = append(cols, one, x)
	for j := 0; n > 0 && j < len(num[0]); j++ {
		c := make([]float64, n)
		for i := range n {
			c[i] = num[i][j]
		}
		cols = append(cols, c)
	}
	for j := 0; n > 0 && j < len(fac[0]); j++ {
		var levels []string
		for i := range n {
			levels = append(levels, fac[i][j])
		}
		sort.Strings(levels)
		levels = slices.Compact(levels)
		for _, lv := range levels[1:] {
			c := make([]float64, n)
			for i := range n {
				if fac[i][j] == lv {
					c[i] = 1
				}
			}
			cols = append(cols, c)
		}
	}
	d := mat.NewDense(n, len(cols), nil)
	for j, c := range cols {
		d.SetCol(j, c)
	}
	return d
}

func floatList(x []float64) string {
	s := make([]string, len(x))
	for i, v := range x {
		s[i] = fmt.Sprintf("%.17g::DOUBLE", v)
	}
	return "[" + strings.Join(s, ", ") + "]"
}

func textList(x []string) string {
	s := make([]string, len(x))
	for i, v := range x {
		s[i] = "'" + v + "'"
	}
	return "[" + strings.Join(s, ", ") + "]::VARCHAR[]"
}

func TestLMTestFunction(t *testing.T) {
	conn := memConn(t)
	ctx := context.Background()
	rng := rand.New(rand.NewPCG(21, 22))
	n := 26
	y, x := make([]float64, n), make([]float64, n)
	num, fac := make([][]float64, n), make([][]string, n)
	ids := make([]string, n)
	for i := range n {
		x[i] = float64(i % 2)
		age := 20 + 50*rng.Float64()
		num[i] = []float64{age, rng.NormFloat64()}
		fac[i] = []string{[]string{"F", "M"}[rng.IntN(2)], []string{"s1", "s2", "s3"}[rng.IntN(3)]}
		y[i] = 0.05*age + 0.7*x[i] + rng.NormFloat64()
		ids[i] = fmt.Sprintf("sub-%02d", i)
	}
	numL, facL := make([]string, n), make([]string, n)
	for i := range n {
		numL[i], facL[i] = floatList(num[i]), textList(fac[i])
	}
	call := func(order []int, idList []string) map[string]any {
		pick := func(v []string) string {
			out := make([]string, n)
			for k, i := range order {
				out[k] = v[i]
			}
			return "[" + strings.Join(out, ", ") + "]"
		}
		ys, xs := make([]string, n), make([]string, n)
		for i := range n {
			ys[i], xs[i] = fmt.Sprintf("%.17g", y[i]), fmt.Sprintf("%g", x[i])
		}
		idq := make([]string, n)
		for i := range n {
			idq[i] = "'" + idList[i] + "'"
		}
		q := fmt.Sprintf("SELECT lm_test(%s::DOUBLE[], %s::DOUBLE[], %s, %s, [], %s::VARCHAR[], 999, 3) AS r",
			pick(ys), pick(xs), pick(numL), pick(facL), pick(idq))
		rows, err := conn.QueryContext(ctx, "SELECT r.estimate, r.se, r.t, r.df, r.p, r.perm_p FROM ("+q+")")
		if err != nil {
			t.Fatal(err)
		}
		defer rows.Close()
		rows.Next()
		var e, se, tt, df, pp sql.NullFloat64
		var permP float64
		if err := rows.Scan(&e, &se, &tt, &df, &pp, &permP); err != nil {
			t.Fatal(err)
		}
		return map[string]any{"estimate": e.Float64, "se": se.Float64, "t": tt.Float64, "df": df.Float64, "p": pp, "perm_p": permP}
	}
	ident := make([]int, n)
	for i := range ident {
		ident[i] = i
	}
	got := call(ident, ids)
	b, se, tt, p := choleskyOLS(t, designOf(x, num, fac), y, 1)
	pp := got["p"].(sql.NullFloat64)
	if !close(got["estimate"].(float64), b, 1e-10) || !close(got["se"].(float64), se, 1e-10) ||
		!close(got["t"].(float64), tt, 1e-10) || !pp.Valid || !close(pp.Float64, p, 1e-9) || got["df"] != float64(n-7) {
		t.Errorf("lm_test %v; Cholesky estimate %v se %v t %v p %v df %d", got, b, se, tt, p, n-7)
	}
	// Another order of the subjects: the same permutation p-value.
	if again := call(rng.Perm(n), ids); again["perm_p"] != got["perm_p"] || !close(again["t"].(float64), tt, 1e-10) {
		t.Errorf("rows in another order: %v, was %v", again, got)
	}
	// Two rows per subject id: whole-block permutation, no parametric p.
	pairs := make([]string, n)
	for i := range pairs {
		pairs[i] = fmt.Sprintf("sub-%02d", i/2) // rows 2k and 2k+1 share an id
	}
	blocked := call(ident, pairs)
	if blocked["p"].(sql.NullFloat64).Valid || !close(blocked["t"].(float64), tt, 1e-10) {
		t.Errorf("blocked rows: %v; want p NULL and the same t %v", blocked, tt)
	}
	// lm_design_problem: NULL for a design lm_test fits, else its reason.
	var problem sql.NullString
	if err := conn.QueryRowContext(ctx, "SELECT lm_design_problem([0.0, 1, 0, 1, 0, 1], [[1.0], [3], [2], [5], [1], [3]], [[], [], [], [], [], []]::VARCHAR[][], ['age'])").Scan(&problem); err != nil || problem.Valid {
		t.Errorf("a fine design: %v %v", problem, err)
	}
	if err := conn.QueryRowContext(ctx, "SELECT lm_design_problem([0.0, 1, 0, 1, 0, 1], [[], [], [], [], [], []]::DOUBLE[][], [['x'], ['y'], ['x'], ['y'], ['x'], ['y']], ['arm'])").Scan(&problem); err != nil ||
		!strings.Contains(problem.String, `rank deficient: column "arm=y"`) {
		t.Errorf("a factor equal to x: %v %v", problem, err)
	}
	for _, c := range []struct{ q, want string }{
		{"SELECT lm_test([1.0, 2, 3, 4], [0.0, 1, 0, 1], [[1.0], [2], [3], [5]], [[], [], [], []]::VARCHAR[][], [], ['a','b','c','d'], 9, 1)", "4 rows for 3 model columns"},
		{"SELECT lm_test([1.0, 2, 3, 4, 5, 6], [0.0, 1, 0, 1, 0, 1], [[1.0], [3], [1], [3], [1], [3]], [[], [], [], [], [], []]::VARCHAR[][], [], ['a','b','c','d','e','f'], 9, 1)", `column "covariate 1" is constant or a linear combination of (intercept), (tested term)`},
		{"SELECT lm_test([1.0, 2, 3, 4, 5, 6], [0.0, 1, 0, 1, 0, 1], [[], [], [], [], [], []]::DOUBLE[][], [['x'], ['y'], ['x'], ['y'], ['x'], ['y']], ['arm'], ['a','b','c','d','e','f'], 9, 1)", `column "arm=y"`},
		{"SELECT lm_test([1.0, 2, 3, 4, 5, 6], [0.0, 1, 0, 1, 0, 1], [[], [], [], [], [], []]::DOUBLE[][], [['x'], ['y'], ['x'], ['y'], ['x'], ['y']], ['arm', 'age'], ['a','b','c','d','e','f'], 9, 1)", "names has 2 elements for 0 covariates and 1 factors"},
		{"SELECT lm_test([1.0, 2, 3, NULL], [0.0, 1, 0, 1], [[], [], [], []]::DOUBLE[][], [[], [], [], []]::VARCHAR[][], [], ['a','b','c','d'], 9, 1)", "argument y: element 4 is NULL"},
		{"SELECT lm_test([1.0, 2, 3, 4, 5, 6], [0.0, 1, 0, 1, 0, 1], [[1.0], [3], [1], [3], [1]], [[], [], [], [], [], []]::VARCHAR[][], [], ['a','b','c','d','e','f'], 9, 1)", "covariates 5 rows"},
		{"SELECT lm_test([1.0, 2, 3, 4, 5, 6], [0.0, 1, 0, 1, 0, 1], [[1.0], [3], [1], [3, 4], [1], [3]], [[], [], [], [], [], []]::VARCHAR[][], [], ['a','b','c','d','e','f'], 9, 1)", "row 4 has 2 covariates"},
		{"SELECT lm_test([1.0, 2, 3, 4, 5, 6, 7], [0.0, 1, 0, 1, 0, 1, 0], [[], [], [], [], [], [], []]::DOUBLE[][], [[], [], [], [], [], [], []]::VARCHAR[][], [], ['a','a','b','b','c','c','c'], 9, 1)", "whole-block permutation needs blocks of equal size"},
	} {
		var v any
		err := conn.QueryRowContext(ctx, c.q).Scan(&v)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: %v, want an error containing %q", c.q, err, c.want)
		}
	}
}

// subjectData reads what adjusted_group_contrast models, from plain
// SELECTs of the raw tables: per subject (sessions averaged) occupancy,
// dwell, switch rate and the trapezoid area under the Betti-0 curve.
type lmKey struct {
	measure string
	state   int // 0 for switch_rate
}

func rawConn(t *testing.T, conn *sql.Conn, q string, args ...any) []map[string]any {
	t.Helper()
	rows, err := conn.QueryContext(context.Background(), q, args...)
	if err != nil {
		t.Fatal(err)
	}
	return readAll(t, rows)
}

func outcomesOf(t *testing.T, conn *sql.Conn, id int) map[lmKey]map[string]float64 {
	out := map[lmKey]map[string]float64{}
	type acc struct{ sum, n float64 }
	sums := map[lmKey]map[string]*acc{}
	add := func(k lmKey, sub string, v float64) {
		if sums[k] == nil {
			sums[k] = map[string]*acc{}
		}
		if sums[k][sub] == nil {
			sums[k][sub] = &acc{}
		}
		sums[k][sub].sum += v
		sums[k][sub].n++
	}
	for _, r := range rawConn(t, conn, `SELECT subject_id, state, occupancy, mean_dwell_seconds FROM state_metrics WHERE analysis_id = ?`, id) {
		sub, st := r["subject_id"].(string), int(num(r["state"]))
		add(lmKey{"occupancy", st}, sub, num(r["occupancy"]))
		if r["mean_dwell_seconds"] != nil {
			add(lmKey{"dwell_seconds", st}, sub, num(r["mean_dwell_seconds"]))
		}
	}
	for _, r := range rawConn(t, conn, `SELECT subject_id, switch_rate FROM subject_dynamics WHERE analysis_id = ?`, id) {
		add(lmKey{"switch_rate", 0}, r["subject_id"].(string), num(r["switch_rate"]))
	}
	type ck struct {
		sub   string
		state int
	}
	curves := map[ck]map[float64]*acc{}
	for _, r := range rawConn(t, conn, `SELECT subject_id, state, threshold, betti FROM betti_curves WHERE analysis_id = ? AND dimension = 0`, id) {
		k := ck{r["subject_id"].(string), int(num(r["state"]))}
		if curves[k] == nil {
			curves[k] = map[float64]*acc{}
		}
		th := num(r["threshold"])
		if curves[k][th] == nil {
			curves[k][th] = &acc{}
		}
		curves[k][th].sum += num(r["betti"])
		curves[k][th].n++
	}
	for k, c := range curves {
		var th []float64
		for x := range c {
			th = append(th, x)
		}
		sort.Float64s(th)
		var area float64
		for i := 1; i < len(th); i++ {
			area += (th[i] - th[i-1]) * (c[th[i]].sum/c[th[i]].n + c[th[i-1]].sum/c[th[i-1]].n) / 2
		}
		add(lmKey{"betti0_area", k.state}, k.sub, area)
	}
	for k, m := range sums {
		out[k] = map[string]float64{}
		for sub, a := range m {
			out[k][sub] = a.sum / a.n
		}
	}
	return out
}

// TestAdjustedGroupContrast recomputes every row of adjusted_group_contrast
// in Go: the outcomes from raw rows, the fit by the normal equations
// (choleskyOLS), perm_p by compute.FreedmanLaneTest with the documented
// seed, BH by compute.BenjaminiHochberg. A text column "site" is added to a
// copy of the warehouse so that a factor is adjusted for.
func TestAdjustedGroupContrast(t *testing.T) {
	conn := openWritableCopy(t)
	ctx := context.Background()
	if _, err := conn.ExecContext(ctx, `ALTER TABLE subjects ADD COLUMN site VARCHAR;
		UPDATE subjects SET site = ['north', 'east', 'west'][1 + (hash(subject_id) % 3)::BIGINT]`); err != nil {
		t.Fatal(err)
	}
	q, err := Lookup(FS, "adjusted_group_contrast")
	if err != nil {
		t.Fatal(err)
	}
	params := map[string]string{"analysis": "first", "group_a": "night", "group_b": "day", "adjust": "AGE, site", "n_perm": "499", "seed": "5"}
	rows, err := Run(ctx, conn, q, params)
	if err != nil {
		t.Fatal(err)
	}
	got := readAll(t, rows)
	group, age, site := map[string]float64{}, map[string]float64{}, map[string]string{}
	incomplete := 0
	for _, r := range rawConn(t, conn, `SELECT subject_id, "group", age, site FROM subjects WHERE analysis_id = ?`, firstID) {
		sub := r["subject_id"].(string)
		g := r["group"].(string)
		if g != "night" && g != "day" {
			continue
		}
		if r["age"] == nil {
			incomplete++
			continue
		}
		group[sub] = map[string]float64{"night": 1, "day": 0}[g]
		age[sub], site[sub] = num(r["age"]), r["site"].(string)
	}
	if incomplete != 1 {
		t.Fatalf("the test warehouse should have one subject without age, has %d", incomplete)
	}
	outcomes := outcomesOf(t, conn, firstID)
	measureNo := map[string]int{"occupancy": 1, "dwell_seconds": 2, "switch_rate": 3, "betti0_area": 4}
	if len(got) != 3+3+1+3 {
		t.Fatalf("%d rows, want 10", len(got))
	}
	var ps, perms []float64
	for _, r := range got {
		st := 0
		if r["state"] != nil {
			st = int(num(r["state"]))
		}
		k := lmKey{r["measure"].(string), st}
		var subs []string
		for sub := range outcomes[k] {
			if _, ok := group[sub]; ok {
				subs = append(subs, sub)
			}
		}
		sort.Strings(subs)
		n := len(subs)
		y, x := make([]float64, n), make([]float64, n)
		numv, facv := make([][]float64, n), make([][]string, n)
		ages, sites := make([]float64, n), make([]string, n)
		na := 0
		for i, sub := range subs {
			y[i], x[i] = outcomes[k][sub], group[sub]
			numv[i], facv[i] = []float64{age[sub]}, []string{site[sub]}
			ages[i], sites[i] = age[sub], site[sub]
			na += int(x[i])
		}
		covs := []compute.Covariate{{Name: "age", Values: ages}}
		cols := 5
		nPerm := 499
		if k.measure == "betti0_area" {
			nPerm = 1
		}
		b, se, tt, p := choleskyOLS(t, designOf(x, numv, facv), y, 1)
		fl, err := compute.FreedmanLaneTest(y, x, covs, []compute.Factor{{Name: "site", Values: sites}},
			subs, nPerm, rand.New(rand.NewPCG(uint64(5+100*measureNo[k.measure]+st), 0)))
		if err != nil {
			t.Fatal(err)
		}
		if int(num(r["n_a"])) != na || int(num(r["n_b"])) != n-na || int(num(r["n_incomplete"])) != incomplete ||
			r["adjusted_for"] != "age,site" || int(num(r["df"])) != n-cols {
			t.Errorf("%v: n_a %v n_b %v n_incomplete %v adjusted_for %v df %v; Go %d %d %d age,site %d",
				k, r["n_a"], r["n_b"], r["n_incomplete"], r["adjusted_for"], r["df"], na, n-na, incomplete, n-cols)
		}
		if !close(num(r["estimate"]), b, 1e-10) || !close(num(r["se"]), se, 1e-10) || !close(num(r["t"]), tt, 1e-10) {
			t.Errorf("%v: estimate %v se %v t %v; Go %v %v %v", k, r["estimate"], r["se"], r["t"], b, se, tt)
		}
		// betti0_area is descriptive: no p-value, a note saying why.
		if k.measure == "betti0_area" {
			if r["p"] != nil || r["perm_p"] != nil || r["p_bh"] != nil || r["perm_p_bh"] != nil ||
				!strings.HasPrefix(fmt.Sprint(r["note"]), "descriptive:") {
				t.Errorf("%v: p %v perm_p %v p_bh %v perm_p_bh %v note %v; want no p-values and a descriptive note", k, r["p"], r["perm_p"], r["p_bh"], r["perm_p_bh"], r["note"])
			}
			continue
		}
		if !close(num(r["p"]), p, 1e-9) || num(r["perm_p"]) != fl.PermP || r["note"] != nil {
			t.Errorf("%v: p %v perm_p %v note %v; Go %v %v", k, r["p"], r["perm_p"], r["note"], p, fl.PermP)
		}
		ps, perms = append(ps, p), append(perms, fl.PermP)
	}
	// BH across the 7 tested rows (occupancy, dwell, switch rate).
	bh, bhPerm := compute.BenjaminiHochberg(ps), compute.BenjaminiHochberg(perms)
	for i, r := range got[:len(ps)] {
		if !close(num(r["p_bh"]), bh[i], 1e-9) || !close(num(r["perm_p_bh"]), bhPerm[i], 1e-9) {
			t.Errorf("row %d: p_bh %v perm_p_bh %v; Go %v %v", i, r["p_bh"], r["perm_p_bh"], bh[i], bhPerm[i])
		}
	}
	// A covariate constant among the subjects: every row refused, so the
	// query stops, naming the column.
	if _, err := conn.ExecContext(ctx, `ALTER TABLE subjects ADD COLUMN flat DOUBLE; UPDATE subjects SET flat = 2`); err != nil {
		t.Fatal(err)
	}
	if _, err := Run(ctx, conn, q, map[string]string{"analysis": "first", "group_a": "night", "group_b": "day", "adjust": "age,flat", "n_perm": "9"}); err == nil ||
		!strings.Contains(err.Error(), `no test can be run: linear model: the design is rank deficient: column "flat" is constant`) {
		t.Errorf("a constant covariate: %v", err)
	}
	// Without covariates the estimate is the difference of group means.
	rows, err = Run(ctx, conn, q, map[string]string{"analysis": "first", "group_a": "night", "group_b": "day", "n_perm": "99"})
	if err != nil {
		t.Fatal(err)
	}
	plain := readAll(t, rows)
	if len(plain) != 10 || plain[0]["adjusted_for"] != "" || num(plain[0]["n_incomplete"]) != 0 {
		t.Fatalf("no covariates: %d rows, first %v", len(plain), plain[0])
	}
}

func TestAdjustedGroupContrastRefusals(t *testing.T) {
	d := openWarehouse(t)
	ctx := context.Background()
	q, _ := Lookup(FS, "adjusted_group_contrast")
	// Groups that match no subject: stopped with the reason, not an
	// empty table.
	if _, err := Run(ctx, d.Conn, q, map[string]string{"group_a": "night", "group_b": "dusk", "n_perm": "9"}); err == nil ||
		!strings.Contains(err.Error(), "no test can be run: fewer than 2 subjects in a group") {
		t.Errorf("group_b matching nobody: %v", err)
	}
	for _, c := range []struct {
		adjust, want string
	}{
		{"age,sex", `no column "sex"; its covariates are: group, age, sleep hours`},
		{"age,Age", `column "age" is listed twice`},
		{"age,group", "adjust lists the group column group, which is the tested term"},
	} {
		_, err := Run(ctx, d.Conn, q, map[string]string{"group_a": "night", "group_b": "day", "adjust": c.adjust, "n_perm": "9"})
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("adjust=%s: %v, want an error containing %q", c.adjust, err, c.want)
		}
	}
}
