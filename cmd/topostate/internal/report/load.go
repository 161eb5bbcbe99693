package report

import (
	"bytes"
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"html/template"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/topostate/topostate/cmd/topostate/internal/figures"
	"github.com/topostate/topostate/queries"
)

// Options say which analysis a report shows and how its tests run.
type Options struct {
	// Analysis is the analysis name; "" means the only analysis in the file.
	Analysis string
	// Group is the subjects column whose values are the groups; "" puts
	// every series in one group (no contrasts). DefaultGroup says Group is
	// the command's default, so a missing column is a note, not an error.
	Group        string
	DefaultGroup bool
	// NPerm is the number of relabellings of every permutation test but
	// the Betti-curve test; 0 means 9999 (the bundled queries' default).
	NPerm int
	// CurveNPerm is the number of relabellings of the Betti-curve test
	// (filtration_tests_by_group); 0 means 999, that query's default: its
	// relabellings each sum hundreds of whole curves, so it costs about the
	// subjects times the grid times CurveNPerm per state and dimension.
	CurveNPerm int
	// Seed is the permutation seed handed to the bundled queries; 0 means 1.
	Seed int64
	// DBPath is the warehouse path as the user gave it, for the commands
	// that reproduce each table ("" shows FILE).
	DBPath string
	// Caution is the research-use caution shown at the top and the foot.
	Caution string
	// Generator names the program writing the report (footer).
	Generator string
	// MaxCovariates bounds the numeric covariates whose associations are
	// tested; 0 means 12.
	MaxCovariates int
	// AdjustAll, "bh" or "by", adds to every inferential table a column
	// adjusted across all of the report's inferential p-values at once
	// (familyColumns); "" adds none (each table keeps its own BH family).
	AdjustAll string
	// Adjust lists subjects columns to adjust the group contrasts for
	// (adjusted_group_contrast); nil: no adjusted table.
	Adjust []string
}

// Report is everything the page shows; Build fills it, Render writes it.
type Report struct {
	Caution   string
	Generator string
	Analysis  Analysis
	Settings  []Setting
	Cohort    Cohort
	Elbow     Elbow
	Figures   map[string]Figure
	// Contrasts holds one entry per pair of groups (sorted names, the first
	// is side a of the bundled queries).
	Contrasts     []Contrast
	NoContrast    string // why there are no contrasts, when there are none
	StatePairs    *Table
	Surrogates    Surrogates
	Covariates    []*Table
	CovariateNote string
	AllTables     *AllTables // the report-wide adjustment, when asked for
	NPerm         int
	CurveNPerm    int
	Seed          int64
	Commands      []Command
	Notes         []string // what was left out, for the command to print
	// Adjust and Adjusted: the covariates of the adjusted group contrasts
	// and their tables (adjusted.go).
	Adjust   []string
	Adjusted []AdjustedContrast
}

// Analysis is the analyses row.
type Analysis struct {
	ID          int64
	Name        string
	Created     string
	ToolVersion string
	InputDir    string
	FisherZ     bool
}

// Setting is one ingest option from analyses.parameters, in stored order.
type Setting struct {
	Key, Value, Meaning string
}

// Cohort summarises what was analysed.
type Cohort struct {
	Series, Subjects, Sessions int
	RegionsRead, Regions       int
	States                     int
	Windows                    int64
	FitWindows                 int
	WindowsPerSeries           string // "min–max" windows per series
	Timepoints                 string // "min–max" time points per series
	TR                         string // repetition time(s), seconds
	GroupColumn                string // "" when every series is one group
	Groups                     []GroupRow
	Excluded                   []Excluded
	Dropped                    []string // region names left out (constant)
	RegionNames                []string // in region_index order
	Covariates                 []Covariate
}

// GroupRow is one group of the cohort.
type GroupRow struct {
	Name             string
	Series, Subjects int
	Index            int // the figures' colour of this group (class g<Index>)
}

// Excluded is one input left out under --on-bad-subject skip.
type Excluded struct {
	Subject, Session, Path, Reason string
}

// Covariate is one column of participants.tsv as stored.
type Covariate struct {
	Name, Type string
	Present    int // subjects of the analysis with a value
}

