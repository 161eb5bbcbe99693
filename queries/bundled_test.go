package queries

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"sort"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/schema"
)

// Every check in this file recomputes a bundled query's result in Go from
// plain SELECTs of the raw tables (no SQL aggregation), with gonum for
// means, standard deviations, correlations and the t distribution, and
// compute for the tests the SQL functions wrap; the permutation p-values
// are also checked against full enumeration of the relabellings.

const firstID = 1 // analysis "first"

func groupsOf(t *testing.T, d *DB, id int) map[string]string {
	g := map[string]string{}
	for _, r := range raw(t, d, `SELECT subject_id, "group" FROM subjects WHERE analysis_id = ?`, id) {
		g[r["subject_id"].(string)] = r["group"].(string)
	}
	return g
}

func close(a, b, tol float64) bool {
	if math.IsNaN(a) || math.IsNaN(b) {
		return math.IsNaN(a) && math.IsNaN(b)
	}
	return math.Abs(a-b) <= tol*math.Max(1, math.Abs(b))
}

func nullable(v any) float64 {
	if v == nil {
		return math.NaN()
	}
	return num(v)
}

// welchRef is Welch's test coded from its formula with gonum's moments and
// Student t CDF.
func welchRef(a, b []float64) (t, df, p float64) {
	ma, va := stat.MeanVariance(a, nil)
	mb, vb := stat.MeanVariance(b, nil)
	ea, eb := va/float64(len(a)), vb/float64(len(b))
	t = (ma - mb) / math.Sqrt(ea+eb)
	df = (ea + eb) * (ea + eb) / (ea*ea/float64(len(a)-1) + eb*eb/float64(len(b)-1))
	return t, df, 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: df}.CDF(-math.Abs(t))
}

// exactPermP enumerates every split of the pooled values into groups of
// len(a) and len(b) and returns the exact two-sided permutation p-value
// P(|T*| >= |T|) of Welch's t (the studentised statistic).
func exactPermP(a, b []float64) float64 {
	// perm_test_mean is studentised: its statistic is Welch's t (welchRef),
	// so the exact distribution enumerates Welch's t over every split.
	pooled := append(slices.Clone(a), b...)
	n, m := len(pooled), len(a)
	obsT, _, _ := welchRef(a, b)
	obs := math.Abs(obsT) * (1 - 1e-9)
	var hit, all int
	pick := make([]bool, n)
	var rec func(start, left int)
	rec = func(start, left int) {
		if left == 0 {
			all++
			ga := make([]float64, 0, m)
			gb := make([]float64, 0, n-m)
			for i, x := range pooled {
				if pick[i] {
					ga = append(ga, x)
				} else {
					gb = append(gb, x)
				}
			}
			if t, _, _ := welchRef(ga, gb); math.Abs(t) >= obs {
				hit++
			}
			return
		}
		for i := start; i <= n-left; i++ {
			pick[i] = true
			rec(i+1, left-1)
			pick[i] = false
		}
	}
	rec(0, m)
	return float64(hit) / float64(all)
}

