package main

import (
	"context"
	"database/sql"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"sort"
	"strconv"
	"strings"
	"sync"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/ingest"
	"github.com/topostate/topostate/queries"
)

// Null kinds of docs/methods.md §11-§12.
const (
	NullNone  = "a" // two groups, nothing differs
	NullDwell = "b" // groups differ only in dwell time (--group-effect)
	NullOne   = "c" // one latent state (--states 1)
	// Power is no null: null (a) with a network difference added to group
	// B (Config.NetworkEffect), to measure what a test detects.
	Power = "power"
)

// NullNames describes each null kind for the printed table.
var NullNames = map[string]string{
	NullNone:  "(a) nothing differs",
	NullDwell: "(b) dwell only",
	NullOne:   "(c) one state",
	Power:     "network difference (power)",
}

// Config sets the size of the simulated cohorts and of the run.
type Config struct {
	Replicates int      // cohorts per null kind
	Nulls      []string // null kinds to run, of NullNone, NullDwell, NullOne
	// Simulator (compute.CohortSpec; AR(1) autocorrelation at its
	// default). States is the number of latent states of nulls (a) and (b);
	// null (c) has one.
	Subjects, Regions, Timepoints, States int
	Stickiness, GroupEffect               float64
	// Ingest: window length, the fixed number of fitted states (the same
	// for every null kind: under (c) the states are an arbitrary split of
	// one stationary process), k-means restarts and the Betti grid.
	Window, FitStates, Restarts int
	Grid                        string
	CoreTimepoints              int    // ingest --core-timepoints (0: the window width)
	NPerm                       int    // n_perm of every query that declares it
	Seed                        uint64 // replicate r of every null kind uses Seed + r
	Parallel                    int    // replicates run at once
	Dir                         string // scratch folder ("" : the system's)
	Alpha                       float64
	Log                         io.Writer // progress lines; nil for none
	// NetworkEffect is the size of the network difference of the Power
	// kind: in group B, while the latent state is the first one, regions
	// 1-4 get a shared white component of variance NetworkEffect (each
	// region's own variance is 1 + noise^2), which raises their mutual
	// correlations in that state only.
	NetworkEffect float64
	// NetworkRegions is the number of regions (from the first) that share
	// the component; 0 means 4.
	NetworkRegions int
	// NetworkAll adds the component in every latent state rather than
	// the first only.
	NetworkAll bool
	// Extra are further queries to count beside the bundled ones (e.g.
	// AllWindowCurveTest, the group test before core networks).
	Extra []*queries.Query
}

// AllWindowCurveTest is the Betti-curve permutation test as
// filtration_tests_by_group ran it before core networks (on the curves of
// the all-window state networks, betti_curves), kept here to measure what
// the core networks changed (docs/methods.md §7).
const AllWindowCurveTest = `-- name: all_window_curve_test
-- description: the curve permutation test on the all-window Betti curves (the former group test), for calibration only
-- param: analysis analysis = latest -- analysis
-- param: group_column column = group -- group column
-- param: group_a text -- first group
-- param: group_b text -- second group
-- param: n_perm integer = 999 -- relabellings
-- param: seed integer = 1 -- seed
WITH grp AS (
    SELECT subject_id, side
    FROM subject_groups(getvariable('analysis'), getvariable('group_column'),
                        getvariable('group_a'), getvariable('group_b'))
),
per_subject AS (
    SELECT c.subject_id, g.side, c.state, c.dimension, list(c.betti ORDER BY c.threshold) AS curve
    FROM betti_curves c JOIN grp g USING (subject_id)
    WHERE c.analysis_id = getvariable('analysis')
    GROUP BY ALL
),
curves AS (
    SELECT state, dimension,
           list(curve ORDER BY subject_id) FILTER (WHERE side = 'a') AS a,
           list(curve ORDER BY subject_id) FILTER (WHERE side = 'b') AS b
    FROM per_subject GROUP BY state, dimension
)
SELECT state, dimension,
       curve_perm_test(a, b, getvariable('n_perm')::INTEGER, getvariable('seed') + 2 * state + dimension).pvalue AS all_window_curve_perm_p
FROM curves ORDER BY state, dimension;
`

