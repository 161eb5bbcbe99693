package main

import (
	"bytes"
	"context"
	"database/sql"
	"math"
	"math/big"
	"math/rand/v2"
	"reflect"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/queries"
)

// binomCDFExact is P(X <= k) for X ~ Binomial(n, 1/20) summed exactly in
// rationals from the definition, sum_{i<=k} C(n, i) p^i (1-p)^(n-i) (any
// probability text, e.g. Feller, An Introduction to Probability Theory and
// Its Applications, vol. 1, ch. VI; from memory): a check of the gonum CDF
// that Upper95 and TailLimit use, independent of it.
func binomCDFExact(n, k int) *big.Rat {
	p, q := big.NewRat(1, 20), big.NewRat(19, 20)
	sum := new(big.Rat)
	for i := 0; i <= k; i++ {
		t := new(big.Rat).SetInt(new(big.Int).Binomial(int64(n), int64(i)))
		for j := 0; j < i; j++ {
			t.Mul(t, p)
		}
		for j := 0; j < n-i; j++ {
			t.Mul(t, q)
		}
		sum.Add(sum, t)
	}
	return sum
}

func TestBounds(t *testing.T) {
	for _, n := range []int{20, 24, 36, 200} {
		b := Upper95(n, 0.05)
		// b is the smallest k with P(X <= k) >= 0.95.
		if binomCDFExact(n, b).Cmp(big.NewRat(95, 100)) < 0 || (b > 0 && binomCDFExact(n, b-1).Cmp(big.NewRat(95, 100)) >= 0) {
			t.Errorf("Upper95(%d) = %d is not the exact 95 %% quantile", n, b)
		}
		l := TailLimit(n, 0.05, 1e-4)
		// l is the smallest k with P(X >= k) = 1 - P(X <= k-1) < 1e-4.
		tail := func(k int) *big.Rat { return new(big.Rat).Sub(big.NewRat(1, 1), binomCDFExact(n, k-1)) }
		if tail(l).Cmp(big.NewRat(1, 10000)) >= 0 || tail(l-1).Cmp(big.NewRat(1, 10000)) < 0 {
			t.Errorf("TailLimit(%d) = %d is not the exact 1e-4 tail limit", n, l)
		}
		t.Logf("n %d: 95 %% bound %d, 1e-4 tail limit %d", n, b, l)
	}
	// The anti-conservative rates of issue 11 must be caught by the loose
	// limit of the default test.
	if TailLimit(24, 0.05, 1e-4) > 11 || TailLimit(36, 0.05, 1e-4) > 21 {
		t.Error("the tail limit would not catch 11/24 or 21/36")
	}
}

// smallConfig is the harness at a size the default test command affords:
// tiny cohorts (12 subjects x 200 time points x 10 regions, window 20) and
// 24 replicates per null kind.
func smallConfig() Config {
	return Config{
		Replicates: 24, Nulls: []string{NullNone, NullDwell, NullOne},
		Subjects: 12, Regions: 10, Timepoints: 200, States: 3,
		Stickiness: 0.95, GroupEffect: 0.03,
		Window: 20, FitStates: 3, Restarts: 1, Grid: "-1:1:41",
		NPerm: 199, Seed: 7, Parallel: 2,
	}
}