func TestStateDwellByGroup(t *testing.T) {
	d := openWarehouse(t)
	got := runBundled(t, d, "state_dwell_by_group", map[string]string{
		"analysis": "first", "group_a": "night", "group_b": "day", "n_perm": "4999", "seed": "3"})
	groups := groupsOf(t, d, firstID)
	type key struct {
		state   int
		measure string
	}
	samples := map[key][2][]float64{}
	// Dwell time: complete runs only (docs/methods.md §4); subjects with no
	// visit, or only runs cut by the scan's edges, are left out and counted.
	noVisit := map[int][2]int{}
	censoredOnly := map[int][2]int{}
	metrics := raw(t, d, `SELECT subject_id, state, occupancy, complete_dwell_seconds FROM state_metrics WHERE analysis_id = ? ORDER BY subject_id`, firstID)
	for _, r := range metrics {
		side := map[string]int{"night": 0, "day": 1}
		s, ok := side[groups[r["subject_id"].(string)]]
		if !ok {
			continue // the pilot subject
		}
		st := int(num(r["state"]))
		k := key{st, "occupancy"}
		v := samples[k]
		v[s] = append(v[s], num(r["occupancy"]))
		samples[k] = v
		k = key{st, "dwell_seconds"}
		v = samples[k]
		switch {
		case r["complete_dwell_seconds"] != nil:
			v[s] = append(v[s], num(r["complete_dwell_seconds"]))
		case num(r["occupancy"]) == 0:
			c := noVisit[st]
			c[s]++
			noVisit[st] = c
		default:
			c := censoredOnly[st]
			c[s]++
			censoredOnly[st] = c
		}
		samples[k] = v
	}
	if len(got) != len(samples) || len(got) != 6 {
		t.Fatalf("%d rows, want %d (3 states x 2 measures)", len(got), len(samples))
	}
	welchP := map[string][]float64{}
	permP := map[string][]float64{}
	for _, r := range got {
		k := key{int(num(r["state"])), r["measure"].(string)}
		ab := samples[k]
		a, b := ab[0], ab[1]
		name := fmt.Sprintf("state %d %s", k.state, k.measure)
		if int(num(r["n_a"])) != len(a) || int(num(r["n_b"])) != len(b) || r["group_a"] != "night" {
			t.Errorf("%s: n %v/%v, want %d/%d", name, r["n_a"], r["n_b"], len(a), len(b))
		}
		if k.measure == "occupancy" && len(a)+len(b) != nSubjects-1 {
			t.Errorf("%s: %d subjects, want %d (pilot left out)", name, len(a)+len(b), nSubjects-1)
		}
		if int(num(r["n_without_visit_a"])) != noVisit[k.state][0] || int(num(r["n_without_visit_b"])) != noVisit[k.state][1] ||
			int(num(r["n_censored_only_a"])) != censoredOnly[k.state][0] || int(num(r["n_censored_only_b"])) != censoredOnly[k.state][1] {
			t.Errorf("%s: without visit %v/%v censored only %v/%v, want %v %v", name, r["n_without_visit_a"], r["n_without_visit_b"],
				r["n_censored_only_a"], r["n_censored_only_b"], noVisit[k.state], censoredOnly[k.state])
		}
		if k.measure == "dwell_seconds" && r["dwell_runs"] != "complete" {
			t.Errorf("%s: dwell_runs %v, want complete", name, r["dwell_runs"])
		}
		for _, c := range []struct {
			col  string
			want float64
		}{
			{"mean_a", stat.Mean(a, nil)}, {"mean_b", stat.Mean(b, nil)},
			{"sd_a", stat.StdDev(a, nil)}, {"sd_b", stat.StdDev(b, nil)},
			{"difference", stat.Mean(a, nil) - stat.Mean(b, nil)},
		} {
			if !close(num(r[c.col]), c.want, 1e-12) {
				t.Errorf("%s: %s = %v, Go %v", name, c.col, r[c.col], c.want)
			}
		}
		wt, wdf, wp := welchRef(a, b)
		if !close(num(r["welch_t"]), wt, 1e-10) || !close(num(r["welch_df"]), wdf, 1e-9) || !close(num(r["welch_p"]), wp, 1e-9) {
			t.Errorf("%s: Welch %v %v %v, Go %v %v %v", name, r["welch_t"], r["welch_df"], r["welch_p"], wt, wdf, wp)
		}
		// Same generator and order as documented: PCG(seed + state, 0).
		perm, err := compute.PermutationTestMean(a, b, 4999, rand.New(rand.NewPCG(uint64(3+k.state), 0)))
		if err != nil {
			t.Fatal(err)
		}
		if num(r["perm_p"]) != perm.PValue {
			t.Errorf("%s: perm_p %v, compute %v", name, r["perm_p"], perm.PValue)
		}
		// Against the exact permutation distribution (C(16, 8) = 12,870
		// splits): within 4 Monte Carlo standard errors.
		exact := exactPermP(a, b)
		if se := math.Sqrt(exact*(1-exact)/4999) + 1.0/4999; math.Abs(num(r["perm_p"])-exact) > 4*se {
			t.Errorf("%s: perm_p %v, exact enumeration %v", name, r["perm_p"], exact)
		}
		welchP[k.measure] = append(welchP[k.measure], wp)
		permP[k.measure] = append(permP[k.measure], perm.PValue)
	}
	for _, measure := range []string{"occupancy", "dwell_seconds"} {
		wq, pq := compute.BenjaminiHochberg(welchP[measure]), compute.BenjaminiHochberg(permP[measure])
		i := 0
		for _, r := range got {
			if r["measure"] != measure {
				continue
			}
			if !close(num(r["welch_p_bh"]), wq[i], 1e-9) || !close(num(r["perm_p_bh"]), pq[i], 1e-12) {
				t.Errorf("%s state %v: BH %v %v, Go %v %v", measure, r["state"], r["welch_p_bh"], r["perm_p_bh"], wq[i], pq[i])
			}
			i++
		}
	}
}

func TestTransitionsByGroup(t *testing.T) {
	d := openWarehouse(t)
	got := runBundled(t, d, "transitions_by_group", map[string]string{"analysis": "1", "group_a": "day", "group_b": "night"})
	groups := groupsOf(t, d, firstID)
	vals := map[string][]float64{}
	for _, r := range raw(t, d, `SELECT subject_id, from_state, to_state, probability FROM transitions WHERE analysis_id = ?`, firstID) {
		g := groups[r["subject_id"].(string)]
		if g == "pilot" || r["probability"] == nil {
			continue
		}
		k := fmt.Sprintf("%s %v %v", g, r["from_state"], r["to_state"])
		vals[k] = append(vals[k], num(r["probability"]))
	}
	if len(got) != len(vals) {
		t.Fatalf("%d rows, Go %d", len(got), len(vals))
	}
	rowSum := map[string]float64{}
	for _, r := range got {
		k := fmt.Sprintf("%s %v %v", r["group"], r["from_state"], r["to_state"])
		v := vals[k]
		if !close(num(r["mean_probability"]), stat.Mean(v, nil), 1e-12) || int(num(r["n_subjects"])) != len(v) {
			t.Errorf("%s: %v (n %v), Go %v (n %d)", k, r["mean_probability"], r["n_subjects"], stat.Mean(v, nil), len(v))
		}
		if len(v) > 1 && !close(num(r["sd_probability"]), stat.StdDev(v, nil), 1e-12) {
			t.Errorf("%s: sd %v, Go %v", k, r["sd_probability"], stat.StdDev(v, nil))
		}
		rowSum[fmt.Sprintf("%s %v", r["group"], r["from_state"])] += num(r["mean_probability"])
	}
	for k, s := range rowSum {
		if math.Abs(s-1) > 1e-12 {
			t.Errorf("row %s sums to %v", k, s)
		}
	}
}

