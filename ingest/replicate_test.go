package ingest

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/schema"
)

// writeSubjects writes subjects subs[from:to] of a generated cohort (invented
// data) with the given region names; constant, when >= 0, replaces that
// region by a constant in every series.
func writeSubjects(t *testing.T, subs []compute.SimSubject, from, to int, names []string, constant int) string {
	t.Helper()
	dir := filepath.Join(t.TempDir(), "cohort")
	var ids []string
	var series []compute.Series
	var rows []SyntheticParticipant
	for i := from; i < to; i++ {
		s := subs[i]
		y := s.Series
		if constant >= 0 {
			y = compute.Series{T: y.T, P: y.P, Data: append([]float64(nil), y.Data...)}
			for r := 0; r < y.T; r++ {
				y.Data[r*y.P+constant] = 7
			}
		}
		ids, series = append(ids, s.ID), append(series, y)
		rows = append(rows, SyntheticParticipant{ID: s.ID, Cells: []string{s.Group, strconv.Itoa(30 + i)}})
	}
	if err := WriteCohort(dir, names, 1.5, ids, series, []string{"group", "age"}, rows); err != nil {
		t.Fatal(err)
	}
	return dir
}

// readTable reads a written series back as float64 rows (the test's own
// reader: the header, then tab-separated numbers).
func readTable(t *testing.T, path string) [][]float64 {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.Comma = '\t'
	recs, err := r.ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	out := make([][]float64, len(recs)-1)
	for i, rec := range recs[1:] {
		out[i] = make([]float64, len(rec))
		for j, c := range rec {
			if out[i][j], err = strconv.ParseFloat(c, 64); err != nil {
				t.Fatal(err)
			}
		}
	}
	return out
}

