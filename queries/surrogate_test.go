package queries

import "testing"

// TestSurrogateSummary recomputes surrogate_summary from plain SELECTs of
// surrogate_tests: every row, p = (1 + n_exceed) / (1 + N) (Davison and
// Hinkley 1997, eq. 4.11) and the z column; an analysis without a test
// gives no rows.
func TestSurrogateSummary(t *testing.T) {
	d := openWarehouse(t)
	got := runBundled(t, d, "surrogate_summary", map[string]string{"analysis": "first"})
	want := raw(t, d, `SELECT statistic, state, observed, null_mean, null_sd, n_surrogates, n_exceed, p
		FROM surrogate_tests t JOIN analyses a USING (analysis_id) WHERE a.name = 'first'`)
	if len(want) == 0 {
		t.Fatal("the test warehouse's analysis 'first' has no surrogate rows")
	}
	// 3 states: cluster_quality, window_variability, betti_distance, mean_dwell and 3 per-state dwells.
	if len(got) != len(want) || len(got) != 7 {
		t.Fatalf("%d rows, surrogate_tests has %d, want 7", len(got), len(want))
	}
	byKey := map[[2]any]map[string]any{}
	for _, w := range want {
		byKey[[2]any{w["statistic"], w["state"]}] = w
	}
	for i, g := range got {
		w, ok := byKey[[2]any{g["statistic"], g["state"]}]
		if !ok {
			t.Fatalf("row %d %v: not in surrogate_tests", i, g)
		}
		n, exceed := nullable(w["n_surrogates"]), nullable(w["n_exceed"])
		if n != 19 || !close(nullable(g["p"]), (1+exceed)/(1+n), 1e-15) || !close(nullable(g["p"]), nullable(w["p"]), 0) {
			t.Errorf("%v: p %v, stored %v, (1+%v)/(1+%v)", g["statistic"], g["p"], w["p"], exceed, n)
		}
		z := (nullable(w["observed"]) - nullable(w["null_mean"])) / nullable(w["null_sd"])
		if !close(nullable(g["null_z"]), z, 1e-12) {
			t.Errorf("%v: null_z %v, want %v", g["statistic"], g["null_z"], z)
		}
		if s, _ := g["in_words"].(string); len(s) < 20 {
			t.Errorf("%v: in_words %q", g["statistic"], s)
		}
	}
	if got[0]["statistic"] != "cluster_quality" || got[1]["statistic"] != "window_variability" {
		t.Errorf("order: %v, %v first; want cluster_quality, window_variability", got[0]["statistic"], got[1]["statistic"])
	}
	if none := runBundled(t, d, "surrogate_summary", map[string]string{"analysis": "second"}); len(none) != 0 {
		t.Errorf("analysis without a test: %d rows", len(none))
	}
}