func TestBettiCurvesByGroup(t *testing.T) {
	d := openWarehouse(t)
	got := runBundled(t, d, "betti_curves_by_group", map[string]string{"analysis": "first", "group_a": "day", "group_b": "night"})
	groups := groupsOf(t, d, firstID)
	vals := map[string][]float64{}
	for _, r := range raw(t, d, `SELECT subject_id, state, dimension, threshold, betti FROM betti_curves WHERE analysis_id = ?`, firstID) {
		g := groups[r["subject_id"].(string)]
		if g == "pilot" {
			continue
		}
		k := fmt.Sprintf("%s %v %v %.12g", g, r["state"], r["dimension"], num(r["threshold"]))
		vals[k] = append(vals[k], num(r["betti"]))
	}
	if len(got) != len(vals) || len(got) == 0 {
		t.Fatalf("%d rows, Go %d", len(got), len(vals))
	}
	for _, r := range got {
		k := fmt.Sprintf("%s %v %v %.12g", r["group"], r["state"], r["dimension"], num(r["threshold"]))
		v := vals[k]
		if !close(num(r["mean_betti"]), stat.Mean(v, nil), 1e-12) || int(num(r["n_subjects"])) != len(v) ||
			(len(v) > 1 && !close(num(r["sd_betti"]), stat.StdDev(v, nil), 1e-12)) {
			t.Errorf("%s: %v %v %v, Go %v %v %d", k, r["mean_betti"], r["sd_betti"], r["n_subjects"], stat.Mean(v, nil), stat.StdDev(v, nil), len(v))
		}
	}
}