// Elbow is the choice of k.
type Elbow struct {
	Fixed      bool // k was given with --states
	Used       int
	Rule       string // --k-rule that picked k (stored k_rule; "chord" before --k-rule)
	RuleName   string // Rule in words
	Chord      int    // k of the chord-distance rule (0: none recorded)
	SecondDiff int    // k of the largest second difference (0: none recorded)
	Table      *Table
}

// Figure is one inlined SVG figure.
type Figure struct {
	ID, Heading string
	SVG         template.HTML // produced by figures.InlineSVG: text escaped there
}

// Contrast is one pair of groups compared by the bundled queries.
type Contrast struct {
	ID                            string // anchor, "contrast-1", ...
	A, B                          string
	IA, IB                        int // palette indices of A and B (classes ga<i>, gb<i>)
	Dwell, Filtration, Transition *Table
}

// Command is a command line that reproduces a table.
type Command struct {
	What string
	Args []string // shell words, quoted where needed; "--param k=v" is one word pair kept together
}

// Line is the command as one line of shell.
func (c Command) Line() string { return strings.Join(c.Args, " ") }

// Build reads analysis o.Analysis from the warehouse: db for the figures'
// data, conn (a connection of db carrying the queries package's functions
// and macros, see queries.Register) for the bundled queries and the rest.
// An unknown analysis or grouping column is an error wrapping
// figures.ErrUsage.
func Build(ctx context.Context, db *sql.DB, conn *sql.Conn, o Options) (*Report, error) {
	if o.NPerm <= 0 {
		o.NPerm = 9999
	}
	if o.CurveNPerm <= 0 {
		o.CurveNPerm = 999
	}
	if o.Seed == 0 {
		o.Seed = 1
	}
	if o.MaxCovariates <= 0 {
		o.MaxCovariates = 12
	}
	if o.DBPath == "" {
		o.DBPath = "FILE"
	}
	d, err := figures.Load(ctx, db, o.Analysis, o.Group, o.DefaultGroup)
	if err != nil {
		return nil, err
	}
	r := &Report{Caution: o.Caution, Generator: o.Generator, NPerm: o.NPerm, CurveNPerm: o.CurveNPerm, Seed: o.Seed, Notes: d.Notes}
	for _, step := range []func() error{
		func() error { return r.loadAnalysis(ctx, conn, d) },
		func() error { return r.loadCohort(ctx, conn, d) },
		func() error { return r.loadFigures(d) },
		func() error { r.loadElbow(d); return nil },
		func() error { return r.loadContrasts(ctx, conn, d, o) },
		func() error { return r.loadAdjusted(ctx, conn, d, o) },
		func() error { return r.loadStatePairs(ctx, conn, o) },
		func() error { return r.loadSurrogates(ctx, conn, o) },
		func() error { return r.loadCovariates(ctx, conn, d, o) },
		func() error {
			if o.AdjustAll == "" {
				return nil
			}
			return r.adjustAcrossTables(o.AdjustAll)
		},
	} {
		if err := step(); err != nil {
			return nil, fmt.Errorf("report: analysis %q: %w", d.Name, err)
		}
	}
	return r, nil
}

func (r *Report) loadAnalysis(ctx context.Context, conn *sql.Conn, d *figures.Data) error {
	a := &r.Analysis
	a.ID, a.Name, a.FisherZ = int64(d.AnalysisID), d.Name, d.FisherZ
	var created time.Time
	var params string
	err := conn.QueryRowContext(ctx, `SELECT created_at, tool_version, input_dir, CAST(parameters AS VARCHAR),
			n_subjects, n_regions, n_states, n_windows, fit_windows
		FROM analyses WHERE analysis_id = ?`, a.ID).Scan(&created, &a.ToolVersion, &a.InputDir, &params,
		&r.Cohort.Series, &r.Cohort.Regions, &r.Cohort.States, &r.Cohort.Windows, &r.Cohort.FitWindows)
	if err != nil {
		return err
	}
	a.Created = created.UTC().Format("2006-01-02 15:04 UTC")
	r.Settings, err = settings(params)
	return err
}

