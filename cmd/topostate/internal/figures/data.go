package figures

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"

	"github.com/topostate/topostate/queries"
)

// MaxGroups is the most groups a figure compares: the colour-blind-safe
// palette has eight colours.
const MaxGroups = 8

// NoGroup is the name of the single group used when the cohort has no
// grouping column.
const NoGroup = "all series"

// ErrUsage marks a request that cannot work with this warehouse (an
// unknown analysis or grouping column); the command reports it as a usage
// error.
var ErrUsage = errors.New("figures: bad request")

// requestError is a usage error whose message is only what went wrong
// (the command names itself); errors.Is(err, ErrUsage) holds.
type requestError struct{ err error }

func (e *requestError) Error() string        { return e.err.Error() }
func (e *requestError) Unwrap() error        { return e.err }
func (e *requestError) Is(target error) bool { return target == ErrUsage }

func usagef(format string, args ...any) error {
	return &requestError{fmt.Errorf(format, args...)}
}

// Data is everything the figures of one analysis show.
type Data struct {
	AnalysisID int
	Name       string
	States     int    // k
	Regions    int    // p, regions in the networks
	FisherZ    bool   // centroids are Fisher z, not r
	KRule      string // --k-rule that picked k from the scan ("chord" for analyses from before --k-rule)
	Group      string
	Groups     []Group // in sorted order of their names

	Betti       []Curve        // group-mean Betti curves, by state, dimension, group
	Elbow       []ElbowPoint   // empty when k was fixed
	Occupancy   [][][]float64  // [state-1][group]: fractional occupancy of each series
	Dwell       [][][]float64  // [state-1][group]: mean dwell (s) of each series that visited the state
	Transitions [][][]float64  // [group][from-1][to-1]: mean probability over series; NaN when no series left from
	TransN      [][][]int      // [group][from-1][to-1]: series averaged into each cell
	Centroids   [][][]float64  // [state-1][i][j]: centroid weight, symmetric; NaN on the diagonal
	RegionNames []string       // [region_index-1]: region_name of table regions; nil when the analysis stores none
	Notes       []string       // what was left out, for the caller to print
	groupIndex  map[string]int // group name -> index in Groups
}

// Group is one level of the grouping column.
type Group struct {
	Name     string
	Series   int // series (subject x session) of this group in the analysis
	Subjects int // distinct subjects among them (the unit of the group tests)
}

// Curve is a group's mean Betti curve for one state and dimension:
// Mean[g] = (1/n) sum_s beta_s(e_g) over the n series that visited the
// state, SE[g] = sd / sqrt(n) with the sample standard deviation (n - 1 in
// the denominator); SE is 0 when n = 1.
type Curve struct {
	State, Dim int
	Group      int // index into Data.Groups
	N          int
	Threshold  []float64
	Mean, SE   []float64
}

// ElbowPoint is one k of the elbow scan.
type ElbowPoint struct {
	K                       int
	WCSS                    float64
	Chosen, Chord, SecondDf bool
}

func quoteIdent(s string) string { return `"` + strings.ReplaceAll(s, `"`, `""`) + `"` }

// Load reads the analysis named by name (an id, a name, "latest", or ""
// for the only analysis: queries.FindAnalysis) from db. group names a column of the subjects table whose values split the
// series into groups; "" (or a missing default "group" column, with
// defaultGroup true) puts every series in one group.
func Load(ctx context.Context, db *sql.DB, name, group string, defaultGroup bool) (*Data, error) {
	d := &Data{}
	a, err := queries.FindAnalysis(ctx, db, name)
	if errors.Is(err, queries.ErrNoAnalysis) || errors.Is(err, queries.ErrAnalysisAmbiguous) {
		return nil, &requestError{err}
	}
	if err != nil {
		return nil, err
	}
	err = db.QueryRowContext(ctx, `SELECT analysis_id, name, n_states, n_regions, coalesce(parameters->>'fisher_z' = 'true', false),
		coalesce(nullif(parameters->>'k_rule', ''), 'chord')
		FROM analyses WHERE analysis_id = ?`, a.ID).Scan(&d.AnalysisID, &d.Name, &d.States, &d.Regions, &d.FisherZ, &d.KRule)
	if err != nil {
		return nil, fmt.Errorf("figures: %w", err)
	}

	groupExpr := `'` + NoGroup + `'`
	if group != "" {
		cols, err := subjectColumns(ctx, db)
		if err != nil {
			return nil, err
		}
		switch {
		case slices.Contains(cols, group):
			groupExpr = fmt.Sprintf(`coalesce(CAST(s.%s AS VARCHAR), 'n/a')`, quoteIdent(group))
			d.Group = group
		case defaultGroup:
			d.Notes = append(d.Notes, fmt.Sprintf("the subjects table has no column %q; every series is drawn as one group (choose a column with --group)", group))
		default:
			return nil, usagef("the subjects table has no column %q; its covariates are: %s", group, strings.Join(cols, ", "))
		}
	}
	from := func(table string) string {
		return fmt.Sprintf(`FROM %s x LEFT JOIN subjects s ON s.analysis_id = x.analysis_id AND s.subject_id = x.subject_id
			WHERE x.analysis_id = %d`, table, d.AnalysisID)
	}
	if err := d.loadGroups(ctx, db, groupExpr, from("inputs")); err != nil {
		return nil, err
	}
	for _, step := range []func() error{
		func() error { return d.loadBetti(ctx, db, groupExpr, from("betti_curves")) },
		func() error { return d.loadElbow(ctx, db) },
		func() error { return d.loadMetrics(ctx, db, groupExpr, from("state_metrics")) },
		func() error { return d.loadTransitions(ctx, db, groupExpr, from("transitions")) },
		func() error { return d.loadCentroids(ctx, db) },
		func() error { return d.loadRegionNames(ctx, db) },
	} {
		if err := step(); err != nil {
			return nil, fmt.Errorf("figures: analysis %q: %w", d.Name, err)
		}
	}
	return d, nil
}