func TestFiltrationTestsByGroup(t *testing.T) {
	d := openWarehouse(t)
	got := runBundled(t, d, "filtration_tests_by_group", map[string]string{
		"analysis": "first", "group_a": "night", "group_b": "day", "n_perm": "999", "seed": "11", "pooled_events": "1"})
	groups := groupsOf(t, d, firstID)
	side := map[string]int{"night": 0, "day": 1}
	type key struct{ state, dim int }
	events := map[key][2][]float64{}
	for _, r := range raw(t, d, `SELECT subject_id, state, dimension, value FROM filtration_events WHERE analysis_id = ?`, firstID) {
		s, ok := side[groups[r["subject_id"].(string)]]
		if !ok {
			continue
		}
		k := key{int(num(r["state"])), int(num(r["dimension"]))}
		v := events[k]
		v[s] = append(v[s], num(r["value"]))
		events[k] = v
	}
	// Curves per subject in threshold order, subjects in id order.
	type ck struct {
		key
		subject string
	}
	curve := map[ck][]float64{}
	var order []ck
	for _, r := range raw(t, d, `SELECT subject_id, state, dimension, betti FROM core_betti_curves WHERE analysis_id = ? ORDER BY subject_id, state, dimension, threshold`, firstID) {
		c := ck{key{int(num(r["state"])), int(num(r["dimension"]))}, r["subject_id"].(string)}
		if _, ok := curve[c]; !ok {
			order = append(order, c)
		}
		curve[c] = append(curve[c], num(r["betti"]))
	}
	curves := map[key][2][][]float64{}
	for _, c := range order {
		s, ok := side[groups[c.subject]]
		if !ok {
			continue
		}
		v := curves[c.key]
		v[s] = append(v[s], curve[c])
		curves[c.key] = v
	}
	if len(got) != len(events) || len(got) != 6 {
		t.Fatalf("%d rows, Go %d", len(got), len(events))
	}
	var cpP []float64
	tested := 0
	for _, r := range got {
		for c := range r {
			if pLike.MatchString(c) && !strings.HasPrefix(c, "curve_perm_") {
				t.Errorf("column %s is named like a p-value but is not the curve test (issue 11: the pooled KS is descriptive)", c)
			}
		}
		k := key{int(num(r["state"])), int(num(r["dimension"]))}
		name := fmt.Sprintf("state %d dim %d", k.state, k.dim)
		ev := events[k]
		ks, err := compute.KSStatistic(ev[0], ev[1])
		if err != nil {
			t.Fatal(err)
		}
		if int(num(r["n_events_a"])) != len(ev[0]) || !close(num(r["pooled_events_ks_distance"]), ks, 1e-12) {
			t.Errorf("%s: KS distance %v (n %v), Go %v (n %d)", name, r["pooled_events_ks_distance"], r["n_events_a"], ks, len(ev[0]))
		}
		cv := curves[k]
		if int(num(r["n_subjects_a"])) != len(cv[0]) || int(num(r["n_subjects_b"])) != len(cv[1]) {
			t.Errorf("%s: %v and %v subjects with core curves, Go %d and %d", name, r["n_subjects_a"], r["n_subjects_b"], len(cv[0]), len(cv[1]))
		}
		if len(cv[0]) == 0 || len(cv[1]) == 0 {
			// A group without a core network of the state: no test.
			if r["curve_perm_p"] != nil || r["curve_distance"] != nil {
				t.Errorf("%s: a group has no core curves, yet p %v, distance %v", name, r["curve_perm_p"], r["curve_distance"])
			}
			cpP = append(cpP, math.NaN())
			continue
		}
		tested++
		perm, err := compute.PermutationTestCurves(cv[0], cv[1], 999, rand.New(rand.NewPCG(uint64(11+2*k.state+k.dim), 0)))
		if err != nil {
			t.Fatal(err)
		}
		if num(r["n_perm"]) != 999 {
			t.Errorf("%s: n_perm %v, want the 999 relabellings asked for", name, r["n_perm"])
		}
		if num(r["curve_perm_p"]) != perm.PValue || int(num(r["n_subjects_a"])) != len(cv[0]) {
			t.Errorf("%s: curve perm p %v, Go %v", name, r["curve_perm_p"], perm.PValue)
		}
		// The largest gap between the two group mean curves, by hand.
		var gap float64
		for g := range cv[0][0] {
			var sa, sb float64
			for _, c := range cv[0] {
				sa += c[g]
			}
			for _, c := range cv[1] {
				sb += c[g]
			}
			gap = max(gap, math.Abs(sa/float64(len(cv[0]))-sb/float64(len(cv[1]))))
		}
		if !close(num(r["curve_distance"]), gap, 1e-12) || !close(perm.Statistic, gap, 1e-12) {
			t.Errorf("%s: curve_distance %v, Go %v", name, r["curve_distance"], gap)
		}
		cpP = append(cpP, perm.PValue)
	}
	if tested == 0 {
		t.Fatal("no state had core curves in both groups: the test warehouse does not exercise the curve test")
	}
	// BH over the rows that have a p-value.
	var present []float64
	for _, p := range cpP {
		if !math.IsNaN(p) {
			present = append(present, p)
		}
	}
	cq := compute.BenjaminiHochberg(present)
	j := 0
	for i, r := range got {
		if math.IsNaN(cpP[i]) {
			continue
		}
		if !close(num(r["curve_perm_p_bh"]), cq[j], 1e-12) {
			t.Errorf("row %d: BH %v, Go %v", i, r["curve_perm_p_bh"], cq[j])
		}
		j++
	}
}

// The pooled-event KS distance is computed only when asked for
// (pooled_events = 1): by default its three columns are NULL and every other
// column equals the run above; n_perm defaults to 999; pooled_events other
// than 0 or 1 is refused.
func TestFiltrationTestsPooledEventsOff(t *testing.T) {
	d := openWarehouse(t)
	params := map[string]string{"analysis": "first", "group_a": "night", "group_b": "day", "seed": "11"}
	off := runBundled(t, d, "filtration_tests_by_group", params)
	params["pooled_events"], params["n_perm"] = "1", "999"
	on := runBundled(t, d, "filtration_tests_by_group", params)
	if len(off) != len(on) || len(off) == 0 {
		t.Fatalf("%d rows by default, %d with pooled_events = 1", len(off), len(on))
	}
	for i, r := range off {
		for c, v := range r {
			switch c {
			case "n_events_a", "n_events_b", "pooled_events_ks_distance":
				if v != nil || on[i][c] == nil {
					t.Errorf("row %d: %s %v by default, %v when asked for", i, c, v, on[i][c])
				}
			default:
				if fmt.Sprint(v) != fmt.Sprint(on[i][c]) {
					t.Errorf("row %d: %s %v by default, %v with pooled_events = 1", i, c, v, on[i][c])
				}
			}
		}
	}
	params["pooled_events"] = "2"
	q, err := Lookup(FS, "filtration_tests_by_group")
	if err != nil {
		t.Fatal(err)
	}
	rows, err := Run(context.Background(), d.Conn, q, params)
	if err == nil {
		for rows.Next() {
		}
		err = rows.Err()
		rows.Close()
	}
	if err == nil || !strings.Contains(err.Error(), "pooled_events is 0 or 1") {
		t.Errorf("pooled_events = 2: err %v, want a refusal", err)
	}
}