// settingMeaning explains the ingest options stored in analyses.parameters
// (the JSON names of ingest.Options).
var settingMeaning = map[string]string{
	"input":              "cohort folder read",
	"tr_seconds_option":  "repetition time given on the command line, s (0: each file's sidecar or header)",
	"window":             "sliding-window width, time points",
	"step":               "step between window starts, time points",
	"window_seconds":     "sliding-window width in seconds; each series gets round(window_seconds / its TR) time points (0: window)",
	"step_seconds":       "step between window starts in seconds, with window_seconds (0: step)",
	"taper":              "window weights: none (rectangle) or gauss (rectangle convolved with a Gaussian)",
	"taper_sigma":        "Gaussian sigma of the taper, time points",
	"detrend":            "a linear trend removed from every region first",
	"smooth_k":           "cosine-series terms kept (0: no smoothing)",
	"smooth_sigma":       "heat-kernel weight of the cosine smoothing",
	"fisher_z":           "windows clustered as Fisher z = atanh(r)",
	"states":             "number of states fixed by the user (0: chosen from the scan by k_rule)",
	"states_min":         "smallest k of the scan",
	"states_max":         "largest k of the scan",
	"k_rule":             "rule that picked k from the scan: strength (prediction strength), gap, chord or second-diff (absent: chord)",
	"strength_splits":    "prediction strength: random halvings of the fitting windows",
	"strength_windows":   "prediction strength: most fitting windows used",
	"strength_threshold": "prediction strength a k must reach to be picked",
	"strength_halving":   "prediction strength: what a halving keeps together: window (each window on its own) or subject (all of a subject's windows in one half)",
	"scan_restarts":      "k-means restarts per k of the scan (0: restarts)",
	"min_freq_hz":        "slowest frequency the series keep, Hz; sets the default window (1 / (min_freq_hz x TR) time points)",
	"fit_memory_bytes":   "most bytes of fitting windows (0: only fit_windows bounds them)",
	"core_timepoints":    "core time points per subject and state for the group topology test (0: the window width; with window_seconds, the widest window in points of any series)",
	"gap_references":     "uniform reference sets of the gap statistic (B)",
	"gap_windows":        "most fitting windows used by the gap statistic",
	"restarts":           "k-means restarts; the lowest within-cluster sum of squares is kept",
	"max_iter":           "k-means iterations at most",
	"seed":               "random seed of sampling and k-means",
	"distance":           "k-means distance: euclidean (squared Euclidean, means) or manhattan (L1, medians)",
	"fit_windows":        "most windows used to fit the states",
	"fit_sample":         "windows the states were fitted on: peaks (local maxima of each series' window variance) or all",
	"grid":               "Betti-curve thresholds lo:hi:n, correlation scale",
	"on_bad_subject":     "a series with problems stops the run (fail) or is left out (skip)",
	"constant_region":    "a constant region stops the run (fail) or is dropped everywhere (drop)",
	"atlas":              "label image the region means of NIfTI inputs came from",
	"atlas_labels":       "label table naming the atlas regions",
}

// settings reads a JSON object's members in their stored order; scalar
// values are shown as text, others as compact JSON.
func settings(text string) ([]Setting, error) {
	dec := json.NewDecoder(strings.NewReader(text))
	dec.UseNumber()
	if t, err := dec.Token(); err != nil || t != json.Delim('{') {
		return nil, fmt.Errorf("analyses.parameters is not a JSON object: %.60q", text)
	}
	var out []Setting
	for dec.More() {
		t, err := dec.Token()
		if err != nil {
			return nil, fmt.Errorf("analyses.parameters: %w", err)
		}
		key, _ := t.(string)
		var raw json.RawMessage
		if err := dec.Decode(&raw); err != nil {
			return nil, fmt.Errorf("analyses.parameters %s: %w", key, err)
		}
		var v any
		dec2 := json.NewDecoder(bytes.NewReader(raw))
		dec2.UseNumber()
		if err := dec2.Decode(&v); err != nil {
			return nil, fmt.Errorf("analyses.parameters %s: %w", key, err)
		}
		val := string(raw)
		switch x := v.(type) {
		case string:
			val = x
		case json.Number:
			val = x.String()
		case bool:
			val = strconv.FormatBool(x)
		case nil:
			val = "null"
		}
		key, val = currentSetting(key, val)
		out = append(out, Setting{Key: key, Value: val, Meaning: settingMeaning[key]})
	}
	// With window_seconds each series has its own window in points
	// (inputs.window_points); the stored window is then the --min-freq
	// window, which no series used, and must not read as the width.
	for _, s := range out {
		if s.Key != "window_seconds" {
			continue
		}
		if f, err := strconv.ParseFloat(s.Value, 64); err != nil || !(f > 0) {
			break
		}
		for i := range out {
			if out[i].Key == "window" {
				out[i].Meaning = "not used: window_seconds gives each series its own width in time points (inputs.window_points)"
			}
		}
	}
	return out, nil
}

