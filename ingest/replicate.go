package ingest

import (
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"fmt"
	"strings"

	"github.com/topostate/topostate/compute"
)

// StatesFrom names the analysis whose states a replication ingest reuses
// (ingest --states-from): sampling and fitting are skipped and every window
// is assigned to that analysis's stored centroids. It is recorded in the
// new analysis's parameters JSON as "states_from".
type StatesFrom struct {
	DB         string `json:"db"`          // warehouse file holding the source analysis (absolute path)
	Analysis   string `json:"analysis"`    // its name
	AnalysisID int    `json:"analysis_id"` // its analysis_id in DB

	// What LoadStates read; not recorded.
	params  Options
	regions []string // names of the analysed regions, by region_index
	cent    compute.Matrix32
}

// K is the number of stored states.
func (s *StatesFrom) K() int { return s.cent.Rows }

// LoadStates reads the states of the analysis called name from db, whose
// file is dbPath (recorded as given; pass an absolute path). An unknown name
// or an analysis without centroids is a usage error.
func LoadStates(ctx context.Context, db *sql.DB, dbPath, name string) (*StatesFrom, error) {
	s := &StatesFrom{DB: dbPath, Analysis: name}
	var params string
	var k, p int
	err := db.QueryRowContext(ctx, `SELECT analysis_id, CAST(parameters AS VARCHAR), n_states, n_regions FROM analyses WHERE name = ?`, name).
		Scan(&s.AnalysisID, &params, &k, &p)
	if errors.Is(err, sql.ErrNoRows) {
		var names []string
		rows, qerr := db.QueryContext(ctx, `SELECT name FROM analyses ORDER BY analysis_id`)
		if qerr == nil {
			for rows.Next() {
				var n string
				if rows.Scan(&n) == nil {
					names = append(names, fmt.Sprintf("%q", n))
				}
			}
			rows.Close()
		}
		have := "it has no analyses"
		if len(names) > 0 {
			have = "it has " + strings.Join(names, ", ")
		}
		return nil, &UsageError{Err: fmt.Errorf("--states-from %q: no such analysis in %s (%s)", name, dbPath, have)}
	}
	if err != nil {
		return nil, fmt.Errorf("ingest: states from %s: %w", dbPath, err)
	}
	if err := json.Unmarshal([]byte(params), &s.params); err != nil {
		return nil, fmt.Errorf("ingest: states from %q in %s: parameters: %w", name, dbPath, err)
	}
	rows, err := db.QueryContext(ctx, `SELECT region_name FROM regions WHERE analysis_id = ? AND NOT dropped ORDER BY region_index`, s.AnalysisID)
	if err != nil {
		return nil, fmt.Errorf("ingest: states from %s: %w", dbPath, err)
	}
	for rows.Next() {
		var r string
		if err := rows.Scan(&r); err != nil {
			rows.Close()
			return nil, fmt.Errorf("ingest: states from %s: %w", dbPath, err)
		}
		s.regions = append(s.regions, r)
	}
	rows.Close()
	if len(s.regions) != p || p < 3 || k < 1 {
		return nil, fmt.Errorf("ingest: states from %q in %s: %d regions listed, %d recorded, %d states: not a complete analysis", name, dbPath, len(s.regions), p, k)
	}
	D := compute.PairCount(p)
	s.cent = compute.NewMatrix32(k, D)
	seen := make([]bool, k*D)
	rows, err = db.QueryContext(ctx, `SELECT state, i, j, weight FROM state_centroids WHERE analysis_id = ?`, s.AnalysisID)
	if err != nil {
		return nil, fmt.Errorf("ingest: states from %s: %w", dbPath, err)
	}
	defer rows.Close()
	n := 0
	for rows.Next() {
		var st, i, j int
		var w float64
		if err := rows.Scan(&st, &i, &j, &w); err != nil {
			return nil, fmt.Errorf("ingest: states from %s: %w", dbPath, err)
		}
		if st < 1 || st > k || i < 1 || j <= i || j > p {
			return nil, fmt.Errorf("ingest: states from %q in %s: centroid entry (state %d, i %d, j %d) outside %d states x %d regions", name, dbPath, st, i, j, k, p)
		}
		q := (st-1)*D + compute.PairIndex(p, i-1, j-1)
		if seen[q] {
			return nil, fmt.Errorf("ingest: states from %q in %s: centroid entry (state %d, i %d, j %d) appears twice", name, dbPath, st, i, j)
		}
		seen[q] = true
		// The weights were stored as float64 from float32, so this is exact.
		s.cent.Data[q] = float32(w)
		n++
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("ingest: states from %s: %w", dbPath, err)
	}
	if n != k*D {
		return nil, fmt.Errorf("ingest: states from %q in %s: %d centroid values stored, %d states x %d pairs expected", name, dbPath, n, k, D)
	}
	return s, nil
}

