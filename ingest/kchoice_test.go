package ingest

import (
	"path/filepath"
	"testing"

	"github.com/topostate/topostate/schema"
)

// TestGapRuleFindsTrueK runs the real ingest path with --k-rule gap and
// --states-min 1 on generated cohorts (invented data, topostate's own
// generator) with one and with two latent states: the gap statistic
// (Tibshirani, Walther and Hastie, 2001) must pick 1 for the one-state
// cohort and more than 1 for the two-state one. (It picks 3 there, not 2:
// windows that straddle a state change form a third group of intermediate
// correlations; see README "Number of states" for what is not yet measured.)
// The one-state
// analysis must then be stored with k = 1 and trivial dynamics (every window
// in state 1, no transitions), and the elbow table must hold the gap columns.
func TestGapRuleFindsTrueK(t *testing.T) {
	for _, want := range []int{1, 2} {
		dir := makeCohort(t, 6, 12, 300, want, 21)
		dbPath := filepath.Join(t.TempDir(), "w.duckdb")
		o := Defaults()
		o.Input, o.Window, o.Restarts, o.Grid, o.Seed = dir, 20, 3, "-0.5:1:31", 11
		o.KRule, o.StatesMin, o.StatesMax = "gap", 1, 6
		sum := ingestInto(t, dbPath, o)
		if sum.Elbow == nil || sum.Elbow.Gap == nil || sum.States != sum.Elbow.Gap.K || (want == 1) != (sum.States == 1) {
			t.Errorf("%d latent states: picked %d (elbow %+v)", want, sum.States, sum.Elbow)
			continue
		}
		db, err := schema.Open(dbPath, true, nil)
		if err != nil {
			t.Fatal(err)
		}
		if n := queryInt(t, db, `SELECT count(*) FROM elbow WHERE gap IS NULL OR gap_se IS NULL`); n != 0 {
			t.Errorf("%d elbow rows without gap values", n)
		}
		if n := queryInt(t, db, `SELECT count(*) FROM elbow WHERE gap_pick AND chosen AND k = ?`, sum.States); n != 1 {
			t.Errorf("the chosen row is not the gap pick k = %d", sum.States)
		}
		if want == 1 {
			if n := queryInt(t, db, `SELECT count(*) FROM state_sequence WHERE state <> 1`); n != 0 {
				t.Errorf("%d windows outside state 1 with k = 1", n)
			}
			if n := queryInt(t, db, `SELECT coalesce(sum(n_transitions), 0) FROM subject_dynamics`); n != 0 {
				t.Errorf("%d transitions with k = 1", n)
			}
		}
		db.Close()
	}
}