// currentSetting shows a setting stored by an older analysis under its
// current name and value: the boolean fitting-sample key as fit_sample
// (true: peaks, false: all) and the older distance names as euclidean and
// manhattan, the way ingest reads them (ingest.Options.UnmarshalJSON).
func currentSetting(key, val string) (string, string) {
	switch {
	case key == "exempl"+"ars" && val == "true":
		return "fit_sample", "peaks"
	case key == "exempl"+"ars" && val == "false":
		return "fit_sample", "all"
	case key == "distance" && val == "sqeuclidean":
		return key, "euclidean"
	case key == "distance" && val == "cityblock":
		return key, "manhattan"
	}
	return key, val
}

func quoteIdent(s string) string { return `"` + strings.ReplaceAll(s, `"`, `""`) + `"` }

func (r *Report) loadCohort(ctx context.Context, conn *sql.Conn, d *figures.Data) error {
	c := &r.Cohort
	id := r.Analysis.ID
	var wMin, wMax, tMin, tMax sql.NullInt64
	var trMin, trMax sql.NullFloat64
	err := conn.QueryRowContext(ctx, `SELECT count(DISTINCT subject_id), count(DISTINCT nullif(session_id, '')),
			min(timepoints), max(timepoints), min(tr_seconds), max(tr_seconds)
		FROM inputs WHERE analysis_id = ?`, id).Scan(&c.Subjects, &c.Sessions, &tMin, &tMax, &trMin, &trMax)
	if err != nil {
		return err
	}
	if err := conn.QueryRowContext(ctx, `SELECT min(n_windows), max(n_windows) FROM subject_dynamics WHERE analysis_id = ?`, id).Scan(&wMin, &wMax); err != nil {
		return err
	}
	c.Timepoints = span(tMin, tMax)
	c.WindowsPerSeries = span(wMin, wMax)
	if trMin.Valid {
		c.TR = strconv.FormatFloat(trMin.Float64, 'g', -1, 64)
		if trMax.Float64 != trMin.Float64 {
			c.TR += "–" + strconv.FormatFloat(trMax.Float64, 'g', -1, 64)
		}
	}

	// Groups: the figures' groups (same names, same colours), with the
	// subjects counted here. The column name was checked by figures.Load
	// against the subjects table and is quoted as an identifier.
	c.GroupColumn = d.Group
	groupExpr := `'` + figures.NoGroup + `'`
	if d.Group != "" {
		groupExpr = `coalesce(CAST(s.` + quoteIdent(d.Group) + ` AS VARCHAR), 'n/a')`
	}
	subjects := map[string]int{}
	err = scanAll(ctx, conn, `SELECT `+groupExpr+` AS g, count(DISTINCT x.subject_id)
		FROM inputs x LEFT JOIN subjects s ON s.analysis_id = x.analysis_id AND s.subject_id = x.subject_id
		WHERE x.analysis_id = ? GROUP BY g`, []any{id}, func(rows *sql.Rows) error {
		var g string
		var n int
		err := rows.Scan(&g, &n)
		subjects[g] = n
		return err
	})
	if err != nil {
		return err
	}
	for i, g := range d.Groups {
		c.Groups = append(c.Groups, GroupRow{Name: g.Name, Series: g.Series, Subjects: subjects[g.Name], Index: i})
	}

	err = scanAll(ctx, conn, `SELECT subject_id, session_id, path, reason FROM excluded_inputs
		WHERE analysis_id = ? ORDER BY subject_id, session_id, path`, []any{id}, func(rows *sql.Rows) error {
		var e Excluded
		err := rows.Scan(&e.Subject, &e.Session, &e.Path, &e.Reason)
		c.Excluded = append(c.Excluded, e)
		return err
	})
	if err != nil {
		return err
	}
	err = scanAll(ctx, conn, `SELECT region_name, dropped FROM regions WHERE analysis_id = ?
		ORDER BY dropped, region_index, column_index`, []any{id}, func(rows *sql.Rows) error {
		var name string
		var dropped bool
		err := rows.Scan(&name, &dropped)
		if dropped {
			c.Dropped = append(c.Dropped, name)
		} else {
			c.RegionNames = append(c.RegionNames, name)
		}
		c.RegionsRead++
		return err
	})
	if err != nil {
		return err
	}

	var names []string
	err = scanAll(ctx, conn, `SELECT column_name, data_type FROM information_schema.columns
		WHERE table_name = 'subjects' AND column_name NOT IN ('analysis_id', 'subject_id') ORDER BY ordinal_position`, nil,
		func(rows *sql.Rows) error {
			var cv Covariate
			err := rows.Scan(&cv.Name, &cv.Type)
			c.Covariates = append(c.Covariates, cv)
			names = append(names, cv.Name)
			return err
		})
	if err != nil || len(names) == 0 {
		return err
	}
	// One count per covariate without naming any column in SQL text.
	row := conn.QueryRowContext(ctx, `SELECT count(COLUMNS(* EXCLUDE (analysis_id, subject_id))) FROM subjects
		WHERE analysis_id = ? AND subject_id IN (SELECT subject_id FROM inputs WHERE analysis_id = ?)`, id, id)
	counts := make([]any, len(names))
	for i := range counts {
		counts[i] = &c.Covariates[i].Present
	}
	return row.Scan(counts...)
}