// ParseExtra parses the text of an extra query.
func ParseExtra(text string) (*queries.Query, error) {
	return queries.ParseHeader("extra.sql", text, true)
}

// pColumn is the brief's convention for an inferential p-value column:
// "p" or a name ending in "_p" (adjusted forms end in _p_bh or _p_by and
// are not counted: they are functions of the raw ones).
var pColumn = regexp.MustCompile(`^p$|_p$`)

// keyColumns name the columns that identify one test among a query's
// rows, in this order.
var keyColumns = []string{"measure", "term", "feature", "state", "state_a", "state_b", "from_state", "to_state", "dimension"}

// Key is one test: a p column of a bundled query, on one row (state,
// dimension, measure...), under one null kind.
type Key struct {
	Null, Query, Column, Row string
}

// Tally counts, over the replicates, the p-values seen (Tests) and those
// below alpha (Rejections).
type Tally struct{ Rejections, Tests int }

// Result is the outcome of a run.
type Result struct {
	Tallies map[Key]*Tally
	Skipped []string // queries with group parameters that could not be run, and why
}

// Upper95 is the largest number of rejections among n tests that is still
// consistent with a true rate alpha: the 95 % quantile of Binomial(n,
// alpha), the smallest k with P(X <= k) >= 0.95 (exact; the binomial CDF
// of gonum stat/distuv). A count above it is evidence at the 5 % level that
// the test rejects more often than alpha.
func Upper95(n int, alpha float64) int {
	return binomQuantile(n, alpha, 0.95)
}

func binomQuantile(n int, p, q float64) int {
	b := distuv.Binomial{N: float64(n), P: p}
	for k := 0; k <= n; k++ {
		if b.CDF(float64(k)) >= q {
			return k
		}
	}
	return n
}

// TailLimit is the smallest k with P(X >= k) < tail for X ~ Binomial(n,
// alpha) (gonum distuv.Binomial.Survival(k-1) = P(X > k-1)): a count of k or
// more rejections has probability below tail for a test that is exactly at
// level alpha. The default tests use it with a tiny tail so that they do not
// flake, yet still fail for a clearly anti-conservative test.
func TailLimit(n int, alpha, tail float64) int {
	b := distuv.Binomial{N: float64(n), P: alpha}
	for k := 1; k <= n; k++ {
		if b.Survival(float64(k-1)) < tail {
			return k
		}
	}
	return n + 1
}

// groupQueries returns the bundled queries that take two groups.
func groupQueries() ([]*queries.Query, error) {
	all, err := queries.List(queries.FS)
	if err != nil {
		return nil, err
	}
	var out []*queries.Query
	for _, q := range all {
		_, a := q.Param("group_a")
		_, b := q.Param("group_b")
		if a && b {
			out = append(out, q)
		}
	}
	return out, nil
}

