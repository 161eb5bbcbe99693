package main

import (
	"context"
	"database/sql"
	"encoding/json"
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
	// LatentOnly skips ingest and the queries: only the reference of the
	// simulator's truth (Result.Latent) is computed, in seconds.
	LatentOnly bool
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

// nullKeyLabels is how a row key writes a NULL in a key column. A NULL
// there marks a row over every value of the column: adjusted_group_contrast's
// switch rate has state NULL (one rate per subject, over all states), and
// its key is "measure switch_rate, all states". Every column of keyColumns
// has a label (TestKeyPartNull).
var nullKeyLabels = map[string]string{
	"measure":    "all measures",
	"term":       "all terms",
	"feature":    "all features",
	"state":      "all states",
	"state_a":    "any state_a",
	"state_b":    "any state_b",
	"from_state": "from any state",
	"to_state":   "to any state",
	"dimension":  "all dimensions",
}

// keyPart writes the value v of key column col in a row key: "state 2",
// or for a NULL the column's label of nullKeyLabels.
func keyPart(col string, v any) string {
	if v == nil {
		if l, ok := nullKeyLabels[col]; ok {
			return l
		}
		return "all " + col
	}
	return fmt.Sprintf("%s %v", col, v)
}

// relabelNull rewrites, in a row key of a result saved before the NULL
// labels, the parts "<column> <nil>" (Go's %v of a NULL) as keyPart does.
func relabelNull(row string) string {
	parts := strings.Split(row, ", ")
	for i, p := range parts {
		if col, ok := strings.CutSuffix(p, " <nil>"); ok && slices.Contains(keyColumns, col) {
			parts[i] = keyPart(col, nil)
		}
	}
	return strings.Join(parts, ", ")
}

// Key is one test: a p column of a bundled query, on one row (state,
// dimension, measure...), under one null kind.
type Key struct {
	Null, Query, Column, Row string
}

// Tally counts, over the replicates, the p-values seen (Tests) and those
// below alpha (Rejections).
type Tally struct{ Rejections, Tests int }

// Moments accumulates a per-replicate value (a group difference) to give
// its mean over the replicates and the standard error of that mean.
type Moments struct {
	N          int
	Sum, SumSq float64
}

// Add adds one value.
func (m *Moments) Add(v float64) { m.N++; m.Sum += v; m.SumSq += v * v }

// Mean returns the mean, its standard error (sample SD / sqrt(N)) and
// z = mean / se (0 when se is 0 or N < 2).
func (m Moments) Mean() (mean, se, z float64) {
	if m.N == 0 {
		return math.NaN(), math.NaN(), math.NaN()
	}
	n := float64(m.N)
	mean = m.Sum / n
	if m.N < 2 {
		return mean, math.NaN(), math.NaN()
	}
	v := max(0, (m.SumSq-n*mean*mean)/(n-1))
	se = math.Sqrt(v / n)
	if se > 0 {
		z = mean / se
	}
	return mean, se, z
}

// Result is the outcome of a run.
type Result struct {
	Tallies map[Key]*Tally
	// Differences holds, per null kind and row of a query with a
	// difference column (state_dwell_by_group: mean_a - mean_b), that
	// difference over the replicates (Key.Column is "difference"): a mean
	// far from 0 under a null says the groups' estimated values differ,
	// whatever a test makes of it.
	Differences map[Key]*Moments
	// Latent is the reference of the simulator's truth: per null kind and
	// rank of a latent state (ranked by its occupancy pooled over the
	// cohort, as ingest ranks the fitted states), the Welch test of group
	// A against group B on each subject's share of time points in that
	// latent state (Key.Query "latent", Column "welch_p"), and LatentDiff
	// the difference of the group means (A - B).
	Latent     map[Key]*Tally
	LatentDiff map[Key]*Moments
	// PColumns lists, per query run, the p columns its result had (none
	// for a query without one).
	PColumns map[string][]string
	Skipped  []string // queries not run, and why
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

// Excluded names the bundled queries the harness does not run, with the
// reason. Every other bundled query is run on every replicate (those without
// a p column simply add nothing to the table), so a new query with a p
// column is counted without a change here; TestEveryQueryCounted holds that
// each bundled query is either run or listed here.
var Excluded = map[string]string{
	"surrogate_summary": "a test of the state model of one analysis against stationary surrogates, not a group test: " +
		"its null is null (c) only, and it needs surrogate runs per replicate; measured by scripts/surrcalib " +
		"(README, \"Do the states exist?\")",
}

// Covariate columns the harness writes into every simulated participants
// table, both independent of the data and of the groups, so that every
// test of a group adjusted for them, and every association with them, is
// a true null: age in years (numeric, drawn uniformly from 20..69) and sex
// (F/M, half of each group, in random order, so the design is never
// rank-deficient). NullCovariate is what covariate_association is run
// with; AdjustFor is adjusted_group_contrast's adjust.
const (
	NullCovariate = "age"
	AdjustFor     = "age,sex"
)

// paramValues returns the values the harness binds for query q on replicate
// seed seed, or the name of a required parameter it has no value for.
func paramValues(q *queries.Query, cfg Config, seed uint64) (map[string]string, string) {
	values := map[string]string{"analysis": "latest"}
	for _, p := range q.Params {
		switch p.Name {
		case "group_column":
			values[p.Name] = "group"
		case "group_a":
			values[p.Name] = "A"
		case "group_b":
			values[p.Name] = "B"
		case "covariate":
			values[p.Name] = NullCovariate
		case "adjust":
			values[p.Name] = AdjustFor
		case "n_perm":
			if cfg.NPerm > 0 {
				values[p.Name] = strconv.Itoa(cfg.NPerm)
			}
		case "seed":
			values[p.Name] = strconv.FormatUint(seed, 10)
		}
		if _, ok := values[p.Name]; !ok && !p.HasDefault {
			return nil, p.Name
		}
	}
	return values, ""
}

// noPColumn are bundled queries whose results hold no p column: they are
// run on the first replicate of each null kind only (to check that they
// still have none; one that gains a p column stops the run), not on every
// replicate, to save time.
var noPColumn = map[string]bool{
	"betti_curves_by_group": true, "state_pairs_ks": true, "subject_features": true, "transitions_by_group": true,
}

// countedQueries returns the bundled queries the harness runs: all but
// Excluded. A query with a required parameter the harness cannot fill is
// an error (add a value to paramValues or a reason to Excluded).
func countedQueries(cfg Config) ([]*queries.Query, error) {
	all, err := queries.List(queries.FS)
	if err != nil {
		return nil, err
	}
	var out []*queries.Query
	for _, q := range all {
		if _, ok := Excluded[q.Name]; ok {
			continue
		}
		if _, missing := paramValues(q, cfg, 1); missing != "" {
			return nil, fmt.Errorf("bundled query %s: required parameter %s has no calibration value (give one in paramValues, or exclude the query with its reason)", q.Name, missing)
		}
		out = append(out, q)
	}
	return out, nil
}

// Run simulates cfg.Replicates cohorts of every null kind in cfg.Nulls,
// ingests each into a warehouse of its own with ingest.IntoFile (the code
// path of `topostate ingest`), runs every bundled query with group
// parameters (groups A and B of the simulator) and counts the p-values below
// alpha per test.
func Run(ctx context.Context, cfg Config) (*Result, error) {
	qs, err := countedQueries(cfg)
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
	res := &Result{Tallies: map[Key]*Tally{}, Differences: map[Key]*Moments{}, Latent: map[Key]*Tally{},
		LatentDiff: map[Key]*Moments{}, PColumns: map[string][]string{}}
	for name, why := range Excluded {
		res.Skipped = append(res.Skipped, name+": "+why)
	}
	sort.Strings(res.Skipped)
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
				one, err := replicate(ctx, cfg, qs, j.null, j.r, filepath.Join(scratch, fmt.Sprintf("%s-%d", j.null, j.r)))
				if err != nil {
					select {
					case errc <- fmt.Errorf("null %s replicate %d: %w", j.null, j.r, err):
					default:
					}
					continue
				}
				mu.Lock()
				res.merge(one)
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
	return res, nil
}

// merge adds the counts of one replicate.
func (r *Result) merge(one *Result) {
	for k, c := range one.Tallies {
		addTally(r.Tallies, k, *c)
	}
	for k, c := range one.Latent {
		addTally(r.Latent, k, *c)
	}
	for _, pair := range []struct{ to, from map[Key]*Moments }{{r.Differences, one.Differences}, {r.LatentDiff, one.LatentDiff}} {
		for k, m := range pair.from {
			t := pair.to[k]
			if t == nil {
				t = &Moments{}
				pair.to[k] = t
			}
			t.N += m.N
			t.Sum += m.Sum
			t.SumSq += m.SumSq
		}
	}
	for q, cols := range one.PColumns {
		for _, c := range cols {
			if !slices.Contains(r.PColumns[q], c) {
				r.PColumns[q] = append(r.PColumns[q], c)
			}
		}
		if r.PColumns[q] == nil {
			r.PColumns[q] = []string{}
		}
	}
}

func addTally(m map[Key]*Tally, k Key, c Tally) {
	t := m[k]
	if t == nil {
		t = &Tally{}
		m[k] = t
	}
	t.Rejections += c.Rejections
	t.Tests += c.Tests
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

// nullCovariates returns the participants.tsv cells of the harness's two
// null covariates for the subjects of one cohort (see NullCovariate): age
// uniform on 20..69 and sex F/M, half of each group, from a generator of
// their own (seeded from the replicate's seed), so that the simulator's
// draws, and with them the series, are those without the covariates.
func nullCovariates(subs []compute.SimSubject, seed uint64) [][2]string {
	r := rand.New(rand.NewPCG(seed, 0xc0ea7))
	out := make([][2]string, len(subs))
	byGroup := map[string][]int{}
	var groups []string
	for i, s := range subs {
		out[i][0] = strconv.Itoa(20 + r.IntN(50))
		if byGroup[s.Group] == nil {
			groups = append(groups, s.Group)
		}
		byGroup[s.Group] = append(byGroup[s.Group], i)
	}
	for _, g := range groups {
		idx := byGroup[g]
		r.Shuffle(len(idx), func(i, j int) { idx[i], idx[j] = idx[j], idx[i] })
		for n, i := range idx {
			out[i][1] = "F"
			if n%2 == 1 {
				out[i][1] = "M"
			}
		}
	}
	return out
}

// replicate runs one cohort and returns its counts per test.
func replicate(ctx context.Context, cfg Config, qs []*queries.Query, null string, r int, dir string) (*Result, error) {
	defer os.RemoveAll(dir)
	spec := cfg.Spec(null, r)
	subs, err := compute.SimulateCohort(spec)
	if err != nil {
		return nil, err
	}
	out := &Result{Tallies: map[Key]*Tally{}, Differences: map[Key]*Moments{}, Latent: map[Key]*Tally{},
		LatentDiff: map[Key]*Moments{}, PColumns: map[string][]string{}}
	latentOccupancy(subs, spec.States, null, cfg.Alpha, out)
	if cfg.LatentOnly {
		return out, nil
	}
	regions := make([]string, spec.Regions)
	for j := range regions {
		regions[j] = fmt.Sprintf("r%02d", j+1)
	}
	ids := make([]string, len(subs))
	series := make([]compute.Series, len(subs))
	rows := make([]ingest.SyntheticParticipant, len(subs))
	cov := nullCovariates(subs, spec.Seed)
	for i, s := range subs {
		if null == Power && s.Group == "B" {
			addNetworkEffect(s, cfg.NetworkEffect, cfg.NetworkRegions, cfg.NetworkAll, spec.Seed, i)
		}
		ids[i], series[i] = s.ID, s.Series
		rows[i] = ingest.SyntheticParticipant{ID: s.ID, Cells: []string{s.Group, cov[i][0], cov[i][1]}}
	}
	cohort := filepath.Join(dir, "cohort")
	if err := ingest.WriteCohort(cohort, regions, spec.TR, ids, series, []string{"group", "age", "sex"}, rows); err != nil {
		return nil, err
	}
	o := ingest.Defaults()
	o.Input, o.Window, o.States, o.Restarts, o.Seed, o.Workers = cohort, cfg.Window, cfg.FitStates, cfg.Restarts, ingestSeed(spec.Seed), 1
	if cfg.Grid != "" {
		o.Grid = cfg.Grid
	}
	o.CoreTimepoints = cfg.CoreTimepoints
	wh := filepath.Join(dir, "w.duckdb")
	if _, err := ingest.IntoFile(ctx, wh, o, nil); err != nil {
		return nil, err
	}
	db, err := queries.Open(ctx, wh)
	if err != nil {
		return nil, err
	}
	defer db.Close()
	for _, q := range append(slices.Clip(qs), cfg.Extra...) {
		if noPColumn[q.Name] && r > 0 {
			continue
		}
		values, missing := paramValues(q, cfg, ingestSeed(spec.Seed))
		if missing != "" {
			return nil, fmt.Errorf("%s: required parameter %s has no calibration value", q.Name, missing)
		}
		rs, err := queries.Run(ctx, db.Conn, q, values)
		if err != nil {
			return nil, fmt.Errorf("%s: %w", q.Name, err)
		}
		if err := tally(rs, null, q.Name, cfg.Alpha, out); err != nil {
			return nil, fmt.Errorf("%s: %w", q.Name, err)
		}
		if noPColumn[q.Name] && len(out.PColumns[q.Name]) > 0 {
			return nil, fmt.Errorf("%s has p columns %v: take it out of noPColumn, so that every replicate counts them", q.Name, out.PColumns[q.Name])
		}
	}
	return out, nil
}

// latentOccupancy adds the reference of the simulator's truth to out: each
// subject's share of time points in each latent state, the latent states
// ranked by their share pooled over the cohort (most frequent first, ties
// by state number, as ingest ranks the fitted states), and per rank the
// Welch test of group A against group B (compute.WelchTTest) and the
// difference of the group means. With one latent state there is nothing
// to compare.
func latentOccupancy(subs []compute.SimSubject, k int, null string, alpha float64, out *Result) {
	if k < 2 || len(subs) == 0 {
		return
	}
	occ := make([][]float64, len(subs))
	pooled := make([]float64, k)
	for i, s := range subs {
		occ[i] = make([]float64, k)
		for _, st := range s.Truth {
			occ[i][st]++
		}
		for st := range occ[i] {
			occ[i][st] /= float64(len(s.Truth))
			pooled[st] += occ[i][st]
		}
	}
	order := make([]int, k)
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(i, j int) bool { return pooled[order[i]] > pooled[order[j]] })
	for rank, st := range order {
		var a, b []float64
		for i, s := range subs {
			if s.Group == "A" {
				a = append(a, occ[i][st])
			} else {
				b = append(b, occ[i][st])
			}
		}
		k := Key{null, "latent", "welch_p", fmt.Sprintf("latent occupancy, rank %d", rank+1)}
		if w, err := compute.WelchTTest(a, b); err == nil {
			t := Tally{Tests: 1}
			if w.PValue < alpha {
				t.Rejections = 1
			}
			addTally(out.Latent, k, t)
		}
		k.Column = "difference"
		m := out.LatentDiff[k]
		if m == nil {
			m = &Moments{}
			out.LatentDiff[k] = m
		}
		m.Add(mean(a) - mean(b))
	}
}

func mean(x []float64) float64 {
	s := 0.0
	for _, v := range x {
		s += v
	}
	return s / float64(len(x))
}

// ingestSeed is the seed of the ingest and of the queries' permutations for
// a cohort simulated with seed: the simulator draws subject i from
// rand.NewPCG(seed, i), and ingest with the same seed would draw from those
// very streams (series i's fitting-sample pick from (seed, i+1), the pool
// from (seed, 0), k-means restart r from (seed, r)), so its random choices
// would be functions of particular subjects' data, and the permutations
// (seed + state...) those of another replicate's subjects. Offset by 2^40,
// the streams are distinct for every seed below 2^40.
func ingestSeed(seed uint64) uint64 { return seed + 1<<40 }

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

// tally reads a query's rows and counts its p columns per row key; a
// difference column (a group difference, not a p-value) is accumulated
// into out.Differences.
func tally(rs *sql.Rows, null, query string, alpha float64, out *Result) error {
	defer rs.Close()
	cols, err := rs.Columns()
	if err != nil {
		return err
	}
	var pcols, kcols []int
	out.PColumns[query] = []string{}
	for i, c := range cols {
		if pColumn.MatchString(c) {
			pcols = append(pcols, i)
			out.PColumns[query] = append(out.PColumns[query], c)
		}
	}
	for _, k := range keyColumns {
		if i := slices.Index(cols, k); i >= 0 {
			kcols = append(kcols, i)
		}
	}
	dcol := slices.Index(cols, "difference")
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
			parts = append(parts, keyPart(cols[i], v[i]))
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
			t := Tally{Tests: 1}
			if p < alpha {
				t.Rejections = 1
			}
			addTally(out.Tallies, Key{null, query, cols[i], rk}, t)
		}
		if dcol >= 0 && len(pcols) > 0 {
			if d, ok := v[dcol].(float64); ok && !math.IsNaN(d) {
				k := Key{null, query, "difference", rk}
				m := out.Differences[k]
				if m == nil {
					m = &Moments{}
					out.Differences[k] = m
				}
				m.Add(d)
			}
		}
	}
	return rs.Err()
}