// span writes "lo" or "lo–hi".
func span(lo, hi sql.NullInt64) string {
	switch {
	case !lo.Valid:
		return "–"
	case lo.Int64 == hi.Int64:
		return strconv.FormatInt(lo.Int64, 10)
	}
	return fmt.Sprintf("%d–%d", lo.Int64, hi.Int64)
}

func scanAll(ctx context.Context, conn *sql.Conn, q string, args []any, each func(*sql.Rows) error) error {
	rows, err := conn.QueryContext(ctx, q, args...)
	if err != nil {
		return err
	}
	defer rows.Close()
	for rows.Next() {
		if err := each(rows); err != nil {
			return err
		}
	}
	return rows.Err()
}

// figureOrder is the order and anchor of the figures on the page.
var figureOrder = []string{"elbow", "centroids", "occupancy", "dwell", "transitions", "betti0", "betti1"}

func (r *Report) loadFigures(d *figures.Data) error {
	figs, err := figures.Figures(d)
	if err != nil {
		return err
	}
	r.Figures = map[string]Figure{}
	for _, f := range figs {
		if !slices.Contains(figureOrder, f.Name) {
			continue
		}
		b, err := f.InlineSVG("figure")
		if err != nil {
			return err
		}
		// The canvas escapes every text it draws (figures.InlineSVG).
		r.Figures[f.Name] = Figure{ID: "fig-" + f.Name, Heading: f.Heading, SVG: template.HTML(b)}
	}
	return nil
}