func subjectColumns(ctx context.Context, db *sql.DB) ([]string, error) {
	rows, err := db.QueryContext(ctx, `SELECT column_name FROM information_schema.columns
		WHERE table_name = 'subjects' AND column_name NOT IN ('analysis_id', 'subject_id') ORDER BY ordinal_position`)
	if err != nil {
		return nil, fmt.Errorf("figures: %w", err)
	}
	defer rows.Close()
	var out []string
	for rows.Next() {
		var n string
		if err := rows.Scan(&n); err != nil {
			return nil, fmt.Errorf("figures: %w", err)
		}
		out = append(out, n)
	}
	return out, rows.Err()
}

func (d *Data) loadGroups(ctx context.Context, db *sql.DB, groupExpr, from string) error {
	rows, err := db.QueryContext(ctx, `SELECT `+groupExpr+` AS g, count(*), count(DISTINCT x.subject_id) `+from+` GROUP BY g ORDER BY g`)
	if err != nil {
		return fmt.Errorf("figures: %w", err)
	}
	defer rows.Close()
	d.groupIndex = map[string]int{}
	for rows.Next() {
		var g Group
		if err := rows.Scan(&g.Name, &g.Series, &g.Subjects); err != nil {
			return fmt.Errorf("figures: %w", err)
		}
		d.groupIndex[g.Name] = len(d.Groups)
		d.Groups = append(d.Groups, g)
	}
	if err := rows.Err(); err != nil {
		return fmt.Errorf("figures: %w", err)
	}
	if len(d.Groups) > MaxGroups {
		return usagef("column %q has %d values; the figures compare at most %d groups (choose a grouping column with --group)", d.Group, len(d.Groups), MaxGroups)
	}
	if len(d.Groups) == 0 {
		return fmt.Errorf("figures: analysis %q has no series", d.Name)
	}
	return nil
}

func (d *Data) group(name string) (int, error) {
	g, ok := d.groupIndex[name]
	if !ok {
		return 0, fmt.Errorf("group %q has results but no inputs", name)
	}
	return g, nil
}

func (d *Data) loadBetti(ctx context.Context, db *sql.DB, groupExpr, from string) error {
	rows, err := db.QueryContext(ctx, `SELECT x.state, x.dimension, `+groupExpr+` AS g, x.threshold,
			avg(x.betti), coalesce(stddev_samp(x.betti), 0), count(*)
		`+from+` GROUP BY ALL ORDER BY x.state, x.dimension, g, x.threshold`)
	if err != nil {
		return err
	}
	defer rows.Close()
	var cur *Curve
	for rows.Next() {
		var st, dim, n int
		var g string
		var e, mean, sd float64
		if err := rows.Scan(&st, &dim, &g, &e, &mean, &sd, &n); err != nil {
			return err
		}
		gi, err := d.group(g)
		if err != nil {
			return err
		}
		if cur == nil || cur.State != st || cur.Dim != dim || cur.Group != gi {
			d.Betti = append(d.Betti, Curve{State: st, Dim: dim, Group: gi, N: n})
			cur = &d.Betti[len(d.Betti)-1]
		}
		cur.Threshold = append(cur.Threshold, e)
		cur.Mean = append(cur.Mean, mean)
		cur.SE = append(cur.SE, sd/math.Sqrt(float64(n)))
	}
	return rows.Err()
}

func (d *Data) loadElbow(ctx context.Context, db *sql.DB) error {
	rows, err := db.QueryContext(ctx, `SELECT k, wcss, chosen, chord_pick, second_diff_pick FROM elbow
		WHERE analysis_id = ? ORDER BY k`, d.AnalysisID)
	if err != nil {
		return err
	}
	defer rows.Close()
	for rows.Next() {
		var e ElbowPoint
		if err := rows.Scan(&e.K, &e.WCSS, &e.Chosen, &e.Chord, &e.SecondDf); err != nil {
			return err
		}
		d.Elbow = append(d.Elbow, e)
	}
	if err := rows.Err(); err != nil {
		return err
	}
	if len(d.Elbow) == 0 {
		d.Notes = append(d.Notes, "k was fixed with --states, so there is no elbow curve to draw")
	}
	return nil
}

