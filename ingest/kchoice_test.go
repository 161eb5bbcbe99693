package ingest

import (
	"fmt"
	"path/filepath"
	"strconv"
	"testing"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/schema"
)

// TestGapRuleFindsTrueK runs the real ingest path with --k-rule gap and
// --states-min 1 on generated cohorts (invented data, topostate's own
// generator) with one and with two latent states: the gap statistic
// (Tibshirani, Walther and Hastie, 2001) must pick 1 for the one-state
// cohort and more than 1 for the two-state one. (It picks 3 there, not 2:
// with mean dwells of 20 time points most 20-point windows straddle a state
// change and form a continuum between the states; README "Number of
// states" has the measured accuracy of every rule.) The one-state
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

// TestDefaultRuleFindsTrueK runs the real ingest path with the default
// options (prediction strength, Tibshirani and Walther 2005, over k =
// 1..10, the default window from --min-freq) on a generated cohort with
// four latent states that last longer than the window: the pick must be 4,
// the elbow table must hold the strength columns with the chosen row as
// their pick, and the stored window must be the rule's. TR 1.5 s gives
// ceil(1/(0.01 x 1.5)) = 67 time points; stickiness 0.99 a mean dwell of
// 100 time points (150 s). The rule's accuracy over many cohorts, and its
// known weakness (one-state cohorts often read as 2), are measured by
// scripts/kchoice (README "Number of states"), not here.
func TestDefaultRuleFindsTrueK(t *testing.T) {
	const want = 4
	dir := makeStickyCohort(t, 8, 16, 600, want, 31)
	dbPath := filepath.Join(t.TempDir(), "w.duckdb")
	o := Defaults()
	o.Input, o.Grid, o.Seed = dir, "-0.5:1:31", 13
	sum := ingestInto(t, dbPath, o)
	if sum.Elbow == nil || sum.Elbow.Strength == nil || sum.States != sum.Elbow.Strength.K || sum.States != want {
		t.Fatalf("%d latent states: picked %d (elbow %+v)", want, sum.States, sum.Elbow)
	}
	db, err := schema.Open(dbPath, true, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if n := queryInt(t, db, `SELECT count(*) FROM elbow WHERE strength IS NULL OR strength_se IS NULL`); n != 0 {
		t.Errorf("%d elbow rows without strength values", n)
	}
	if n := queryInt(t, db, `SELECT count(*) FROM elbow WHERE strength_pick AND chosen AND k = ?`, sum.States); n != 1 {
		t.Errorf("the chosen row is not the strength pick k = %d", sum.States)
	}
	if n := queryInt(t, db, `SELECT count(*) FROM elbow WHERE k = 1 AND strength = 1`); n != 1 {
		t.Errorf("ps(1) is not 1")
	}
	if n := queryInt(t, db, `SELECT count(*) FROM analyses WHERE (parameters->>'window')::INT = 67`); n != 1 {
		t.Errorf("stored window is not the rule's 67 time points")
	}
}

// makeStickyCohort is makeCohort with stickiness 0.99.
func makeStickyCohort(t *testing.T, subjects, regions, timepoints, states int, seed uint64) string {
	t.Helper()
	dir := filepath.Join(t.TempDir(), "cohort")
	spec := compute.CohortSpec{Subjects: subjects, Regions: regions, Timepoints: timepoints, States: states,
		TR: 1.5, Stickiness: 0.99, Offset: 500, Seed: seed}
	subs, err := compute.SimulateCohort(spec)
	if err != nil {
		t.Fatal(err)
	}
	names := make([]string, regions)
	for j := range names {
		names[j] = fmt.Sprintf("r%02d", j)
	}
	ids := make([]string, len(subs))
	series := make([]compute.Series, len(subs))
	rows := make([]SyntheticParticipant, len(subs))
	for i, s := range subs {
		ids[i], series[i] = s.ID, s.Series
		rows[i] = SyntheticParticipant{ID: s.ID, Cells: []string{s.Group, strconv.Itoa(30 + i)}}
	}
	if err := WriteCohort(dir, names, 1.5, ids, series, []string{"group", "age"}, rows); err != nil {
		t.Fatal(err)
	}
	return dir
}

// TestStrengthHalvingBySubject runs the real ingest path with
// --strength-halving subject (docs/methods.md §3.x) and the other halving
// computed beside it: on 6 subjects the halvings must keep subjects whole
// (6 groups halved; the default by window halves no groups), the pick must
// be the by-subject strength's, and the stored parameters must say so. On
// one subject the windows are halved by blocks of time instead: with the
// default window at TR 1.5 s, ceil(1/(0.01 x 1.5)) = 67 time points, 300
// time points give 234 windows, fewer than two blocks of 4 x 67 = 268, so
// the series is cut in two halves of 117 windows: 2 groups (worked by
// hand).
func TestStrengthHalvingBySubject(t *testing.T) {
	for _, subjects := range []int{6, 1} {
		dir := makeCohort(t, subjects, 12, 300, 1, 23)
		dbPath := filepath.Join(t.TempDir(), "w.duckdb")
		o := Defaults()
		o.Input, o.Grid, o.Seed = dir, "-0.5:1:31", 11
		o.StatesMax, o.StrengthHalving, o.CompareHalvings = 4, "subject", true
		sum := ingestInto(t, dbPath, o)
		e := sum.Elbow
		if e == nil || e.Strength == nil || e.OtherStrength == nil {
			t.Fatalf("%d subjects: no prediction strength (elbow %+v)", subjects, e)
		}
		if sum.States != e.Strength.K || e.OtherStrength.Groups != 0 {
			t.Errorf("%d subjects: picked %d, strength pick %d, groups of the other halving %d", subjects, sum.States, e.Strength.K, e.OtherStrength.Groups)
		}
		if g := e.Strength.Groups; (subjects > 1 && g != subjects) || (subjects == 1 && g != 2) {
			t.Errorf("%d subjects: %d groups halved", subjects, g)
		}
		db, err := schema.Open(dbPath, true, nil)
		if err != nil {
			t.Fatal(err)
		}
		if n := queryInt(t, db, `SELECT count(*) FROM analyses WHERE parameters->>'strength_halving' = 'subject'`); n != 1 {
			t.Errorf("%d subjects: the stored parameters do not say strength_halving subject", subjects)
		}
		db.Close()
	}
}