func (r *Report) loadElbow(d *figures.Data) {
	e := &r.Elbow
	e.Used = d.States
	e.Rule = d.KRule
	e.RuleName = map[string]string{"strength": "prediction strength", "gap": "the gap statistic",
		"chord": "the chord rule", "second-diff": "the largest second difference"}[d.KRule]
	if e.RuleName == "" {
		e.RuleName = "rule " + d.KRule
	}
	if len(d.Elbow) == 0 {
		e.Fixed = true
		return
	}
	t := &Table{ID: "t-elbow", Head: []Head{
		{"k", "number of states fitted"},
		{"within-cluster sum of squares", "of the fitting windows (elbow.wcss)"},
		{"chord rule", "farthest point from the chord of the normalised curve"},
		{"second difference", "largest second difference of the curve"},
		{"used", "the k of this analysis"},
	}}
	mark := func(col string, b bool) Cell {
		c := Cell{Class: "mark", Parts: []Part{{Col: col, V: strconv.FormatBool(b)}}}
		if b {
			c.Parts[0].Text = "✓"
		}
		return c
	}
	for _, p := range d.Elbow {
		if p.Chord {
			e.Chord = p.K
		}
		if p.SecondDf {
			e.SecondDiff = p.K
		}
		row := Row{Key: "k=" + strconv.Itoa(p.K), Cells: []Cell{
			intCell("k", int64(p.K)), numCell("wcss", p.WCSS, sig),
			mark("chord_pick", p.Chord), mark("second_diff_pick", p.SecondDf), mark("chosen", p.Chosen),
		}}
		if p.Chosen {
			row.Class = "chosen"
		}
		t.Rows = append(t.Rows, row)
	}
	e.Table = t
}

// contrastGroups are the groups the bundled queries can compare: the
// figures' groups without the "n/a" of series with no value.
func contrastGroups(d *figures.Data) []int {
	var out []int
	for i, g := range d.Groups {
		if d.Group != "" && g.Name != "n/a" {
			out = append(out, i)
		}
	}
	return out
}

func (r *Report) loadContrasts(ctx context.Context, conn *sql.Conn, d *figures.Data, o Options) error {
	gs := contrastGroups(d)
	switch {
	case d.Group == "":
		r.NoContrast = "The series were not split into groups (no grouping column), so there are no group contrasts."
		return nil
	case len(gs) < 2:
		r.NoContrast = fmt.Sprintf("Column %q has fewer than two values among the analysed series, so there are no group contrasts.", d.Group)
		return nil
	}
	aid := strconv.FormatInt(r.Analysis.ID, 10)
	nperm, seed := strconv.Itoa(o.NPerm), strconv.FormatInt(o.Seed, 10)
	for x := range gs {
		for y := x + 1; y < len(gs); y++ {
			a, b := d.Groups[gs[x]].Name, d.Groups[gs[y]].Name
			c := Contrast{ID: fmt.Sprintf("contrast-%d", len(r.Contrasts)+1), A: a, B: b,
				IA: gs[x], IB: gs[y]}
			params := map[string]string{"analysis": aid, "group_column": d.Group, "group_a": a, "group_b": b}
			withPerm := map[string]string{"n_perm": nperm, "seed": seed}
			curvePerm := map[string]string{"n_perm": strconv.Itoa(o.CurveNPerm), "seed": seed}
			for k, v := range params {
				withPerm[k] = v
				curvePerm[k] = v
			}
			res, err := runQuery(ctx, conn, "state_dwell_by_group", withPerm)
			if err != nil {
				return err
			}
			c.Dwell = dwellTable(c.ID, a, b, res)
			r.command(o, fmt.Sprintf("occupancy and dwell time, %s vs %s", a, b), "state_dwell_by_group", withPerm)
			if res, err = runQuery(ctx, conn, "filtration_tests_by_group", curvePerm); err != nil {
				return err
			}
			c.Filtration = filtrationTable(c.ID, res)
			r.command(o, fmt.Sprintf("Betti-curve and filtration tests, %s vs %s", a, b), "filtration_tests_by_group", curvePerm)
			if res, err = runQuery(ctx, conn, "transitions_by_group", params); err != nil {
				return err
			}
			c.Transition = transitionTable(c.ID, a, b, r.Cohort.States, res)
			r.command(o, fmt.Sprintf("transition matrices, %s vs %s", a, b), "transitions_by_group", params)
			r.Contrasts = append(r.Contrasts, c)
		}
	}
	r.Notes = append(r.Notes, "the pooled-event KS distance of filtration_tests_by_group (a description, not a test) was left out; "+
		"the report's command for that query with --param pooled_events=1 gives it")
	return nil
}