// Run simulates cfg.Replicates cohorts of every null kind in cfg.Nulls,
// ingests each into a warehouse of its own with ingest.IntoFile (the code
// path of `topostate ingest`), runs every bundled query with group
// parameters (groups A and B of the simulator) and counts the p-values below
// alpha per test.
func Run(ctx context.Context, cfg Config) (*Result, error) {
	qs, err := groupQueries()
	if err != nil {
		return nil, err
	}
	if cfg.Alpha == 0 {
		cfg.Alpha = 0.05
	}
	if cfg.Parallel < 1 {
		cfg.Parallel = 1
	}
	scratch, err := os.MkdirTemp(cfg.Dir, "calibrate-")
	if err != nil {
		return nil, err
	}
	defer os.RemoveAll(scratch)
	res := &Result{Tallies: map[Key]*Tally{}}
	skipped := map[string]bool{}
	var mu sync.Mutex
	type job struct {
		null string
		r    int
	}
	jobs := make(chan job)
	errc := make(chan error, cfg.Parallel)
	var wg sync.WaitGroup
	for w := 0; w < cfg.Parallel; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for j := range jobs {
				if ctx.Err() != nil {
					continue
				}
				counts, skips, err := replicate(ctx, cfg, qs, j.null, j.r, filepath.Join(scratch, fmt.Sprintf("%s-%d", j.null, j.r)))
				if err != nil {
					select {
					case errc <- fmt.Errorf("null %s replicate %d: %w", j.null, j.r, err):
					default:
					}
					continue
				}
				mu.Lock()
				for k, c := range counts {
					t := res.Tallies[k]
					if t == nil {
						t = &Tally{}
						res.Tallies[k] = t
					}
					t.Rejections += c.Rejections
					t.Tests += c.Tests
				}
				for _, s := range skips {
					skipped[s] = true
				}
				mu.Unlock()
				if cfg.Log != nil && (j.r+1)%10 == 0 {
					fmt.Fprintf(cfg.Log, "null %s: replicate %d done\n", j.null, j.r+1)
				}
			}
		}()
	}
	cctx, cancel := context.WithCancel(ctx)
	defer cancel()
feed:
	for _, n := range cfg.Nulls {
		for r := 0; r < cfg.Replicates; r++ {
			select {
			case jobs <- job{n, r}:
			case err := <-errc:
				errc <- err
				cancel()
				break feed
			}
		}
	}
	close(jobs)
	wg.Wait()
	select {
	case err := <-errc:
		return nil, err
	default:
	}
	if cctx.Err() != nil && ctx.Err() != nil {
		return nil, ctx.Err()
	}
	for s := range skipped {
		res.Skipped = append(res.Skipped, s)
	}
	sort.Strings(res.Skipped)
	return res, nil
}

// Spec returns the simulator settings of null kind null, replicate r.
func (cfg Config) Spec(null string, r int) compute.CohortSpec {
	s := compute.CohortSpec{
		Subjects: cfg.Subjects, Regions: cfg.Regions, Timepoints: cfg.Timepoints, States: cfg.States,
		TR: 2, Stickiness: cfg.Stickiness, Offset: 500, Seed: cfg.Seed + uint64(r),
	}
	switch null {
	case Power:
		// as (a); the difference is added in replicate
	case NullDwell:
		s.GroupEffect = cfg.GroupEffect
	case NullOne:
		s.States = 1
	}
	return s
}