// pLike is the column convention of the shared decisions: an inferential
// p-value column is p or ends in _p, adjusted forms in _p_bh or _p_by.
var pLike = regexp.MustCompile(`^p$|_p$|_p_bh$|_p_by$`)

func TestStatePairsKS(t *testing.T) {
	d := openWarehouse(t)
	got := runBundled(t, d, "state_pairs_ks", map[string]string{"analysis": "first"})
	upper := map[int][]float64{}
	for _, r := range raw(t, d, `SELECT state, weight FROM state_centroids WHERE analysis_id = ? ORDER BY state, i, j`, firstID) {
		s := int(num(r["state"]))
		upper[s] = append(upper[s], num(r["weight"]))
	}
	if len(got) != 6 {
		t.Fatalf("%d rows, want 3 pairs x 2 dimensions", len(got))
	}
	for _, r := range got {
		sa, sb, dim := int(num(r["state_a"])), int(num(r["state_b"])), int(num(r["dimension"]))
		ta, ra := kruskal(nRegions, upper[sa])
		tb, rb := kruskal(nRegions, upper[sb])
		x, y := ta, tb
		if dim == 1 {
			x, y = ra, rb
		}
		ks, err := compute.KSTest(x, y)
		if err != nil {
			t.Fatal(err)
		}
		// The Betti-curve distance from its definition: the largest
		// difference of the counts of events below a threshold, over
		// thresholds at and just above every event (docs/methods.md §6).
		gap := 0
		for _, e := range append(slices.Clone(x), y...) {
			for _, th := range []float64{e, math.Nextafter(e, math.Inf(1))} {
				na, nb := 0, 0
				for _, v := range x {
					if v < th {
						na++
					}
				}
				for _, v := range y {
					if v < th {
						nb++
					}
				}
				gap = max(gap, na-nb, nb-na)
			}
		}
		if int(num(r["n_events"])) != len(x) || !close(num(r["ks_distance"]), ks.Statistic, 1e-12) ||
			int(num(r["betti_distance"])) != gap {
			t.Errorf("states %d-%d dim %d: n %v D %v betti %v; Go n %d D %v betti %d", sa, sb, dim, r["n_events"], r["ks_distance"], r["betti_distance"], len(x), ks.Statistic, gap)
		}
		// Issue 11 item 3: descriptive, so no p-value column at all.
		for col := range r {
			if col == "p" || strings.HasSuffix(col, "_p") || strings.Contains(col, "_bh") || strings.Contains(col, "_by") {
				t.Errorf("state_pairs_ks has a p-value-like column %q", col)
			}
		}
	}
}

func TestCovariateAssociation(t *testing.T) {
	d := openWarehouse(t)
	got := runBundled(t, d, "covariate_association", map[string]string{"analysis": "first", "covariate": "sleep hours"})
	cov := map[string]float64{}
	for _, r := range raw(t, d, `SELECT subject_id, "sleep hours" AS x FROM subjects WHERE analysis_id = ?`, firstID) {
		cov[r["subject_id"].(string)] = num(r["x"])
	}
	type key struct {
		state   int
		measure string
	}
	xs, ys := map[key][]float64{}, map[key][]float64{}
	for _, r := range raw(t, d, `SELECT subject_id, state, occupancy, complete_dwell_seconds FROM state_metrics WHERE analysis_id = ?`, firstID) {
		x := cov[r["subject_id"].(string)]
		st := int(num(r["state"]))
		k := key{st, "occupancy"}
		xs[k], ys[k] = append(xs[k], x), append(ys[k], num(r["occupancy"]))
		if r["complete_dwell_seconds"] != nil {
			k = key{st, "dwell_seconds"}
			xs[k], ys[k] = append(xs[k], x), append(ys[k], num(r["complete_dwell_seconds"]))
		}
	}
	if len(got) != 6 {
		t.Fatalf("%d rows", len(got))
	}
	ps := map[string][]float64{}
	for _, r := range got {
		k := key{int(num(r["state"])), r["measure"].(string)}
		x, y := xs[k], ys[k]
		rr := stat.Correlation(x, y, nil)
		n := float64(len(x))
		tt := rr * math.Sqrt((n-2)/(1-rr*rr))
		p := 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: n - 2}.CDF(-math.Abs(tt))
		_, slope := stat.LinearRegression(x, y, nil, false)
		if int(num(r["n"])) != len(x) || !close(num(r["r"]), rr, 1e-12) || !close(num(r["t"]), tt, 1e-9) ||
			!close(num(r["p"]), p, 1e-9) || !close(num(r["slope"]), slope, 1e-9) || r["covariate"] != "sleep hours" {
			t.Errorf("%v: n %v r %v t %v p %v slope %v; Go %d %v %v %v %v", k, r["n"], r["r"], r["t"], r["p"], r["slope"], len(x), rr, tt, p, slope)
		}
		ps[k.measure] = append(ps[k.measure], p)
	}
	for measure, p := range ps {
		q := compute.BenjaminiHochberg(p)
		i := 0
		for _, r := range got {
			if r["measure"] == measure {
				if !close(num(r["p_bh"]), q[i], 1e-9) {
					t.Errorf("%s row %d: BH %v, Go %v", measure, i, r["p_bh"], q[i])
				}
				i++
			}
		}
	}
}