func (r *Report) loadStatePairs(ctx context.Context, conn *sql.Conn, o Options) error {
	if r.Cohort.States < 2 {
		return nil
	}
	params := map[string]string{"analysis": strconv.FormatInt(r.Analysis.ID, 10)}
	res, err := runQuery(ctx, conn, "state_pairs_ks", params)
	if err != nil {
		return err
	}
	r.StatePairs = statePairsTable(res)
	r.command(o, "how distinct the states' networks are", "state_pairs_ks", params)
	return nil
}

func (r *Report) loadCovariates(ctx context.Context, conn *sql.Conn, d *figures.Data, o Options) error {
	var numeric []string
	for _, c := range r.Cohort.Covariates {
		if c.Name != d.Group && c.Present >= 3 && numericType(c.Type) {
			numeric = append(numeric, c.Name)
		}
	}
	if len(numeric) > o.MaxCovariates {
		r.CovariateNote = fmt.Sprintf("The first %d of %d numeric covariates are shown; run covariate_association for the others.", o.MaxCovariates, len(numeric))
		numeric = numeric[:o.MaxCovariates]
	}
	for i, name := range numeric {
		params := map[string]string{"analysis": strconv.FormatInt(r.Analysis.ID, 10), "covariate": name}
		res, err := runQuery(ctx, conn, "covariate_association", params)
		if err != nil {
			return err
		}
		r.Covariates = append(r.Covariates, covariateTable(fmt.Sprintf("t-cov-%d", i+1), name, res))
		r.command(o, "association with "+name, "covariate_association", params)
	}
	return nil
}

func numericType(t string) bool {
	switch strings.ToUpper(t) {
	case "TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT", "UINTEGER", "UBIGINT", "FLOAT", "DOUBLE", "REAL":
		return true
	}
	return strings.HasPrefix(strings.ToUpper(t), "DECIMAL")
}

// command records the topostate query line that reproduces a table.
func (r *Report) command(o Options, what, query string, params map[string]string) {
	args := []string{"topostate", "query", "--db " + shellQuote(o.DBPath), query}
	keys := make([]string, 0, len(params))
	for k := range params {
		keys = append(keys, k)
	}
	order := []string{"analysis", "group_column", "group_a", "group_b", "covariate", "adjust", "n_perm", "seed"}
	slices.SortFunc(keys, func(x, y string) int { return slices.Index(order, x) - slices.Index(order, y) })
	for _, k := range keys {
		args = append(args, "--param "+shellQuote(k+"="+params[k]))
	}
	r.Commands = append(r.Commands, Command{What: what, Args: args})
}

// shellQuote quotes s for a POSIX shell when it holds anything but plain
// characters.
func shellQuote(s string) string {
	plain := s != "" && strings.IndexFunc(s, func(c rune) bool {
		return !(c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9' || strings.ContainsRune("_./:=,@+-", c))
	}) < 0
	if plain {
		return s
	}
	return "'" + strings.ReplaceAll(s, "'", `'\''`) + "'"
}

// result is a query's output: column names and rows by column name.
type result struct {
	cols []string
	rows []map[string]any
}

// runQuery runs a bundled query through the queries package's runner
// (parameters bound as DuckDB variables).
func runQuery(ctx context.Context, conn *sql.Conn, name string, params map[string]string) (*result, error) {
	q, err := queries.Lookup(queries.FS, name)
	if err != nil {
		return nil, err
	}
	rows, err := queries.Run(ctx, conn, q, params)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	cols, err := rows.Columns()
	if err != nil {
		return nil, err
	}
	res := &result{cols: cols}
	for rows.Next() {
		vals := make([]any, len(cols))
		ptrs := make([]any, len(cols))
		for i := range vals {
			ptrs[i] = &vals[i]
		}
		if err := rows.Scan(ptrs...); err != nil {
			return nil, fmt.Errorf("%s: %w", name, err)
		}
		m := make(map[string]any, len(cols))
		for i, c := range cols {
			m[c] = vals[i]
		}
		res.rows = append(res.rows, m)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("%s: %w", name, err)
	}
	return res, nil
}