// TestCalibrationSmall runs the harness on every bundled group query and
// fails when a p column rejects a true null so often that a test at level
// 0.05 would do so with probability below 1e-4 (TailLimit): loose enough
// not to flake, tight enough to catch the rates of issue 11 (11/24, 21/36).
// The full run with 200 replicates is `go run ./scripts/calibrate`
// (README, "Calibration").
func TestCalibrationSmall(t *testing.T) {
	if testing.Short() {
		t.Skip("the calibration harness runs 72 ingests")
	}
	cfg := smallConfig()
	res, err := Run(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	var b strings.Builder
	res.WriteTable(&b, cfg.Nulls, 0.05)
	t.Log("\n" + b.String())
	if len(res.Tallies) == 0 {
		t.Fatal("no p column was counted")
	}
	for _, s := range res.Skipped {
		t.Logf("not run: %s", s)
	}
	// The Betti-0 area of adjusted_group_contrast is descriptive: its p
	// columns are NULL, so no row of it may be counted.
	for k := range res.Tallies {
		if strings.Contains(k.Row, "betti0_area") {
			t.Errorf("%s %s (%s) under %s: a p-value of the descriptive Betti-0 area was counted", k.Query, k.Column, k.Row, NullNames[k.Null])
		}
	}
	// A NULL key column is written with its label, never Go's <nil>:
	// adjusted_group_contrast's switch rate (state NULL) is one test over
	// all states under every null kind.
	for k := range res.Tallies {
		if strings.Contains(k.Row, "<nil>") {
			t.Errorf("%s %s under %s: row key %q shows a NULL as <nil>", k.Query, k.Column, NullNames[k.Null], k.Row)
		}
	}
	for _, n := range cfg.Nulls {
		if res.Tallies[Key{n, "adjusted_group_contrast", "p", "measure switch_rate, all states"}] == nil {
			t.Errorf("adjusted_group_contrast p: no row \"measure switch_rate, all states\" under %s", NullNames[n])
		}
	}
	// Every p column of these queries (those the report and the demo
	// show) must have been counted on some row under every null kind.
	for q, cols := range map[string][]string{
		"state_dwell_by_group":      {"welch_p", "perm_p"},
		"filtration_tests_by_group": {"curve_perm_p"},
		"adjusted_group_contrast":   {"p", "perm_p"},
		"covariate_association":     {"p"},
	} {
		for _, c := range cols {
			for _, n := range cfg.Nulls {
				tests := 0
				for k, tl := range res.Tallies {
					if k.Null == n && k.Query == q && k.Column == c {
						tests += tl.Tests
					}
				}
				if tests == 0 {
					t.Errorf("%s %s: no p-value counted under %s", q, c, NullNames[n])
				}
			}
		}
	}
	for _, k := range res.Keys() {
		c := res.Tallies[k]
		if !IsNull(k) {
			continue
		}
		if lim := TailLimit(c.Tests, 0.05, 1e-4); c.Rejections >= lim {
			t.Errorf("%s %s (%s) under %s: %d of %d p-values below 0.05 (P < 1e-4 at the nominal rate; limit %d)",
				k.Query, k.Column, k.Row, NullNames[k.Null], c.Rejections, c.Tests, lim)
		}
	}
}

// TestEveryQueryCounted: each bundled query is run by the harness (every
// required parameter has a calibration value) or excluded with a reason,
// and each exclusion names a bundled query; adjusted_group_contrast is
// run with the null covariates and covariate_association with age.
func TestEveryQueryCounted(t *testing.T) {
	cfg := smallConfig()
	counted, err := countedQueries(cfg)
	if err != nil {
		t.Fatal(err)
	}
	all, err := queries.List(queries.FS)
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, q := range counted {
		names = append(names, q.Name)
	}
	for _, q := range all {
		_, excluded := Excluded[q.Name]
		if excluded == slices.Contains(names, q.Name) {
			t.Errorf("bundled query %s: counted %v, excluded %v (want exactly one)", q.Name, !excluded, excluded)
		}
	}
	for name := range Excluded {
		if _, err := queries.Lookup(queries.FS, name); err != nil {
			t.Errorf("Excluded names %s, which is no bundled query: %v", name, err)
		}
	}
	for _, q := range counted {
		v, _ := paramValues(q, cfg, 3)
		switch q.Name {
		case "adjusted_group_contrast":
			if v["adjust"] != AdjustFor {
				t.Errorf("adjusted_group_contrast runs with adjust=%q, want %q", v["adjust"], AdjustFor)
			}
		case "covariate_association":
			if v["covariate"] != NullCovariate {
				t.Errorf("covariate_association runs with covariate=%q", v["covariate"])
			}
		}
	}
}

// TestNullCovariates: the sex column has both levels, in equal numbers, in
// each group (so that adjusting for it is never rank-deficient), and age
// lies in 20..69; the same seed gives the same cells.
func TestNullCovariates(t *testing.T) {
	subs, err := compute.SimulateCohort(compute.CohortSpec{Subjects: 10, Regions: 3, Timepoints: 20, States: 2, Seed: 5})
	if err != nil {
		t.Fatal(err)
	}
	cov := nullCovariates(subs, 9)
	count := map[string]int{}
	for i, s := range subs {
		count[s.Group+cov[i][1]]++
		if a := cov[i][0]; len(a) != 2 || a < "20" || a > "69" {
			t.Errorf("age %q outside 20..69", a)
		}
	}
	if count["AF"] == 0 || count["AM"] == 0 || count["BF"] == 0 || count["BM"] == 0 ||
		count["AF"]-count["AM"] > 1 || count["BF"]-count["BM"] > 1 {
		t.Errorf("sex per group: %v", count)
	}
	if !reflect.DeepEqual(cov, nullCovariates(subs, 9)) {
		t.Error("nullCovariates is not reproducible")
	}
}

// TestMoments: mean and standard error of the mean against gonum's
// stat.Mean and stat.StdDev (sample SD, n - 1) divided by sqrt(n).
func TestMoments(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	x := make([]float64, 57)
	var m Moments
	for i := range x {
		x[i] = 3 + 2*r.NormFloat64()
		m.Add(x[i])
	}
	mean, se, z := m.Mean()
	wm, wse := stat.Mean(x, nil), stat.StdDev(x, nil)/math.Sqrt(float64(len(x)))
	if math.Abs(mean-wm) > 1e-12 || math.Abs(se-wse) > 1e-12 || math.Abs(z-wm/wse) > 1e-9 {
		t.Errorf("Moments: %v %v %v, gonum %v %v", mean, se, z, wm, wse)
	}
}

// TestSaveLoad: a result written with Save and read with Load prints the
// same tables.
func TestSaveLoad(t *testing.T) {
	r := &Result{
		Tallies:     map[Key]*Tally{{NullNone, "q", "p", "state 1"}: {3, 20}, {NullDwell, "q", "p", "measure dwell, state 1"}: {9, 20}},
		Differences: map[Key]*Moments{{NullNone, "q", "difference", "state 1"}: {N: 3, Sum: 0.3, SumSq: 0.05}},
		Latent:      map[Key]*Tally{{NullNone, "latent", "welch_p", "latent occupancy, rank 1"}: {1, 20}},
		LatentDiff:  map[Key]*Moments{{NullNone, "latent", "difference", "latent occupancy, rank 1"}: {N: 2, Sum: 0.1, SumSq: 0.01}},
		PColumns:    map[string][]string{"q": {"p"}, "r": {}},
		Skipped:     []string{"s: why"},
	}
	var buf bytes.Buffer
	if err := r.Save(&buf); err != nil {
		t.Fatal(err)
	}
	back, err := Load(&buf)
	if err != nil {
		t.Fatal(err)
	}
	print := func(r *Result) string {
		var b strings.Builder
		r.WriteTable(&b, []string{NullNone, NullDwell}, 0.05)
		r.WriteCoverage(&b)
		r.WriteDiagnostics(&b, []string{NullNone, NullDwell}, 0.05)
		return b.String()
	}
	if a, b := print(r), print(back); a != b {
		t.Errorf("tables differ after Save and Load:\n%s\n---\n%s", a, b)
	}
}

// TestKeyPartNull: tally writes a NULL key column as the column's label
// (every key column has one, and no two share one) and a value as
// "column value", on rows of DuckDB itself; a result saved with Go's
// "<nil>" reads back with the labels. The expected keys are written out
// by hand from the labels of nullKeyLabels.
func TestKeyPartNull(t *testing.T) {
	seen := map[string]string{}
	for _, c := range keyColumns {
		l, ok := nullKeyLabels[c]
		if !ok || l == "" {
			t.Errorf("key column %s has no NULL label", c)
		}
		if o, dup := seen[l]; dup {
			t.Errorf("key columns %s and %s share the NULL label %q", o, c, l)
		}
		seen[l] = c
	}
	db, err := sql.Open("duckdb", "")
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	for _, c := range []struct {
		query string
		want  []string
	}{
		{`SELECT * FROM (VALUES ('occupancy', 1, 0.01::DOUBLE), ('switch_rate', NULL, 0.2::DOUBLE)) t(measure, state, p)`,
			[]string{"measure occupancy, state 1", "measure switch_rate, all states"}},
		{`SELECT * FROM (VALUES (NULL, 0, 0.5::DOUBLE), (2, NULL, 0.5::DOUBLE)) t(state, dimension, curve_perm_p)`,
			[]string{"all states, dimension 0", "state 2, all dimensions"}},
		{`SELECT * FROM (VALUES (NULL, 3, 0.5::DOUBLE), (1, NULL, 0.5::DOUBLE)) t(from_state, to_state, perm_p)`,
			[]string{"from any state, to_state 3", "from_state 1, to any state"}},
		{`SELECT * FROM (VALUES (NULL, 3, 0.5::DOUBLE), (1, NULL, 0.5::DOUBLE)) t(state_a, state_b, p)`,
			[]string{"any state_a, state_b 3", "state_a 1, any state_b"}},
		{`SELECT * FROM (VALUES (NULL, 'age', 'x', 0.5::DOUBLE)) t(measure, term, feature, p)`,
			[]string{"all measures, term age, feature x"}},
		{`SELECT * FROM (VALUES ('m', NULL, NULL, 0.5::DOUBLE)) t(measure, term, feature, p)`,
			[]string{"measure m, all terms, all features"}},
	} {
		rs, err := db.Query(c.query)
		if err != nil {
			t.Fatal(err)
		}
		out := &Result{Tallies: map[Key]*Tally{}, Differences: map[Key]*Moments{}, PColumns: map[string][]string{}}
		if err := tally(rs, NullNone, "q", 0.05, out); err != nil {
			t.Fatal(err)
		}
		var got []string
		for k := range out.Tallies {
			got = append(got, k.Row)
		}
		slices.Sort(got)
		if !slices.Equal(got, c.want) {
			t.Errorf("%s: row keys %q, want %q", c.query, got, c.want)
		}
	}
	old := `{"Records": [{"Null": "b", "Query": "adjusted_group_contrast", "Column": "p", "Row": "measure switch_rate, state <nil>", "Rejections": 3, "Tests": 20, "Kind": "test"}]}`
	r, err := Load(strings.NewReader(old))
	if err != nil {
		t.Fatal(err)
	}
	want := Key{NullDwell, "adjusted_group_contrast", "p", "measure switch_rate, all states"}
	if got := r.Tallies[want]; got == nil || *got != (Tally{3, 20}) {
		t.Errorf("Load of a key with <nil>: tallies %v, want %v: {3 20}", r.Tallies, want)
	}
}

// TestIsNull: under (b) the group contrasts of dwell, switch rate and the
// occupancy of ranked states are power, the curve test is a null, and associations with the
// null covariate are nulls whatever they measure.
func TestIsNull(t *testing.T) {
	for _, c := range []struct {
		k    Key
		want bool
	}{
		{Key{NullDwell, "state_dwell_by_group", "perm_p", "measure dwell_seconds, state 1"}, false},
		{Key{NullDwell, "adjusted_group_contrast", "p", "measure switch_rate, all states"}, false},
		{Key{NullDwell, "state_dwell_by_group", "perm_p", "measure occupancy, state 1"}, false},
		{Key{NullNone, "state_dwell_by_group", "perm_p", "measure occupancy, state 1"}, true},
		{Key{NullOne, "adjusted_group_contrast", "perm_p", "measure occupancy, state 3"}, true},
		{Key{NullDwell, "filtration_tests_by_group", "curve_perm_p", "state 1, dimension 0"}, true},
		{Key{NullDwell, "covariate_association", "p", "measure dwell_seconds, state 2"}, true},
		{Key{NullNone, "state_dwell_by_group", "perm_p", "measure dwell_seconds, state 1"}, true},
		{Key{Power, "filtration_tests_by_group", "curve_perm_p", "state 1, dimension 0"}, false},
	} {
		if got := IsNull(c.k); got != c.want {
			t.Errorf("IsNull(%v) = %v, want %v", c.k, got, c.want)
		}
	}
}