func TestSubjectFeatures(t *testing.T) {
	d := openWarehouse(t)
	for _, c := range []struct {
		params map[string]string
		id     int
	}{
		{map[string]string{"analysis": "first"}, 1},
		{map[string]string{"analysis": "latest"}, 2},
	} {
		q, _ := Lookup(FS, "subject_features")
		rows, err := Run(context.Background(), d.Conn, q, c.params)
		if err != nil {
			t.Fatal(err)
		}
		cols, _ := rows.Columns()
		got := readAll(t, rows)
		want := []string{"subject_id", "session_id", "group", "age", "sleep hours", "n_windows", "n_transitions", "switch_rate", "states_visited"}
		for _, m := range []string{"dwell_seconds", "n_dwells", "occupancy", "tree_weight"} {
			for s := 1; s <= 3; s++ {
				want = append(want, fmt.Sprintf("%s_s%02d", m, s))
			}
		}
		if !slices.Equal(cols, want) {
			t.Fatalf("columns %v, want %v", cols, want)
		}
		if len(got) != nSubjects {
			t.Fatalf("analysis %d: %d rows, want %d", c.id, len(got), nSubjects)
		}
		subj := map[string]map[string]any{}
		for _, r := range raw(t, d, `SELECT * FROM subjects WHERE analysis_id = ?`, c.id) {
			subj[r["subject_id"].(string)] = r
		}
		dyn := map[string]map[string]any{}
		for _, r := range raw(t, d, `SELECT * FROM subject_dynamics WHERE analysis_id = ?`, c.id) {
			dyn[r["subject_id"].(string)] = r
		}
		feat := map[string]any{}
		for _, r := range raw(t, d, `SELECT subject_id, state, occupancy, n_dwells, mean_dwell_seconds FROM state_metrics WHERE analysis_id = ?`, c.id) {
			s := fmt.Sprintf("%s/%02d", r["subject_id"], int(num(r["state"])))
			feat["occupancy/"+s], feat["n_dwells/"+s], feat["dwell_seconds/"+s] = r["occupancy"], r["n_dwells"], r["mean_dwell_seconds"]
		}
		for _, r := range raw(t, d, `SELECT subject_id, state, tree_weight FROM state_networks WHERE analysis_id = ?`, c.id) {
			feat[fmt.Sprintf("tree_weight/%s/%02d", r["subject_id"], int(num(r["state"])))] = r["tree_weight"]
		}
		for _, r := range got {
			id := r["subject_id"].(string)
			for _, col := range []string{"group", "age", "sleep hours"} {
				if fmt.Sprint(r[col]) != fmt.Sprint(subj[id][col]) {
					t.Errorf("%s %s: %v, subjects %v", id, col, r[col], subj[id][col])
				}
			}
			for _, col := range []string{"n_windows", "n_transitions", "switch_rate", "states_visited"} {
				if num(r[col]) != num(dyn[id][col]) {
					t.Errorf("%s %s: %v, subject_dynamics %v", id, col, r[col], dyn[id][col])
				}
			}
			if want := 180 - []int{0, 20, 26}[c.id] + 1; int(num(r["n_windows"])) != want {
				t.Errorf("analysis %d: %d windows, want %d", c.id, int(num(r["n_windows"])), want)
			}
			for _, m := range []string{"dwell_seconds", "n_dwells", "occupancy", "tree_weight"} {
				for s := 1; s <= 3; s++ {
					w := feat[fmt.Sprintf("%s/%s/%02d", m, id, s)]
					v := r[fmt.Sprintf("%s_s%02d", m, s)]
					if (w == nil) != (v == nil) || (w != nil && num(v) != num(w)) {
						t.Errorf("%s %s_s%02d: %v, raw %v", id, m, s, v, w)
					}
				}
			}
		}
	}
}

// Every bundled query parses, reads only the parameters it declares and
// uses every one of them.
func TestBundledHeaders(t *testing.T) {
	all, err := List(FS)
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, q := range all {
		names = append(names, q.Name)
		used := Variables(q.SQL)
		var declared []string
		for _, p := range q.Params {
			declared = append(declared, p.Name)
		}
		sort.Strings(used)
		sort.Strings(declared)
		if !slices.Equal(used, declared) {
			t.Errorf("%s: reads %v, declares %v", q.Name, used, declared)
		}
		if q.File != q.Name+".sql" {
			t.Errorf("%s lives in %s; name files after their query", q.Name, q.File)
		}
	}
	want := []string{"adjusted_group_contrast", "betti_curves_by_group", "covariate_association", "filtration_tests_by_group",
		"state_dwell_by_group", "state_pairs_ks", "subject_features", "surrogate_summary", "transitions_by_group"}
	if !slices.Equal(names, want) {
		t.Errorf("bundled %v, want %v", names, want)
	}
}