func (d *Data) loadMetrics(ctx context.Context, db *sql.DB, groupExpr, from string) error {
	rows, err := db.QueryContext(ctx, `SELECT x.state, `+groupExpr+` AS g, x.occupancy, x.mean_dwell_seconds
		`+from+` ORDER BY x.state, g, x.subject_id, x.session_id`)
	if err != nil {
		return err
	}
	defer rows.Close()
	d.Occupancy = make([][][]float64, d.States)
	d.Dwell = make([][][]float64, d.States)
	for s := range d.States {
		d.Occupancy[s] = make([][]float64, len(d.Groups))
		d.Dwell[s] = make([][]float64, len(d.Groups))
	}
	for rows.Next() {
		var st int
		var g string
		var occ float64
		var dwell sql.NullFloat64
		if err := rows.Scan(&st, &g, &occ, &dwell); err != nil {
			return err
		}
		gi, err := d.group(g)
		if err != nil {
			return err
		}
		if st < 1 || st > d.States {
			return fmt.Errorf("state %d outside 1..%d", st, d.States)
		}
		d.Occupancy[st-1][gi] = append(d.Occupancy[st-1][gi], occ)
		if dwell.Valid {
			d.Dwell[st-1][gi] = append(d.Dwell[st-1][gi], dwell.Float64)
		}
	}
	return rows.Err()
}

func (d *Data) loadTransitions(ctx context.Context, db *sql.DB, groupExpr, from string) error {
	k := d.States
	d.Transitions = make([][][]float64, len(d.Groups))
	d.TransN = make([][][]int, len(d.Groups))
	for g := range d.Groups {
		d.Transitions[g] = make([][]float64, k)
		d.TransN[g] = make([][]int, k)
		for i := range k {
			d.Transitions[g][i] = make([]float64, k)
			d.TransN[g][i] = make([]int, k)
			for j := range k {
				d.Transitions[g][i][j] = math.NaN()
			}
		}
	}
	rows, err := db.QueryContext(ctx, `SELECT `+groupExpr+` AS g, x.from_state, x.to_state, avg(x.probability), count(x.probability)
		`+from+` GROUP BY ALL`)
	if err != nil {
		return err
	}
	defer rows.Close()
	for rows.Next() {
		var g string
		var i, j, n int
		var p sql.NullFloat64
		if err := rows.Scan(&g, &i, &j, &p, &n); err != nil {
			return err
		}
		gi, err := d.group(g)
		if err != nil {
			return err
		}
		if i < 1 || i > k || j < 1 || j > k {
			return fmt.Errorf("transition %d -> %d outside 1..%d", i, j, k)
		}
		if p.Valid {
			d.Transitions[gi][i-1][j-1] = p.Float64
		}
		d.TransN[gi][i-1][j-1] = n
	}
	return rows.Err()
}

func (d *Data) loadCentroids(ctx context.Context, db *sql.DB) error {
	p := d.Regions
	d.Centroids = make([][][]float64, d.States)
	for s := range d.Centroids {
		m := make([][]float64, p)
		for i := range m {
			m[i] = make([]float64, p)
			for j := range m[i] {
				m[i][j] = math.NaN()
			}
		}
		d.Centroids[s] = m
	}
	rows, err := db.QueryContext(ctx, `SELECT state, i, j, weight FROM state_centroids WHERE analysis_id = ?`, d.AnalysisID)
	if err != nil {
		return err
	}
	defer rows.Close()
	for rows.Next() {
		var s, i, j int
		var w float64
		if err := rows.Scan(&s, &i, &j, &w); err != nil {
			return err
		}
		if s < 1 || s > d.States || i < 1 || j < 1 || i > p || j > p {
			return fmt.Errorf("centroid entry (state %d, %d, %d) outside %d states x %d regions", s, i, j, d.States, p)
		}
		d.Centroids[s-1][i-1][j-1] = w
		d.Centroids[s-1][j-1][i-1] = w
	}
	return rows.Err()
}

// loadRegionNames reads the names of the regions in the networks (table
// regions, by region_index). It leaves RegionNames nil when the indexes do
// not run 1..Regions or when every name is the one ingest generates for a
// .npy column without names (region_001, ...): such names say no more
// than the number.
func (d *Data) loadRegionNames(ctx context.Context, db *sql.DB) error {
	rows, err := db.QueryContext(ctx, `SELECT region_index, column_index, region_name FROM regions
		WHERE analysis_id = ? AND region_index IS NOT NULL ORDER BY region_index`, d.AnalysisID)
	if err != nil {
		return err
	}
	defer rows.Close()
	var names []string
	generated := true
	for rows.Next() {
		var idx, col int
		var name string
		if err := rows.Scan(&idx, &col, &name); err != nil {
			return err
		}
		if idx != len(names)+1 {
			return fmt.Errorf("table regions: region_index %d follows %d", idx, len(names))
		}
		names = append(names, name)
		generated = generated && name == fmt.Sprintf("region_%03d", col)
	}
	if err := rows.Err(); err != nil {
		return err
	}
	if len(names) == d.Regions && !generated {
		d.RegionNames = names
	}
	return nil
}