// TestStatesFrom places a replication cohort in the states of a discovery
// cohort. Both are drawn from one generated cohort (the same latent states,
// other subjects). The labels stored for the replication cohort must be
// those of assigning each of its windows to the discovery centroids, found
// here independently: each window's Pearson correlations by gonum's
// stat.Correlation from the file's numbers, then the nearest centroid by
// squared Euclidean distance (docs/methods.md §3), all in float64.
func TestStatesFrom(t *testing.T) {
	const p, w = 12, 20
	spec := compute.CohortSpec{Subjects: 10, Regions: p, Timepoints: 180, States: 3, TR: 1.5, Stickiness: 0.95, Offset: 500, Seed: 21}
	subs, err := compute.SimulateCohort(spec)
	if err != nil {
		t.Fatal(err)
	}
	names := make([]string, p)
	for j := range names {
		names[j] = fmt.Sprintf("r%02d", j)
	}
	dirA := writeSubjects(t, subs, 0, 6, names, -1)
	dirB := writeSubjects(t, subs, 6, 10, names, -1)
	dbPath := filepath.Join(t.TempDir(), "w.duckdb")
	oA := testOptions(dirA)
	oA.Analysis = "discovery"
	ingestInto(t, dbPath, oA)

	db, err := schema.Open(dbPath, false, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	ctx := context.Background()
	from, err := LoadStates(ctx, db, dbPath, "discovery")
	if err != nil {
		t.Fatal(err)
	}
	oB := testOptions(dirB)
	oB.Analysis, oB.StatesFrom = "replication", from
	oB.Grid, oB.Seed = "-1:1:11", 99 // neither changes the states: accepted
	sum, err := loadAndRun(db, oB)
	if err != nil {
		t.Fatal(err)
	}
	if sum.FitWindows != 0 || sum.Elbow != nil || sum.States != 3 {
		t.Errorf("summary: fit windows %d, elbow %v, states %d", sum.FitWindows, sum.Elbow, sum.States)
	}
	idA, idB := from.AnalysisID, sum.AnalysisID

	// The analysis records where its states came from, fits nothing and
	// stores the very same centroids.
	var params string
	var fit, k int
	if err := db.QueryRow(`SELECT CAST(parameters AS VARCHAR), fit_windows, n_states FROM analyses WHERE analysis_id = ?`, idB).Scan(&params, &fit, &k); err != nil {
		t.Fatal(err)
	}
	var rec struct {
		StatesFrom *StatesFrom `json:"states_from"`
	}
	if err := json.Unmarshal([]byte(params), &rec); err != nil || rec.StatesFrom == nil ||
		rec.StatesFrom.DB != dbPath || rec.StatesFrom.Analysis != "discovery" || rec.StatesFrom.AnalysisID != idA {
		t.Errorf("parameters JSON: %s (%v)", params, err)
	}
	if fit != 0 || k != 3 {
		t.Errorf("fit_windows %d, n_states %d", fit, k)
	}
	if n := queryInt(t, db, `SELECT count(*) FROM elbow WHERE analysis_id = ?`, idB); n != 0 {
		t.Errorf("%d elbow rows for a replication", n)
	}
	if n := queryInt(t, db, `SELECT count(*) FROM (SELECT state, i, j, weight FROM state_centroids WHERE analysis_id = $1
		EXCEPT ALL SELECT state, i, j, weight FROM state_centroids WHERE analysis_id = $2)`, idA, idB); n != 0 {
		t.Errorf("%d centroid values differ from the source's", n)
	}

	cent := make([][]float64, 3)
	for s := range cent {
		cent[s] = make([]float64, compute.PairCount(p))
	}
	rows, err := db.Query(`SELECT state, i, j, weight FROM state_centroids WHERE analysis_id = ?`, idA)
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var s, i, j int
		var v float64
		if err := rows.Scan(&s, &i, &j, &v); err != nil {
			t.Fatal(err)
		}
		cent[s-1][compute.PairIndex(p, i-1, j-1)] = v
	}
	rows.Close()
	checked := 0
	for _, s := range subs[6:] {
		y := readTable(t, filepath.Join(dirB, s.ID, "func", s.ID+"_task-rest_timeseries.tsv"))
		type stored struct {
			state int
			dist  float64
		}
		seq := map[int]stored{}
		rows, err := db.Query(`SELECT window_index, state, distance FROM state_sequence WHERE analysis_id = ? AND subject_id = ?`, idB, s.ID)
		if err != nil {
			t.Fatal(err)
		}
		for rows.Next() {
			var wi int
			var st stored
			rows.Scan(&wi, &st.state, &st.dist)
			seq[wi] = st
		}
		rows.Close()
		W := compute.NumWindows(len(y), w, 1)
		if len(seq) != W {
			t.Fatalf("%s: %d windows stored, want %d", s.ID, len(seq), W)
		}
		col := make([][]float64, p)
		for win := 0; win < W; win++ {
			for j := range col {
				col[j] = col[j][:0]
				for r := win; r < win+w; r++ {
					col[j] = append(col[j], y[r][j])
				}
			}
			dist := make([]float64, 3)
			for i := 0; i < p; i++ {
				for j := i + 1; j < p; j++ {
					r := stat.Correlation(col[i], col[j], nil)
					for st := range cent {
						d := r - cent[st][compute.PairIndex(p, i, j)]
						dist[st] += d * d
					}
				}
			}
			best := 0
			for st := range dist {
				if dist[st] < dist[best] {
					best = st
				}
			}
			got := seq[win+1]
			// The stored windows are float32: a label may differ only where
			// two centroids are within rounding of each other.
			second := math.Inf(1)
			for st := range dist {
				if st != best {
					second = math.Min(second, dist[st])
				}
			}
			if got.state != best+1 && second-dist[best] > 1e-4 {
				t.Fatalf("%s window %d: stored state %d, nearest discovery centroid %d (distances %v)", s.ID, win+1, got.state, best+1, dist)
			}
			if math.Abs(got.dist-dist[best]) > 1e-4*(1+dist[best]) {
				t.Errorf("%s window %d: stored distance %v, computed %v", s.ID, win+1, got.dist, dist[best])
			}
			checked++
		}
	}
	if checked == 0 {
		t.Fatal("no windows checked")
	}

	// Cohorts or settings that do not match are refused, with nothing written.
	renamed := make([]string, p)
	for j := range renamed {
		renamed[j] = names[j]
	}
	renamed[4] = "r04b"
	for _, c := range []struct {
		name   string
		dir    string
		change func(o *Options)
		want   string
	}{
		{"window", dirB, func(o *Options) { o.Window = 24 }, "window is 24 here but 20"},
		{"step", dirB, func(o *Options) { o.Step = 2 }, "step is 2 here but 1"},
		{"taper", dirB, func(o *Options) { o.Taper = "gauss" }, "taper is gauss here but none"},
		{"fisher z", dirB, func(o *Options) { o.FisherZ = true }, "fisher_z is true here but false"},
		{"detrend", dirB, func(o *Options) { o.Detrend = true }, "detrend is true here but false"},
		{"smoothing", dirB, func(o *Options) { o.SmoothK, o.SmoothSD = 20, 0.001 }, "smooth_k is 20 here but 0"},
		{"distance", dirB, func(o *Options) { o.Distance = "manhattan" }, "distance is manhattan here but euclidean"},
		{"renamed region", writeSubjects(t, subs, 6, 10, renamed, -1), nil, `column 5 is "r04b" here but "r04" there`},
		{"dropped region", writeSubjects(t, subs, 6, 10, names, 3), func(o *Options) { o.ConstantRegion = "drop" }, "11 regions here, 12 there"},
	} {
		t.Run(c.name, func(t *testing.T) {
			o := testOptions(c.dir)
			o.Analysis, o.StatesFrom = "refused-"+c.name, from
			if c.change != nil {
				c.change(&o)
			}
			before := queryInt(t, db, `SELECT count(*) FROM analyses`)
			_, err := loadAndRun(db, o)
			var ue *UsageError
			if !errors.As(err, &ue) || !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), `"discovery"`) {
				t.Fatalf("want a usage error saying %q, got %v", c.want, err)
			}
			if after := queryInt(t, db, `SELECT count(*) FROM analyses`); after != before {
				t.Errorf("%d analyses after a refusal, %d before", after, before)
			}
		})
	}

	if _, err := LoadStates(ctx, db, dbPath, "nope"); err == nil || !strings.Contains(err.Error(), `"discovery", "replication"`) {
		t.Errorf("unknown analysis: %v", err)
	}
}