// openWritableCopy opens a copy of the test warehouse for writing, with the
// functions registered, so that a pasted statement could do harm.
func openWritableCopy(t *testing.T) *sql.Conn {
	t.Helper()
	path := filepath.Join(t.TempDir(), "rw.duckdb")
	b, err := os.ReadFile(warehousePath)
	if err != nil {
		t.Fatal(err)
	}
	os.WriteFile(path, b, 0o644)
	db, err := schema.Open(path, false, nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	conn, err := db.Conn(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close() })
	if err := Register(context.Background(), conn, FS); err != nil {
		t.Fatal(err)
	}
	return conn
}

// Parameter values that would break out of a pasted string literal or
// identifier are harmless: on a writable connection the tables survive,
// the values arrive as data, and bad names are refused.
func TestInjectionHarmless(t *testing.T) {
	conn := openWritableCopy(t)
	ctx := context.Background()
	evil := `x'; DROP TABLE subjects; --`
	count := func() int {
		var n int
		if err := conn.QueryRowContext(ctx, `SELECT count(*) FROM subjects`).Scan(&n); err != nil {
			t.Fatalf("subjects: %v", err)
		}
		return n
	}
	before := count()
	for _, c := range []struct {
		query  string
		params map[string]string
		fails  bool
	}{
		// A group value no subject has is refused (subject_groups), the
		// value arriving as data in the message.
		{"state_dwell_by_group", map[string]string{"group_a": evil, "group_b": "day"}, true},
		{"transitions_by_group", map[string]string{"group_a": "day", "group_b": `night"); DROP TABLE subjects; --`}, true},
		{"state_dwell_by_group", map[string]string{"group_column": `group" FROM subjects; DROP TABLE subjects; --`, "group_a": "a", "group_b": "b"}, true},
		{"state_pairs_ks", map[string]string{"analysis": "1; DROP TABLE subjects"}, true},
		{"covariate_association", map[string]string{"covariate": evil}, true},
		{"adjusted_group_contrast", map[string]string{"group_a": "day", "group_b": "night", "adjust": "age," + evil}, true},
	} {
		q, err := Lookup(FS, c.query)
		if err != nil {
			t.Fatal(err)
		}
		rows, err := Run(ctx, conn, q, c.params)
		if (err != nil) != c.fails {
			t.Errorf("%s %v: error %v", c.query, c.params, err)
		}
		if err == nil {
			for _, r := range readAll(t, rows) {
				if r["n_a"] != nil && num(r["n_a"]) != 0 {
					t.Errorf("%s: the value %q matched subjects", c.query, evil)
				}
			}
		}
		if n := count(); n != before {
			t.Fatalf("subjects has %d rows after %s, had %d", n, c.query, before)
		}
	}
	// A user's own SQL: the value comes back exactly as given.
	var echo string
	rows, err := Run(ctx, conn, &Query{SQL: `SELECT getvariable('who')`}, map[string]string{"who": evil})
	if err != nil {
		t.Fatal(err)
	}
	rows.Next()
	rows.Scan(&echo)
	rows.Close()
	if echo != evil {
		t.Errorf("the value came back as %q", echo)
	}
	if _, err := Run(ctx, conn, &Query{SQL: `SELECT 1`}, map[string]string{"x = 1; DROP TABLE subjects; SET VARIABLE y": "1"}); err == nil {
		t.Error("a parameter name with SQL in it was accepted")
	}
	if n := count(); n != before {
		t.Fatalf("subjects has %d rows, had %d", n, before)
	}
}

func TestParamErrors(t *testing.T) {
	d := openWarehouse(t)
	ctx := context.Background()
	q, _ := Lookup(FS, "state_dwell_by_group")
	for _, c := range []struct {
		params map[string]string
		want   string
	}{
		{map[string]string{"group_b": "day"}, "parameter group_a: required"},
		{map[string]string{"group_a": "night", "group_b": "day", "colour": "red"}, "takes no such parameter"},
		{map[string]string{"group_a": "night", "group_b": "day", "analysis": "third"}, `no such analysis "third"; the warehouse holds: 1 ("first"), 2 ("second")`},
		// Two analyses and none named: refused, never the newest by guess.
		{map[string]string{"group_a": "night", "group_b": "day", "analysis": ""}, `no analysis chosen: the warehouse holds 2 analyses: 1 ("first"), 2 ("second")`},
		{map[string]string{"group_a": "night", "group_b": "day", "analysis": "9"}, "no such analysis"},
		{map[string]string{"group_a": "night", "group_b": "day", "group_column": "grp"}, `no column "grp"; its covariates are: group, age, sleep hours`},
		{map[string]string{"group_a": "night", "group_b": "day", "n_perm": "many"}, `"many" is not an integer`},
		{map[string]string{"group_a": "night", "group_b": "night"}, "group_a and group_b are both night"},
	} {
		if _, ok := c.params["analysis"]; !ok {
			c.params["analysis"] = "latest"
		}
		_, err := Run(ctx, d.Conn, q, c.params)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%v: %v, want an error containing %q", c.params, err, c.want)
		}
	}
	cq, _ := Lookup(FS, "covariate_association")
	if _, err := Run(ctx, d.Conn, cq, map[string]string{"covariate": "group", "analysis": "latest"}); err == nil || !strings.Contains(err.Error(), "needs a numeric column") {
		t.Errorf("a text covariate: %v", err)
	}
	// Case-insensitive column names resolve to the stored spelling.
	rows, err := Run(ctx, d.Conn, q, map[string]string{"group_column": "GROUP", "group_a": "night", "group_b": "day", "analysis": "latest"})
	if err != nil {
		t.Fatal(err)
	}
	if n := len(readAll(t, rows)); n != 6 {
		t.Errorf("group column GROUP: %d rows", n)
	}
}