// replicate runs one cohort and returns its counts per test.
func replicate(ctx context.Context, cfg Config, qs []*queries.Query, null string, r int, dir string) (map[Key]*Tally, []string, error) {
	defer os.RemoveAll(dir)
	spec := cfg.Spec(null, r)
	subs, err := compute.SimulateCohort(spec)
	if err != nil {
		return nil, nil, err
	}
	regions := make([]string, spec.Regions)
	for j := range regions {
		regions[j] = fmt.Sprintf("r%02d", j+1)
	}
	ids := make([]string, len(subs))
	series := make([]compute.Series, len(subs))
	rows := make([]ingest.SyntheticParticipant, len(subs))
	for i, s := range subs {
		if null == Power && s.Group == "B" {
			addNetworkEffect(s, cfg.NetworkEffect, cfg.NetworkRegions, cfg.NetworkAll, spec.Seed, i)
		}
		ids[i], series[i] = s.ID, s.Series
		rows[i] = ingest.SyntheticParticipant{ID: s.ID, Cells: []string{s.Group}}
	}
	cohort := filepath.Join(dir, "cohort")
	if err := ingest.WriteCohort(cohort, regions, spec.TR, ids, series, []string{"group"}, rows); err != nil {
		return nil, nil, err
	}
	o := ingest.Defaults()
	o.Input, o.Window, o.States, o.Restarts, o.Seed, o.Workers = cohort, cfg.Window, cfg.FitStates, cfg.Restarts, spec.Seed, 1
	if cfg.Grid != "" {
		o.Grid = cfg.Grid
	}
	o.CoreTimepoints = cfg.CoreTimepoints
	wh := filepath.Join(dir, "w.duckdb")
	if _, err := ingest.IntoFile(ctx, wh, o, nil); err != nil {
		return nil, nil, err
	}
	db, err := queries.Open(ctx, wh)
	if err != nil {
		return nil, nil, err
	}
	defer db.Close()
	out := map[Key]*Tally{}
	var skips []string
	for _, q := range append(slices.Clip(qs), cfg.Extra...) {
		values := map[string]string{"analysis": "latest", "group_column": "group", "group_a": "A", "group_b": "B"}
		if _, ok := q.Param("n_perm"); ok && cfg.NPerm > 0 {
			values["n_perm"] = strconv.Itoa(cfg.NPerm)
		}
		if _, ok := q.Param("seed"); ok {
			values["seed"] = strconv.FormatUint(spec.Seed, 10)
		}
		missing := ""
		for _, p := range q.Params {
			if _, ok := values[p.Name]; !ok && !p.HasDefault {
				missing = p.Name
			}
		}
		if missing != "" {
			skips = append(skips, fmt.Sprintf("%s: required parameter %s has no calibration value", q.Name, missing))
			continue
		}
		rs, err := queries.Run(ctx, db.Conn, q, values)
		if err != nil {
			return nil, nil, err
		}
		if err := tally(rs, null, q.Name, cfg.Alpha, out); err != nil {
			return nil, nil, fmt.Errorf("%s: %w", q.Name, err)
		}
	}
	return out, skips, nil
}

// addNetworkEffect adds, while the subject's latent state is 0, a shared
// white component of variance v to the first m regions (0: 4; fewer if the
// series has fewer): their correlations in state 0 rise, in group B only.
func addNetworkEffect(s compute.SimSubject, v float64, m int, all bool, seed uint64, i int) {
	if m == 0 {
		m = 4
	}
	r := rand.New(rand.NewPCG(seed, 0xe11ec7+uint64(i)))
	sd := math.Sqrt(v)
	p := s.Series.P
	for t, st := range s.Truth {
		if st != 0 && !all {
			continue
		}
		u := sd * r.NormFloat64()
		for j := 0; j < min(m, p); j++ {
			s.Series.Data[t*p+j] += u
		}
	}
}

// tally reads a query's rows and counts its p columns per row key.
func tally(rs *sql.Rows, null, query string, alpha float64, out map[Key]*Tally) error {
	defer rs.Close()
	cols, err := rs.Columns()
	if err != nil {
		return err
	}
	var pcols, kcols []int
	for i, c := range cols {
		if pColumn.MatchString(c) {
			pcols = append(pcols, i)
		}
	}
	for _, k := range keyColumns {
		if i := slices.Index(cols, k); i >= 0 {
			kcols = append(kcols, i)
		}
	}
	row := 0
	for rs.Next() {
		v := make([]any, len(cols))
		ptr := make([]any, len(cols))
		for i := range v {
			ptr[i] = &v[i]
		}
		if err := rs.Scan(ptr...); err != nil {
			return err
		}
		row++
		var parts []string
		for _, i := range kcols {
			parts = append(parts, fmt.Sprintf("%s %v", cols[i], v[i]))
		}
		rk := strings.Join(parts, ", ")
		if len(kcols) == 0 {
			rk = fmt.Sprintf("row %d", row)
		}
		for _, i := range pcols {
			if v[i] == nil {
				continue
			}
			p, ok := v[i].(float64)
			if !ok {
				return fmt.Errorf("column %s holds %T, not a p-value", cols[i], v[i])
			}
			k := Key{null, query, cols[i], rk}
			t := out[k]
			if t == nil {
				t = &Tally{}
				out[k] = t
			}
			t.Tests++
			if p < alpha {
				t.Rejections++
			}
		}
	}
	return rs.Err()
}