// alternativeWords mark the rows of null (b) that are not a null at all:
// group B stays longer in every state, so its dwell times, switch and
// transition rates truly differ and a rejection there is power, not a false
// positive. So does the occupancy of a state labelled by its rank in
// frequency (ingest numbers the fitted states most frequent first): the
// latent states are equally occupied in both groups, but group B's
// occupancies vary more between subjects (longer runs, fewer of them), so
// it contributes more to the cohort's most frequent state and less to its
// least frequent one. The simulator-truth reference (Result.Latent, latent
// states ranked the same way, no windows, no clustering) shows this
// difference in the truth itself.
var alternativeWords = []string{"dwell", "switch", "transition", "occupancy"}

// nullEverywhere are the queries whose tests are true nulls under every
// null kind: associations with the harness's null covariate (age), which is
// independent of the data whatever the groups do.
var nullEverywhere = map[string]bool{"covariate_association": true}

// IsNull says whether test k is a true null: every test under (a) and (c);
// under (b) every test except the group contrasts of dwell, switches,
// transitions and the occupancy of ranked states (alternativeWords; the
// associations of nullEverywhere are nulls there too).
func IsNull(k Key) bool {
	if k.Null == Power {
		return false
	}
	if k.Null != NullDwell || nullEverywhere[k.Query] {
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

// WriteCoverage lists the queries run and the p columns each result had.
func (r *Result) WriteCoverage(w io.Writer) {
	names := make([]string, 0, len(r.PColumns))
	for q := range r.PColumns {
		names = append(names, q)
	}
	sort.Strings(names)
	var with, without []string
	for _, q := range names {
		if cols := r.PColumns[q]; len(cols) > 0 {
			with = append(with, fmt.Sprintf("`%s` (%s)", q, strings.Join(cols, ", ")))
		} else {
			without = append(without, fmt.Sprintf("`%s`", q))
		}
	}
	fmt.Fprintf(w, "Counted: %s. Run, no p column: %s.\n", strings.Join(with, "; "), strings.Join(without, ", "))
	for _, s := range r.Skipped {
		fmt.Fprintf(w, "Not run: %s.\n", s)
	}
}

// WriteDiagnostics prints, per null kind, the mean over the replicates of
// every group difference the queries report (state_dwell_by_group's
// difference, mean_a - mean_b) with its standard error and z, and the
// reference of the simulator's truth (latent occupancy per rank: Welch
// rejections and mean difference).
func (r *Result) WriteDiagnostics(w io.Writer, nulls []string, alpha float64) {
	fmt.Fprintln(w, "| null | query | row | mean difference A - B | SE | z |")
	fmt.Fprintln(w, "|---|---|---|---|---|---|")
	for _, n := range nulls {
		for _, m := range []map[Key]*Moments{r.Differences, r.LatentDiff} {
			keys := make([]Key, 0)
			for k := range m {
				if k.Null == n {
					keys = append(keys, k)
				}
			}
			sort.Slice(keys, func(i, j int) bool {
				if keys[i].Query != keys[j].Query {
					return keys[i].Query < keys[j].Query
				}
				return keys[i].Row < keys[j].Row
			})
			for _, k := range keys {
				mean, se, z := m[k].Mean()
				fmt.Fprintf(w, "| %s | `%s` | %s | %.4g | %.2g | %.1f |\n", NullNames[n], k.Query, k.Row, mean, se, z)
			}
		}
	}
	if len(r.Latent) == 0 {
		return
	}
	fmt.Fprintln(w)
	fmt.Fprint(w, "| simulator truth: Welch test of |")
	for _, n := range nulls {
		fmt.Fprintf(w, " %s |", NullNames[n])
	}
	fmt.Fprintln(w)
	fmt.Fprint(w, "|---|")
	for range nulls {
		fmt.Fprint(w, "---|")
	}
	fmt.Fprintln(w)
	rows := map[string]bool{}
	for k := range r.Latent {
		rows[k.Row] = true
	}
	var rl []string
	for row := range rows {
		rl = append(rl, row)
	}
	sort.Strings(rl)
	for _, row := range rl {
		fmt.Fprintf(w, "| %s |", row)
		for _, n := range nulls {
			c := r.Latent[Key{n, "latent", "welch_p", row}]
			if c == nil {
				fmt.Fprint(w, " - |")
				continue
			}
			fmt.Fprintf(w, " %d/%d (bound %d) |", c.Rejections, c.Tests, Upper95(c.Tests, alpha))
		}
		fmt.Fprintln(w)
	}
}

// record is one entry of a saved result.
type record struct {
	Key
	Tally
	Moments *Moments `json:",omitempty"`
	Kind    string   // "test", "latent", "difference", "latent difference"
}

// saved is the JSON form of a Result (Save, Load), so that the table can be
// printed again (-render) without running the replicates again.
type saved struct {
	Records  []record
	PColumns map[string][]string
	Skipped  []string
}

// Save writes r as JSON.
func (r *Result) Save(w io.Writer) error {
	s := saved{PColumns: r.PColumns, Skipped: r.Skipped}
	for k, t := range r.Tallies {
		s.Records = append(s.Records, record{Key: k, Tally: *t, Kind: "test"})
	}
	for k, t := range r.Latent {
		s.Records = append(s.Records, record{Key: k, Tally: *t, Kind: "latent"})
	}
	for k, m := range r.Differences {
		s.Records = append(s.Records, record{Key: k, Moments: m, Kind: "difference"})
	}
	for k, m := range r.LatentDiff {
		s.Records = append(s.Records, record{Key: k, Moments: m, Kind: "latent difference"})
	}
	sort.Slice(s.Records, func(i, j int) bool {
		a, b := s.Records[i], s.Records[j]
		return fmt.Sprint(a.Kind, a.Key) < fmt.Sprint(b.Kind, b.Key)
	})
	e := json.NewEncoder(w)
	e.SetIndent("", " ")
	return e.Encode(s)
}

// Load reads a Result written by Save.
func Load(rd io.Reader) (*Result, error) {
	var s saved
	if err := json.NewDecoder(rd).Decode(&s); err != nil {
		return nil, err
	}
	r := &Result{Tallies: map[Key]*Tally{}, Differences: map[Key]*Moments{}, Latent: map[Key]*Tally{},
		LatentDiff: map[Key]*Moments{}, PColumns: s.PColumns, Skipped: s.Skipped}
	for _, rec := range s.Records {
		rec.Row = relabelNull(rec.Row)
		switch rec.Kind {
		case "test":
			addTally(r.Tallies, rec.Key, rec.Tally)
		case "latent":
			addTally(r.Latent, rec.Key, rec.Tally)
		case "difference", "latent difference":
			if rec.Moments == nil {
				return nil, fmt.Errorf("record %v has no moments", rec.Key)
			}
			m := *rec.Moments
			if rec.Kind == "difference" {
				r.Differences[rec.Key] = &m
			} else {
				r.LatentDiff[rec.Key] = &m
			}
		default:
			return nil, fmt.Errorf("record of unknown kind %q", rec.Kind)
		}
	}
	return r, nil
}
