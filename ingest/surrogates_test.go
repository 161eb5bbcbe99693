package ingest

import (
	"math"
	"os"
	"path/filepath"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"
)

// TestSurrogateRows: p = (1 + #{null >= observed}) / (1 + N) (Davison and
// Hinkley 1997, eq. 4.11), a NaN null counts as reaching the observed
// value, a NaN observed value gives no row, mean and sd (n - 1) over the
// defined null values, worked by hand.
func TestSurrogateRows(t *testing.T) {
	// k = 2: cluster_quality, window_variability, betti_distance, mean_dwell, mean_dwell 1, mean_dwell 2.
	runs := [][]float64{
		{0.5, 0.2, 3, 10, 12, math.NaN()},
		{0.1, 0.2, 4, 9, 11, 1},
		{0.2, 0.1, 2, 11, math.NaN(), 2},
		{0.3, 0.3, 3, 8, 13, 3},
	}
	rows := surrogateRows(2, runs)
	if len(rows) != 5 {
		t.Fatalf("%d rows, want 5 (no row for an undefined observed value)", len(rows))
	}
	want := []struct {
		stat      string
		state     int
		exceed    int
		mean, sd  float64
		nullCount int
	}{
		{StatClusterQuality, 0, 0, 0.2, 0.1, 3},
		{StatWindowVariability, 0, 2, 0.2, 0.1, 3}, // 0.2 >= 0.2 and 0.3
		{StatBettiDistance, 0, 2, 3, 1, 3},
		{StatMeanDwell, 0, 1, 28.0 / 3, math.Sqrt((1.0/9 + 25.0/9 + 16.0/9) / 2), 3},
		{StatMeanDwell, 1, 2, 12, math.Sqrt(2), 2}, // the NaN null counts as exceeding
	}
	for i, w := range want {
		r := rows[i]
		if r.Statistic != w.stat || r.State != w.state || r.Exceed != w.exceed || r.N != 3 ||
			math.Abs(r.P-float64(1+w.exceed)/4) > 1e-15 || math.Abs(r.NullMean-w.mean) > 1e-12 || math.Abs(r.NullSD-w.sd) > 1e-12 {
			t.Errorf("row %d: %+v, want %+v", i, r, w)
		}
	}
}

// TestSurrogateCalibrationSmall is the quick form of scripts/surrcalib:
// on 8 one-state cohorts (stationary series: the null hypothesis) each
// statistic's rejections at p <= 0.05 (N = 19) stay within the count a
// binomial test at 0.001 allows for a rate of 0.05 (gonum distuv; a loose
// bound: the script's 100 cohorts hold the real check), and on 3
// three-state cohorts the clustering quality rejects.
func TestSurrogateCalibrationSmall(t *testing.T) {
	if testing.Short() {
		t.Skip("runs 11 small ingests with 19 surrogates each")
	}
	limit := 0
	b := distuv.Binomial{N: 8, P: 0.05}
	for 1-b.CDF(float64(limit)) >= 0.001 {
		limit++
	}
	run := func(states int, seed uint64) []SurrogateRow {
		dir := makeCohort(t, 6, 10, 200, states, seed)
		o := testOptions(dir)
		o.Surrogates, o.Workers, o.Seed = 19, 2, seed
		return ingestInto(t, filepath.Join(t.TempDir(), "w.duckdb"), o).Surrogates
	}
	reject := map[string]int{}
	for seed := uint64(1); seed <= 8; seed++ {
		rows := run(1, seed)
		if len(rows) != 7 {
			t.Fatalf("one-state cohort %d: %d rows, want 7", seed, len(rows))
		}
		for _, r := range rows {
			if r.P <= 0.05 {
				reject[r.Statistic+string(rune('0'+r.State))]++
			}
		}
	}
	for s, n := range reject {
		if n > limit {
			t.Errorf("one-state cohorts: %s rejected %d times of 8, binomial limit %d", s, n, limit)
		}
	}
	for seed := uint64(101); seed <= 103; seed++ {
		for _, r := range run(3, seed) {
			if r.State == 0 && r.Statistic == StatClusterQuality && r.P > 0.05 {
				t.Errorf("three-state cohort %d: %s p = %v, want <= 0.05", seed, r.Statistic, r.P)
			}
		}
	}
}

// TestSurrogateSettings: defaults, the cap never above the analysis's, and
// the refusals.
func TestSurrogateSettings(t *testing.T) {
	o := Defaults()
	if s := (SurrogateSettings{N: 19}).withDefaults(o); s.FitWindows != DefaultSurrogateFitWindows || s.Restarts != DefaultSurrogateRestarts {
		t.Errorf("defaults: %+v", s)
	}
	o.FitMax = 500
	if s := (SurrogateSettings{N: 19, FitWindows: 5000}).withDefaults(o); s.FitWindows != 500 {
		t.Errorf("cap %d above the analysis's 500", s.FitWindows)
	}
	for _, bad := range []SurrogateSettings{{N: -1}, {N: 5}, {N: 19, FitWindows: 3}, {N: 19, Restarts: -1}} {
		if bad.Check() == nil {
			t.Errorf("%+v accepted", bad)
		}
	}
	if (SurrogateSettings{}).Check() != nil || (SurrogateSettings{N: 99}).Check() != nil {
		t.Error("valid settings refused")
	}
}

// TestSurrogateWindowsOwnWidth: with --window-seconds every series has its
// own width in points, and the surrogate test must window each series as
// the analysis does (run 0 is the series as read, so its windows equal the
// analysis's). It used the cohort's single width for every series.
func TestSurrogateWindowsOwnWidth(t *testing.T) {
	dir := makeCohort(t, 4, 6, 120, 2, 5)
	side := filepath.Join(dir, "sub-002", "func", "sub-002_task-rest_timeseries.json")
	if _, err := os.Stat(side); err != nil {
		t.Fatalf("the cohort's layout changed: %v", err)
	}
	if err := os.WriteFile(side, []byte(`{"RepetitionTime": 3, "TaskName": "rest"}`+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	o := testOptions(dir)
	o.Window, o.WindowSeconds = 0, 30
	c, err := LoadCohort(o)
	if err != nil {
		t.Fatal(err)
	}
	st := &stages{o: o, c: c, workers: 1, k: 2}
	if err := st.setup(); err != nil {
		t.Fatal(err)
	}
	cache := newSeriesCache(st)
	widths := map[int]bool{}
	for i, in := range c.Inputs {
		widths[in.Window] = true
		want, err := st.windows("test", in)
		if err != nil {
			t.Fatal(err)
		}
		got, err := st.surrogateWindows(cache, 0, i, nil, nil)
		if err != nil {
			t.Fatal(err)
		}
		if got.Rows != want.Rows || got.Cols != want.Cols {
			t.Fatalf("%s (TR %v, own width %d): surrogate windows %d x %d, analysis %d x %d", in.Rel, in.TR, in.Window, got.Rows, got.Cols, want.Rows, want.Cols)
		}
		for j := range want.Data {
			if got.Data[j] != want.Data[j] {
				t.Fatalf("%s: window value %d differs: %v against %v", in.Rel, j, got.Data[j], want.Data[j])
			}
		}
	}
	// 30 s is 20 points at TR 1.5 and 10 at TR 3: the case needs both.
	if !widths[20] || !widths[10] {
		t.Fatalf("widths in points %v, want 20 (TR 1.5) and 10 (TR 3)", widths)
	}
}