// alternativeWords mark the rows of null (b) that are not a null at all:
// group B stays longer in every state, so its dwell times, switch and
// transition rates truly differ and a rejection there is power, not a false
// positive.
var alternativeWords = []string{"dwell", "switch", "transition"}

// IsNull says whether test k is a true null: every test under (a) and (c);
// under (b) every test except those of dwell, switches and transitions.
func IsNull(k Key) bool {
	if k.Null == Power {
		return false
	}
	if k.Null != NullDwell {
		return true
	}
	s := strings.ToLower(k.Column + " " + k.Row)
	for _, w := range alternativeWords {
		if strings.Contains(s, w) {
			return false
		}
	}
	return true
}

// Keys returns the tallied tests in a stable order.
func (r *Result) Keys() []Key {
	keys := make([]Key, 0, len(r.Tallies))
	for k := range r.Tallies {
		keys = append(keys, k)
	}
	sort.Slice(keys, func(i, j int) bool {
		a, b := keys[i], keys[j]
		if a.Query != b.Query {
			return a.Query < b.Query
		}
		if a.Column != b.Column {
			return a.Column < b.Column
		}
		if a.Row != b.Row {
			return a.Row < b.Row
		}
		return a.Null < b.Null
	})
	return keys
}

// test is one row of the table: a p column on one row of a query.
type test struct{ Query, Column, Row string }

// tests returns the tallied tests in a stable order.
func (r *Result) tests() []test {
	seen := map[test]bool{}
	var out []test
	for k := range r.Tallies {
		t := test{k.Query, k.Column, k.Row}
		if !seen[t] {
			seen[t] = true
			out = append(out, t)
		}
	}
	sort.Slice(out, func(i, j int) bool {
		a, b := out[i], out[j]
		if a.Query != b.Query {
			return a.Query < b.Query
		}
		if a.Column != b.Column {
			return a.Column < b.Column
		}
		return a.Row < b.Row
	})
	return out
}

// Verdict is "pass" (rejections within the binomial 95 % bound of a test
// at level alpha), "FAIL" (above it) or "power" (not a null, see IsNull).
func Verdict(k Key, t Tally, alpha float64) string {
	switch {
	case !IsNull(k):
		return "power"
	case t.Rejections > Upper95(t.Tests, alpha):
		return "FAIL"
	}
	return "pass"
}

// WriteTable prints the markdown table, one row per test (a p column on
// one row of a query) and one column per null kind: rejections / tests, the
// verdict, and the bound of the most common number of tests. It returns the
// number of FAIL cells.
func (r *Result) WriteTable(w io.Writer, nulls []string, alpha float64) (fails int) {
	fmt.Fprint(w, "| query | column | test |")
	for _, n := range nulls {
		fmt.Fprintf(w, " %s |", NullNames[n])
	}
	fmt.Fprintln(w, " bound |")
	fmt.Fprint(w, "|---|---|---|")
	for range nulls {
		fmt.Fprint(w, "---|")
	}
	fmt.Fprintln(w, "---|")
	for _, t := range r.tests() {
		fmt.Fprintf(w, "| `%s` | `%s` | %s |", t.Query, t.Column, t.Row)
		bounds := map[int]bool{}
		var bl []string
		for _, n := range nulls {
			k := Key{n, t.Query, t.Column, t.Row}
			c := r.Tallies[k]
			if c == nil {
				fmt.Fprint(w, " - |")
				continue
			}
			v := Verdict(k, *c, alpha)
			if v == "FAIL" {
				fails++
			}
			fmt.Fprintf(w, " %d/%d %s |", c.Rejections, c.Tests, v)
			if b := Upper95(c.Tests, alpha); !bounds[b] {
				bounds[b] = true
				bl = append(bl, fmt.Sprintf("%d/%d", b, c.Tests))
			}
		}
		fmt.Fprintf(w, " %s |\n", strings.Join(bl, ", "))
	}
	return fails
}