// Check refuses a cohort and options whose windows are not comparable with
// those the states were fitted on: the analysed regions (after any drop)
// must have the same names in the same order, and every setting that
// changes a window's correlations or their distance to a centroid must be
// equal: window, step, taper (and taper_sigma when the taper is gauss),
// detrend, smooth_k (and smooth_sigma when smoothing), fisher_z and
// distance. Every mismatch is listed in one usage error.
func (s *StatesFrom) Check(c *Cohort, o Options) error {
	var bad []string
	src := s.params
	diff := func(name string, here, there any) {
		bad = append(bad, fmt.Sprintf("%s is %v here but %v in %q", name, here, there, s.Analysis))
	}
	if o.WindowSeconds != src.WindowSeconds {
		diff("window_seconds", o.WindowSeconds, src.WindowSeconds)
	} else if o.WindowSeconds == 0 && o.Window != src.Window {
		diff("window", o.Window, src.Window)
	}
	if o.StepSeconds != src.StepSeconds {
		diff("step_seconds", o.StepSeconds, src.StepSeconds)
	} else if o.StepSeconds == 0 && o.Step != src.Step {
		diff("step", o.Step, src.Step)
	}
	if o.Taper != src.Taper {
		diff("taper", o.Taper, src.Taper)
	} else if o.Taper == "gauss" && o.TaperSD != src.TaperSD {
		diff("taper_sigma", o.TaperSD, src.TaperSD)
	}
	if o.Detrend != src.Detrend {
		diff("detrend", o.Detrend, src.Detrend)
	}
	if o.SmoothK != src.SmoothK {
		diff("smooth_k", o.SmoothK, src.SmoothK)
	} else if o.SmoothK > 0 && o.SmoothSD != src.SmoothSD {
		diff("smooth_sigma", o.SmoothSD, src.SmoothSD)
	}
	if o.FisherZ != src.FisherZ {
		diff("fisher_z", o.FisherZ, src.FisherZ)
	}
	if o.Distance != src.Distance {
		diff("distance", o.Distance, src.Distance)
	}
	here := make([]string, len(c.Keep))
	for n, j := range c.Keep {
		here[n] = c.Regions[j]
	}
	if msg := regionDiff(s.regions, here); msg != "" {
		bad = append(bad, fmt.Sprintf("regions after drops differ: %s (%s); the states live on %q's regions", msg, regionList(here), s.Analysis))
	}
	if len(bad) == 0 {
		return nil
	}
	return &UsageError{Err: fmt.Errorf("--states-from %q (%s): this cohort or these options do not match the analysis the states were fitted on:\n  - %s",
		s.Analysis, s.DB, strings.Join(bad, "\n  - "))}
}

func regionList(r []string) string {
	if len(r) <= 6 {
		return "here: " + strings.Join(r, ", ")
	}
	return fmt.Sprintf("here: %s, ... (%d regions)", strings.Join(r[:6], ", "), len(r))
}

// useStates is stage 2 of a replication ingest: the stored centroids
// instead of a fit. No windows are sampled (fit_windows 0, no elbow rows).
func (s *stages) useStates(from *StatesFrom) error {
	if err := from.Check(s.c, s.o); err != nil {
		return err
	}
	if from.cent.Cols != compute.PairCount(s.p) {
		return fmt.Errorf("ingest: states from %q: %d centroid columns for %d regions", from.Analysis, from.cent.Cols, s.p)
	}
	s.k = from.K()
	s.cent = from.cent
	s.elbow, s.fitRows, s.sampleK = nil, 0, nil
	return nil
}