// A subject's sessions are averaged threshold by threshold before its
// curve enters the test (the query groups curve points by session, then
// averages the sessions' lists). A copy of the test warehouse gets a second
// session, with different Betti numbers, for every other subject; the
// query's p-value must equal compute.PermutationTestCurves on curves
// averaged here, and curve_distance the largest gap between the group means
// of those curves.
func TestFiltrationTestsSessionsAveraged(t *testing.T) {
	src, err := os.ReadFile(warehousePath)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "sessions.duckdb")
	if err := os.WriteFile(path, src, 0o644); err != nil {
		t.Fatal(err)
	}
	db, err := sql.Open("duckdb", path)
	if err != nil {
		t.Fatal(err)
	}
	// The second session's curve: the first's Betti numbers plus the row's
	// threshold index modulo 3, so the average is not a constant shift.
	if _, err := db.Exec(`INSERT INTO core_betti_curves
		SELECT analysis_id, subject_id, 'two', state, dimension, threshold,
		       betti + (row_number() OVER (PARTITION BY subject_id, state, dimension ORDER BY threshold)) % 3
		FROM core_betti_curves
		WHERE analysis_id = ? AND hash(subject_id) % 2 = 0`, firstID); err != nil {
		t.Fatal(err)
	}
	db.Close()
	d, err := Open(context.Background(), path)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	got := runBundled(t, d, "filtration_tests_by_group", map[string]string{
		"analysis": "first", "group_a": "night", "group_b": "day", "n_perm": "199", "seed": "5"})
	groups := groupsOf(t, d, firstID)
	side := map[string]int{"night": 0, "day": 1}
	type key struct{ state, dim int }
	type sk struct {
		key
		subject, session string
	}
	sessions := map[sk][]float64{}
	for _, r := range raw(t, d, `SELECT subject_id, session_id, state, dimension, betti FROM core_betti_curves WHERE analysis_id = ? ORDER BY threshold`, firstID) {
		k := sk{key{int(num(r["state"])), int(num(r["dimension"]))}, r["subject_id"].(string), r["session_id"].(string)}
		sessions[k] = append(sessions[k], num(r["betti"]))
	}
	type subj struct {
		key
		subject string
	}
	sum, count := map[subj][]float64{}, map[subj]int{}
	twice := 0
	for k, c := range sessions {
		s := subj{k.key, k.subject}
		if sum[s] == nil {
			sum[s] = make([]float64, len(c))
		}
		for g, v := range c {
			sum[s][g] += v
		}
		count[s]++
		if count[s] == 2 {
			twice++
		}
	}
	if twice == 0 {
		t.Fatal("no subject got a second session: the test does not exercise the averaging")
	}
	var subjects []subj
	for s := range sum {
		subjects = append(subjects, s)
	}
	sort.Slice(subjects, func(i, j int) bool { return subjects[i].subject < subjects[j].subject })
	curves := map[key][2][][]float64{}
	for _, s := range subjects {
		g, ok := side[groups[s.subject]]
		if !ok {
			continue
		}
		avg := make([]float64, len(sum[s]))
		for i, v := range sum[s] {
			avg[i] = v / float64(count[s])
		}
		v := curves[s.key]
		v[g] = append(v[g], avg)
		curves[s.key] = v
	}
	tested := 0
	for _, r := range got {
		k := key{int(num(r["state"])), int(num(r["dimension"]))}
		cv := curves[k]
		if len(cv[0]) == 0 || len(cv[1]) == 0 {
			continue
		}
		tested++
		perm, err := compute.PermutationTestCurves(cv[0], cv[1], 199, rand.New(rand.NewPCG(uint64(5+2*k.state+k.dim), 0)))
		if err != nil {
			t.Fatal(err)
		}
		if num(r["curve_perm_p"]) != perm.PValue || !close(num(r["curve_distance"]), perm.Statistic, 1e-12) {
			t.Errorf("state %d dim %d: p %v, distance %v; Go on session-averaged curves: %v, %v",
				k.state, k.dim, r["curve_perm_p"], r["curve_distance"], perm.PValue, perm.Statistic)
		}
	}
	if tested == 0 {
		t.Fatal("no row was tested")
	}
}
