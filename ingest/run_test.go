package ingest

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"testing"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/schema"
)

// makeCohort writes a small generated cohort (invented data) and returns
// its folder.
func makeCohort(t *testing.T, subjects, regions, timepoints, states int, seed uint64) string {
	t.Helper()
	dir := filepath.Join(t.TempDir(), "cohort")
	spec := compute.CohortSpec{Subjects: subjects, Regions: regions, Timepoints: timepoints, States: states,
		TR: 1.5, Stickiness: 0.95, Offset: 500, Seed: seed}
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

func testOptions(dir string) Options {
	o := Defaults()
	o.Input, o.Window, o.States, o.Restarts, o.Grid, o.Seed = dir, 20, 3, 3, "-0.5:1:31", 11
	return o
}

func ingestInto(t *testing.T, dbPath string, o Options) *Summary {
	t.Helper()
	s, err := IntoFile(context.Background(), dbPath, o, nil)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func queryInt(t *testing.T, db *sql.DB, q string, args ...any) int {
	t.Helper()
	var n int
	if err := db.QueryRow(q, args...).Scan(&n); err != nil {
		t.Fatalf("%s: %v", q, err)
	}
	return n
}

// TestIngestEndToEnd checks the written tables against each other and
// against the definitions in docs/methods.md §2, §4 and §5.
func TestIngestEndToEnd(t *testing.T) {
	dir := makeCohort(t, 6, 12, 200, 3, 5)
	dbPath := filepath.Join(t.TempDir(), "w.duckdb")
	o := testOptions(dir)
	sum := ingestInto(t, dbPath, o)
	if sum.Subjects != 6 || sum.States != 3 || sum.Regions != 12 {
		t.Fatalf("summary %+v", sum)
	}
	db, err := schema.Open(dbPath, true, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	id := sum.AnalysisID
	W := compute.NumWindows(200, 20, 1)

	checks := []struct {
		name string
		q    string // counts rows that break the rule; must be 0
	}{
		{"occupancy sums to 1 (docs/methods.md §4)", `SELECT count(*) FROM (SELECT subject_id, abs(sum(occupancy) - 1) AS d FROM state_metrics WHERE analysis_id = $1 GROUP BY ALL) WHERE d > 1e-9`},
		{"transition counts sum to W-1 (docs/methods.md §4)", fmt.Sprintf(`SELECT count(*) FROM (SELECT subject_id, sum(count) AS n FROM transitions WHERE analysis_id = $1 GROUP BY ALL) WHERE n <> %d`, W-1)},
		{"off-diagonal counts equal n_transitions", `SELECT count(*) FROM (SELECT subject_id, sum(count) FILTER (WHERE from_state <> to_state) AS n FROM transitions WHERE analysis_id = $1 GROUP BY ALL) x JOIN subject_dynamics d USING (subject_id) WHERE d.analysis_id = $1 AND x.n <> d.n_transitions`},
		{"occupancy equals sequence share", `SELECT count(*) FROM state_metrics m LEFT JOIN (SELECT subject_id, state, count(*) AS n FROM state_sequence WHERE analysis_id = $1 GROUP BY ALL) s USING (subject_id, state) WHERE m.analysis_id = $1 AND abs(m.occupancy - coalesce(s.n, 0) / ` + strconv.Itoa(W) + `.0) > 1e-12`},
		{"unvisited state has NULL dwell (docs/methods.md §4)", `SELECT count(*) FROM state_metrics WHERE analysis_id = $1 AND ((occupancy = 0) <> (mean_dwell_windows IS NULL))`},
		{"beta0 curve matches tree events (docs/methods.md §5)", `SELECT count(*) FROM betti_curves c WHERE analysis_id = $1 AND dimension = 0 AND betti <> 12 - (SELECT count(*) FROM filtration_events e WHERE e.analysis_id = c.analysis_id AND e.subject_id = c.subject_id AND e.state = c.state AND e.dimension = 0 AND e.value > c.threshold)`},
		{"beta1 curve matches other events (docs/methods.md §5)", `SELECT count(*) FROM betti_curves c WHERE analysis_id = $1 AND dimension = 1 AND betti <> (SELECT count(*) FROM filtration_events e WHERE e.analysis_id = c.analysis_id AND e.subject_id = c.subject_id AND e.state = c.state AND e.dimension = 1 AND e.value > c.threshold)`},
		{"event counts p-1 and (p-1)(p-2)/2", `SELECT count(*) FROM (SELECT subject_id, state, dimension, count(*) AS n FROM filtration_events WHERE analysis_id = $1 GROUP BY ALL) WHERE n <> CASE dimension WHEN 0 THEN 11 ELSE 55 END`},
		{"covariates join on subject_id", `SELECT 6 - count(*) FROM inputs i JOIN subjects s USING (analysis_id, subject_id) WHERE i.analysis_id = $1 AND s.age IS NOT NULL`},
		{"states numbered from 1", `SELECT count(*) FROM state_sequence WHERE analysis_id = $1 AND (state < 1 OR state > 3)`},
		{"centre seconds", `SELECT count(*) FROM state_sequence WHERE analysis_id = $1 AND abs(center_seconds - (window_start + 9.5) * 1.5) > 1e-9`},
	}
	for _, c := range checks {
		if n := queryInt(t, db, c.q, id); n != 0 {
			t.Errorf("%s: %d rows break it", c.name, n)
		}
	}
	if n := queryInt(t, db, `SELECT count(*) FROM state_sequence WHERE analysis_id = $1`, id); n != 6*W {
		t.Errorf("state_sequence has %d rows, want %d", n, 6*W)
	}

	// State labels match the stored centroids: recompute one subject's
	// windows here and find each nearest centroid by brute force.
	cent := make([][]float64, 3)
	for s := range cent {
		cent[s] = make([]float64, compute.PairCount(12))
	}
	rows, err := db.Query(`SELECT state, i, j, weight FROM state_centroids WHERE analysis_id = $1`, id)
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var s, i, j int
		var w float64
		if err := rows.Scan(&s, &i, &j, &w); err != nil {
			t.Fatal(err)
		}
		cent[s-1][compute.PairIndex(12, i-1, j-1)] = w
	}
	rows.Close()
	sf, err := ReadSeriesFile(filepath.Join(dir, "sub-003", "func", "sub-003_task-rest_timeseries.tsv"))
	if err != nil {
		t.Fatal(err)
	}
	y, err := compute.Preprocess(sf.Series, compute.PreprocessOptions{})
	if err != nil {
		t.Fatal(err)
	}
	win, err := compute.SlidingCorrelations(y, compute.WindowOptions{Width: 20, Step: 1})
	if err != nil {
		t.Fatal(err)
	}
	seq := map[int]int{}
	rows, err = db.Query(`SELECT window_index, state FROM state_sequence WHERE analysis_id = $1 AND subject_id = 'sub-003'`, id)
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var w, s int
		rows.Scan(&w, &s)
		seq[w] = s
	}
	rows.Close()
	for w := 0; w < win.Rows; w++ {
		best, bestD := 0, math.Inf(1)
		for s := range cent {
			d := 0.0
			for q, v := range win.Row(w) {
				d += (float64(v) - cent[s][q]) * (float64(v) - cent[s][q])
			}
			if d < bestD-1e-9 {
				best, bestD = s, d
			}
		}
		if seq[w+1] != best+1 {
			t.Fatalf("window %d: stored state %d, nearest centroid %d", w+1, seq[w+1], best+1)
		}
	}
}

// Same seed, same tables, whatever the number of workers and with or
// without the parsed-series cache; the fitting pool is capped (40 windows
// of about 80 offered), so the reservoir's replacements are covered too. A
// second analysis sits beside the first.
func TestIngestReproducible(t *testing.T) {
	dir := makeCohort(t, 5, 10, 160, 3, 9)
	tmp := t.TempDir()
	a, b := filepath.Join(tmp, "a.duckdb"), filepath.Join(tmp, "b.duckdb")
	o := testOptions(dir)
	o.States = 0
	o.StatesMin, o.StatesMax = 2, 5
	o.FitMax = 40
	o.Workers, o.CacheSeries = 1, false
	sa := ingestInto(t, a, o)
	o.Workers, o.CacheSeries = 3, true
	sb := ingestInto(t, b, o)
	if sa.FitWindows != 40 || sb.FitWindows != 40 {
		t.Errorf("fitting windows %d and %d, want the cap 40", sa.FitWindows, sb.FitWindows)
	}
	db, err := sql.Open("duckdb", "")
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if _, err := db.Exec(fmt.Sprintf(`ATTACH '%s' AS a (READ_ONLY); ATTACH '%s' AS b (READ_ONLY)`, a, b)); err != nil {
		t.Fatal(err)
	}
	for _, table := range []string{"regions", "elbow", "state_centroids", "state_sequence", "state_metrics",
		"subject_dynamics", "transitions", "betti_curves", "filtration_events", "state_networks", "inputs", "subjects"} {
		q := fmt.Sprintf(`SELECT (SELECT count(*) FROM (SELECT * FROM a.%[1]s EXCEPT ALL SELECT * FROM b.%[1]s))
			+ (SELECT count(*) FROM (SELECT * FROM b.%[1]s EXCEPT ALL SELECT * FROM a.%[1]s)), (SELECT count(*) FROM a.%[1]s)`, table)
		var diff, n int
		if err := db.QueryRow(q).Scan(&diff, &n); err != nil {
			t.Fatalf("%s: %v", table, err)
		}
		if diff != 0 || n == 0 {
			t.Errorf("%s: %d differing rows of %d", table, diff, n)
		}
	}
	db.Close()

	// A second analysis with other settings, then a clash of names.
	o2 := testOptions(dir)
	o2.Window, o2.Analysis = 30, "wide"
	ingestInto(t, a, o2)
	ro, err := schema.Open(a, true, nil)
	if err != nil {
		t.Fatal(err)
	}
	if n := queryInt(t, ro, `SELECT count(DISTINCT analysis_id) FROM state_metrics`); n != 2 {
		t.Errorf("%d analyses in state_metrics, want 2", n)
	}
	ro.Close()
	w, err := schema.Open(a, false, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer w.Close()
	if _, err := loadAndRun(w, o2); err == nil {
		t.Error("a second analysis named \"wide\" was accepted")
	}
}

// Bad input leaves the file as it was: table for table.
func TestIngestBadInputLeavesFileUnchanged(t *testing.T) {
	dir := makeCohort(t, 4, 8, 120, 2, 3)
	dbPath := filepath.Join(t.TempDir(), "w.duckdb")
	ingestInto(t, dbPath, testOptions(dir))
	before, err := os.ReadFile(dbPath)
	if err != nil {
		t.Fatal(err)
	}
	f := filepath.Join(dir, "sub-002", "func", "sub-002_task-rest_timeseries.tsv")
	b, _ := os.ReadFile(f)
	os.WriteFile(f, append(b, []byte("1\t2\n")...), 0o644)
	db, err := schema.Open(dbPath, false, nil)
	if err != nil {
		t.Fatal(err)
	}
	_, err = loadAndRun(db, testOptions(dir))
	db.Close()
	if err == nil {
		t.Fatal("a ragged series was accepted")
	}
	var pe *ParseError
	if !asParse(err, &pe) || pe.Path != f {
		t.Fatalf("error does not name %s: %v", f, err)
	}
	after, _ := os.ReadFile(dbPath)
	if string(before) != string(after) {
		t.Error("the database file changed after a refused ingest")
	}
}

func asParse(err error, pe **ParseError) bool {
	for _, e := range flatten(err) {
		if p, ok := e.(*ParseError); ok {
			*pe = p
			return true
		}
	}
	return false
}

func loadAndRun(db *sql.DB, o Options) (*Summary, error) {
	c, err := LoadCohort(o)
	if err != nil {
		return nil, err
	}
	return Run(context.Background(), db, c, o, nil)
}
