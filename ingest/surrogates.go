package ingest

import (
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"fmt"
	"maps"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"
	"sync"
	"time"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/schema"
)

// The surrogate-data test of the whole state model (docs/methods.md §10).
//
// Run r = 0 is the original cohort, runs r = 1..N replace every series by
// its multivariate phase surrogate (compute.PhaseSurrogate, seeded from
// (seed, r, series index)). Every run goes through the same procedure:
// the analysis's preprocessing and windows, its fitting sample (variance
// peaks or all windows, the same share per series) capped to
// SurrogateSettings.FitWindows windows, k-means with the analysis's k,
// distance and iteration limit and SurrogateSettings.Restarts restarts, then
// every window assigned. Because run 0 goes through exactly the procedure of
// the surrogates (not the analysis's own larger fit), the observed
// statistic and the N null statistics are exchangeable when the series are
// stationary linear Gaussian processes, and the Monte-Carlo p-value is
// valid (docs/methods.md §10).

// SurrogateSettings are the settings of a surrogate-data test.
type SurrogateSettings struct {
	N          int // surrogates; 0: no test
	FitWindows int // cap on the fitting sample of each run; 0: DefaultSurrogateFitWindows (never more than the analysis's cap)
	Restarts   int // k-means restarts of each run; 0: DefaultSurrogateRestarts
}

// Defaults of SurrogateSettings: our own choice to keep N = 99 surrogates
// of a 100-series cohort within minutes on 2 cores (README, "Do the states
// exist?", measures what they cost).
const (
	DefaultSurrogateFitWindows = 2000
	DefaultSurrogateRestarts   = 2
)

// withDefaults fills zero fields; the cap never exceeds the analysis's.
func (t SurrogateSettings) withDefaults(o Options) SurrogateSettings {
	if t.FitWindows <= 0 {
		t.FitWindows = DefaultSurrogateFitWindows
	}
	t.FitWindows = min(t.FitWindows, o.FitMax)
	if t.Restarts <= 0 {
		t.Restarts = DefaultSurrogateRestarts
	}
	return t
}

// Check reports settings that cannot work, as a usage error.
func (t SurrogateSettings) Check() error {
	switch {
	case t.N < 0:
		return &UsageError{Err: fmt.Errorf("--surrogates %d: must not be negative (0: no surrogate test)", t.N)}
	case t.N > 0 && t.N < 19:
		return &UsageError{Err: fmt.Errorf("--surrogates %d: the smallest Monte-Carlo p-value is 1/(N+1); use at least 19 (99 or more for a test at 0.01)", t.N)}
	case t.N > 100000:
		return &UsageError{Err: fmt.Errorf("--surrogates %d: at most 100000", t.N)}
	case t.FitWindows < 0 || (t.FitWindows > 0 && t.FitWindows < 10):
		return &UsageError{Err: fmt.Errorf("--surrogate-fit-windows %d: want at least 10 (0: %d)", t.FitWindows, DefaultSurrogateFitWindows)}
	case t.Restarts < 0:
		return &UsageError{Err: fmt.Errorf("--surrogate-restarts %d: must not be negative (0: %d)", t.Restarts, DefaultSurrogateRestarts)}
	}
	return nil
}

// Names of the surrogate statistics (surrogate_tests.statistic).
const (
	StatClusterQuality    = "cluster_quality"
	StatWindowVariability = "window_variability"
	StatBettiDistance     = "betti_distance"
	StatMeanDwell         = "mean_dwell"
)

// surrStat is one statistic of a run: its name and state (0: not per state).
type surrStat struct {
	Name  string
	State int
}

// surrogateStats lists the statistics for k states, in the order of a run's
// values. With one state only the window variability is defined.
func surrogateStats(k int) []surrStat {
	if k < 2 {
		return []surrStat{{StatWindowVariability, 0}}
	}
	out := []surrStat{{StatClusterQuality, 0}, {StatWindowVariability, 0}, {StatBettiDistance, 0}, {StatMeanDwell, 0}}
	for st := 1; st <= k; st++ {
		out = append(out, surrStat{StatMeanDwell, st})
	}
	return out
}

// statMeaning is the one-line meaning stored with each row: what the upper
// tail (observed above the surrogates) says.
var statMeaning = map[string]string{
	StatClusterQuality:    "1 - W(k)/W(1) on the fitting sample: windows fall into tighter clusters than in stationary surrogates",
	StatWindowVariability: "mean over subjects and region pairs of the sd over windows of the window correlation: connectivity moves more over time than in stationary surrogates",
	StatBettiDistance:     "mean over state pairs of the sup-norm distance between the Betti-0/Betti-1 curves of the centroid networks: state networks differ more in topology than surrogate clusters",
	StatMeanDwell:         "mean dwell in windows (pooled over subjects; per state: the state of that frequency rank): states last longer than clusters of stationary surrogates",
}

// surrogate seed streams: distinct from the (seed, i+1) of the fitting
// sample, (seed, 0) of its cap and (seed, r) of the k-means restarts.
const (
	streamPhase = 1 << 62
	streamPick  = 1 << 61
	capSeries   = 1<<32 - 1
)

func surrStream(tag uint64, run, series int) uint64 {
	return tag | uint64(run)<<32 | uint64(series)
}

// kmeansSeed is the k-means seed of run r, a fixed function of (seed, r).
func kmeansSeed(seed uint64, run int) uint64 {
	return seed ^ (0x9E3779B97F4A7C15 * uint64(run+1))
}

// seriesCache holds each series' analysed columns as read, so the runs do
// not parse every file again; it reads on first use and checks the SHA-256
// recorded at validation. With caching off (a cohort too large to hold) it
// reads every time.
type seriesCache struct {
	s     *stages
	keep  bool
	once  []sync.Once
	y     []compute.Series
	err   []error
	limit int64
}

// maxSurrogateCache is the most raw series data (bytes) held in memory.
const maxSurrogateCache = 2 << 30

func newSeriesCache(s *stages) *seriesCache {
	n := len(s.c.Inputs)
	return &seriesCache{s: s, keep: s.seriesBytes() <= maxSurrogateCache, once: make([]sync.Once, n), y: make([]compute.Series, n), err: make([]error, n)}
}

func (c *seriesCache) read(i int) (compute.Series, error) {
	load := func() (compute.Series, error) {
		in := c.s.c.Inputs[i]
		sf, err := c.s.c.Source.Read(in.Input)
		if err != nil {
			return compute.Series{}, err
		}
		if sf.SHA256 != in.SHA256 {
			return compute.Series{}, fmt.Errorf("ingest: %s changed since it was validated (SHA-256 differs); run again on unchanged files", in.Path)
		}
		y := sf.Series
		if len(c.s.c.Keep) != y.P {
			y = subset(y, c.s.c.Keep)
		}
		return y, nil
	}
	if !c.keep {
		return load()
	}
	c.once[i].Do(func() { c.y[i], c.err[i] = load() })
	return c.y[i], c.err[i]
}

// surrogateWindows returns the window correlations of series i in run r:
// the series as read (run 0) or its phase surrogate, preprocessed as in the
// analysis, and its window variance peaks when the fitting sample uses them.
//
// kept, when not nil, holds the preprocessed series of this run by series
// (nil entries: not made yet): pass 1 fills it and pass 2 reads it, so the
// surrogate and its preprocessing are made once per run.
func (s *stages) surrogateWindows(cache *seriesCache, run, i int, buf []float32, kept []compute.Series) (compute.Matrix32, error) {
	path := s.c.Inputs[i].Path
	var y compute.Series
	if kept != nil && kept[i].Data != nil {
		y = kept[i]
	} else {
		var err error
		y, err = cache.read(i)
		if err != nil {
			return compute.Matrix32{}, err
		}
		if run > 0 {
			y = compute.PhaseSurrogate(y, rand.New(rand.NewPCG(s.o.Seed, surrStream(streamPhase, run, i))))
		}
		y, err = compute.Preprocess(y, s.pre)
		if err != nil {
			return compute.Matrix32{}, fmt.Errorf("ingest: %s (surrogate %d): %w", path, run, err)
		}
		if kept != nil {
			kept[i] = y
		}
	}
	m, err := compute.SlidingCorrelationsInto(buf, y, s.seriesWindow(s.c.Inputs[i]))
	if err != nil {
		return compute.Matrix32{}, fmt.Errorf("ingest: %s (surrogate %d): %w", path, run, err)
	}
	return m, nil
}

// surrogateRun computes the statistics (surrogateStats(s.k) order) of run r
// over the whole cohort, serially: pass 1 builds the capped fitting sample
// and the window variability, the fit follows, pass 2 assigns every window.
func (s *stages) surrogateRun(ctx context.Context, cache *seriesCache, set SurrogateSettings, run int) ([]float64, error) {
	n := len(s.c.Inputs)
	D := compute.PairCount(s.p)
	// The same share per series as the analysis's sample, for the smaller cap.
	perSeries := max(1, (2*set.FitWindows+n-1)/n)
	// The pool of at most perSeries windows per series, and the window
	// buffer, are reused from run to run: growing them afresh in every run
	// cost a third of the CPU time (profiled on 20 series x 1,000 x 100).
	pool := s.surrogatePool(n * perSeries * D)
	defer s.surrPools.Put(&pool)
	var buf []float32
	if b, ok := s.bufs.Get().(*[]float32); ok {
		buf = *b
	}
	defer func() { s.bufs.Put(&buf) }()
	// The preprocessed series of this run, kept for pass 2 when they are
	// small enough (the values are the same as when made again).
	var kept []compute.Series
	if s.k >= 2 && s.seriesBytes() <= maxRunSeries {
		kept = make([]compute.Series, n)
	}
	tv := 0.0
	for i := range n {
		if ctx.Err() != nil {
			return nil, ctx.Err()
		}
		m, err := s.surrogateWindows(cache, run, i, buf, kept)
		if err != nil {
			return nil, err
		}
		buf = m.Data[:0]
		tv += compute.TemporalVariability(m) / float64(n)
		if s.k < 2 {
			continue
		}
		idx := fitCandidates(m, s.o.FitSample)
		if len(idx) > perSeries {
			idx = pick(rand.New(rand.NewPCG(s.o.Seed, surrStream(streamPick, run, i))), idx, perSeries)
		}
		for _, r := range idx {
			pool = append(pool, m.Row(r)...)
		}
	}
	if s.k < 2 {
		return []float64{tv}, nil
	}
	x := compute.Matrix32{Rows: len(pool) / D, Cols: D, Data: pool}
	if x.Rows > set.FitWindows {
		all := make([]int, x.Rows)
		for r := range all {
			all[r] = r
		}
		keep := pick(rand.New(rand.NewPCG(s.o.Seed, surrStream(streamPick, run, capSeries))), all, set.FitWindows)
		for c, r := range keep {
			copy(x.Row(c), x.Row(r))
		}
		x = compute.Matrix32{Rows: len(keep), Cols: D, Data: x.Data[:len(keep)*D]}
	}
	if x.Rows < s.k {
		return nil, fmt.Errorf("ingest: surrogate %d: %d fitting windows for %d states", run, x.Rows, s.k)
	}
	stop := func() bool { return ctx.Err() != nil }
	opt := compute.KMeansOptions{K: s.k, Restarts: set.Restarts, MaxIter: s.o.MaxIter, Distance: s.dist, Workers: 1, Stop: stop}
	res, err := compute.KMeans(x, opt, kmeansSeed(s.o.Seed, run))
	if err != nil {
		return nil, fmt.Errorf("ingest: surrogate %d: %w", run, stopped(ctx, err))
	}
	one := opt
	one.K, one.Restarts = 1, 1
	res1, err := compute.KMeans(x, one, kmeansSeed(s.o.Seed, run))
	if err != nil {
		return nil, fmt.Errorf("ingest: surrogate %d: %w", run, stopped(ctx, err))
	}
	quality := compute.ClusterQuality(res.WCSS, res1.WCSS)
	// Relabel as the analysis does: most frequent state in the sample first.
	order, _ := frequencyOrder(res.Labels, s.k)
	cent := compute.NewMatrix32(s.k, D)
	for newL, oldL := range order {
		copy(cent.Row(newL), res.Centroids.Row(oldL))
	}
	// Topological distance between the centroid networks (correlation scale).
	b0 := make([][]int, s.k)
	b1 := make([][]int, s.k)
	net := make([]float64, D)
	for st := range s.k {
		for q, v := range cent.Row(st) {
			net[q] = float64(v)
			if s.o.FisherZ {
				net[q] = math.Tanh(net[q])
			}
		}
		compute.CentreNetwork(net)
		f, err := compute.GraphFiltration(s.p, net)
		if err != nil {
			return nil, fmt.Errorf("ingest: surrogate %d state %d: %w", run, st+1, err)
		}
		b0[st], b1[st] = f.Curves(s.grid)
	}
	betti := compute.MeanPairwiseBettiDistance(b0, b1)
	// Pass 2: every window assigned; dwell pooled over subjects.
	inState := make([]float64, s.k)
	runs := make([]float64, s.k)
	for i := range n {
		if ctx.Err() != nil {
			return nil, ctx.Err()
		}
		m, err := s.surrogateWindows(cache, run, i, buf, kept)
		if err != nil {
			return nil, err
		}
		buf = m.Data[:0]
		kept = dropKept(kept, i)
		labels, _ := compute.Assign(m, cent, s.dist, 1)
		d, err := compute.Dynamics(labels, s.k)
		if err != nil {
			return nil, fmt.Errorf("ingest: %s (surrogate %d): %w", s.c.Inputs[i].Path, run, err)
		}
		for st := range s.k {
			inState[st] += d.Occupancy[st] * float64(d.Windows)
			runs[st] += float64(d.Dwells[st])
		}
	}
	all, allRuns := 0.0, 0.0
	for st := range s.k {
		all += inState[st]
		allRuns += runs[st]
	}
	vals := []float64{quality, tv, betti, all / allRuns}
	for st := range s.k {
		vals = append(vals, inState[st]/runs[st]) // NaN (0/0) when no window of the cohort is in the state
	}
	return vals, nil
}

// maxRunSeries is the most bytes of preprocessed series one surrogate run
// keeps from its first pass for its second (one run per worker).
const maxRunSeries = 256 << 20

// seriesBytes is the size of the cohort's analysed series as float64.
func (s *stages) seriesBytes() int64 {
	var bytes int64
	for _, in := range s.c.Inputs {
		bytes += int64(in.Timepoints) * int64(s.p) * 8
	}
	return bytes
}

// dropKept lets series i of a run's kept series go once pass 2 is past it.
func dropKept(kept []compute.Series, i int) []compute.Series {
	if kept != nil {
		kept[i] = compute.Series{}
	}
	return kept
}

// surrogatePool returns an empty slice with room for n values, reused
// from an earlier run when one is free (s.surrPools).
func (s *stages) surrogatePool(n int) []float32 {
	if b, ok := s.surrPools.Get().(*[]float32); ok && cap(*b) >= n {
		return (*b)[:0]
	}
	return make([]float32, 0, n)
}

// surrogateRange runs lo..hi-1 (run 0: the original series) in parallel
// over the workers, one run per worker, and hands each run's statistics to
// sink in run order. A run draws only from its own seeds, so the values do
// not depend on the workers or on how the runs are split.
func (s *stages) surrogateRange(ctx context.Context, set SurrogateSettings, lo, hi int, sink func(run int, vals []float64) error) error {
	cache := newSeriesCache(s)
	return parallel(ctx, hi-lo, s.workers, func(j int) ([]float64, error) {
		return s.surrogateRun(ctx, cache, set, lo+j)
	}, func(j int, v []float64) error {
		s.prog.Add(1)
		return sink(lo+j, v)
	})
}

// SurrogateRow is one row of surrogate_tests.
type SurrogateRow struct {
	Statistic string
	State     int // 0: not per state (NULL)
	Observed  float64
	NullMean  float64
	NullSD    float64
	N         int
	Exceed    int
	P         float64
	Meaning   string
}

// surrogateRows turns the runs' values (runs[0] observed, runs[1..N] the
// surrogates) into one row per statistic. A statistic whose observed value
// is not defined (NaN: a state no window of the cohort fell in) gets no row.
func surrogateRows(k int, runs [][]float64) []SurrogateRow {
	stats := surrogateStats(k)
	var out []SurrogateRow
	N := len(runs) - 1
	for q, st := range stats {
		obs := runs[0][q]
		if math.IsNaN(obs) {
			continue
		}
		null := make([]float64, N)
		for r := 1; r <= N; r++ {
			null[r-1] = runs[r][q]
		}
		p, exceed := compute.MonteCarloP(obs, null)
		mean, sd := meanSD(null)
		out = append(out, SurrogateRow{Statistic: st.Name, State: st.State, Observed: obs, NullMean: mean, NullSD: sd,
			N: N, Exceed: exceed, P: p, Meaning: statMeaning[st.Name]})
	}
	return out
}

// meanSD returns the mean and the sample standard deviation (n - 1) of the
// finite values of v (NaN when none, sd NaN with one).
func meanSD(v []float64) (float64, float64) {
	n, sum := 0, 0.0
	for _, x := range v {
		if !math.IsNaN(x) {
			n++
			sum += x
		}
	}
	if n == 0 {
		return math.NaN(), math.NaN()
	}
	mean := sum / float64(n)
	ss := 0.0
	for _, x := range v {
		if !math.IsNaN(x) {
			ss += (x - mean) * (x - mean)
		}
	}
	if n < 2 {
		return mean, math.NaN()
	}
	return mean, math.Sqrt(ss / float64(n-1))
}

// writeSurrogates appends the rows to surrogate_tests.
func writeSurrogates(ctx context.Context, w *schema.Writer, rows []SurrogateRow, set SurrogateSettings) error {
	b := schema.NewBatch(schema.SurrogateTests)
	defer b.Release()
	for _, r := range rows {
		var state any
		if r.State > 0 {
			state = r.State
		}
		b.Row(w.ID, r.Statistic, state, r.Observed, nullable(r.NullMean), nullable(r.NullSD), r.N, r.Exceed, r.P,
			"greater", r.Meaning, set.FitWindows, set.Restarts)
	}
	return w.Append(ctx, b)
}

func nullable(v float64) any {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return v
}

// surrogates runs the whole test (N surrogates and the observed run) for
// the fitted analysis in s and returns its rows.
func (s *stages) surrogates(ctx context.Context, set SurrogateSettings) ([]SurrogateRow, error) {
	s.prog.Stage(fmt.Sprintf("surrogates, %d + observed", set.N), set.N+1)
	runs := make([][]float64, set.N+1)
	err := s.surrogateRange(ctx, set, 0, set.N+1, func(run int, v []float64) error {
		runs[run] = v
		return nil
	})
	if err != nil {
		return nil, err
	}
	return surrogateRows(s.k, runs), nil
}

// AddSurrogatesResult is what AddSurrogates did.
type AddSurrogatesResult struct {
	AnalysisID int
	Name       string
	States     int
	Settings   SurrogateSettings
	Rows       []SurrogateRow
	Replaced   int // rows of an earlier test removed (--replace)
	Seconds    float64
}

// AddSurrogates runs the surrogate-data test for the stored analysis called
// name and writes its surrogate_tests rows in one transaction, touching no
// other row. The cohort and every setting are those recorded with the
// analysis (input, when not empty, names the cohort folder instead of the
// recorded one, for a cohort that moved); the series must be the ones
// analysed, byte for byte (SHA-256), or nothing is computed. An analysis
// that already has surrogate rows is refused unless replace is set, which
// deletes them in the same transaction.
func AddSurrogates(ctx context.Context, db *sql.DB, name, input string, set SurrogateSettings, replace bool, workers int, prog Progress) (*AddSurrogatesResult, error) {
	start := time.Now()
	if prog == nil {
		prog = noProgress{}
	}
	if set.N == 0 {
		return nil, &UsageError{Err: errors.New("--n: the number of surrogates is required (99 gives p-values down to 0.01)")}
	}
	if err := set.Check(); err != nil {
		return nil, err
	}
	var id, k int
	var params string
	err := db.QueryRowContext(ctx, `SELECT analysis_id, CAST(parameters AS VARCHAR), n_states FROM analyses WHERE name = ?`, name).Scan(&id, &params, &k)
	if errors.Is(err, sql.ErrNoRows) {
		return nil, &UsageError{Err: fmt.Errorf("--analysis %q: no such analysis ('topostate info' lists them)", name)}
	}
	if err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	var o Options
	if err := json.Unmarshal([]byte(params), &o); err != nil {
		return nil, fmt.Errorf("ingest: analysis %q: parameters: %w", name, err)
	}
	o.StatesFrom = nil // k is the stored one; the cohort is read as recorded
	if input != "" {
		o.Input = input
	}
	var have int
	if err := db.QueryRowContext(ctx, `SELECT count(*) FROM surrogate_tests WHERE analysis_id = ?`, id).Scan(&have); err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	if have > 0 && !replace {
		return nil, &UsageError{Err: fmt.Errorf("analysis %q already has a surrogate test (%d rows); pass --replace to compute it again and replace those rows", name, have)}
	}
	c, err := LoadCohort(o)
	if err != nil {
		return nil, fmt.Errorf("ingest: the cohort of analysis %q (%s) cannot be read as it was: %w", name, o.Input, err)
	}
	if err := sameCohort(ctx, db, id, c); err != nil {
		return nil, err
	}
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	st := &stages{o: o, c: c, workers: workers, prog: prog, k: k}
	if err := st.setup(); err != nil {
		return nil, err
	}
	set = set.withDefaults(o)
	rows, err := st.surrogates(ctx, set)
	if err != nil {
		return nil, err
	}
	w, err := schema.BeginExisting(ctx, db, id)
	if err != nil {
		return nil, err
	}
	ok := false
	defer func() {
		if !ok {
			w.Rollback()
		}
	}()
	res := &AddSurrogatesResult{AnalysisID: id, Name: name, States: k, Settings: set, Rows: rows}
	if replace {
		var n int
		if err := w.QueryRow(ctx, `SELECT count(*) FROM surrogate_tests WHERE analysis_id = ?`, []any{id}, &n); err != nil {
			return nil, err
		}
		if err := w.Exec(ctx, `DELETE FROM surrogate_tests WHERE analysis_id = ?`, id); err != nil {
			return nil, fmt.Errorf("ingest: %w", err)
		}
		res.Replaced = n
	}
	if err := writeSurrogates(ctx, w, rows, set); err != nil {
		return nil, err
	}
	if err := w.Commit(ctx); err != nil {
		return nil, err
	}
	ok = true
	prog.Finish()
	res.Seconds = time.Since(start).Seconds()
	return res, nil
}

// sameCohort checks that the validated cohort c is the one analysis id
// analysed: the same series files with the same SHA-256 and the same
// analysed regions.
func sameCohort(ctx context.Context, db *sql.DB, id int, c *Cohort) error {
	rows, err := db.QueryContext(ctx, `SELECT path, sha256 FROM inputs WHERE analysis_id = ? ORDER BY path`, id)
	if err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	stored := map[string]string{}
	for rows.Next() {
		var p, h string
		if err := rows.Scan(&p, &h); err != nil {
			rows.Close()
			return fmt.Errorf("ingest: %w", err)
		}
		stored[p] = h
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	for _, in := range c.Inputs {
		h, ok := stored[in.Rel]
		switch {
		case !ok:
			return fmt.Errorf("ingest: %s was not part of the analysis; the cohort folder changed since (refusing: the test must use the analysed series)", in.Path)
		case h != in.SHA256:
			return fmt.Errorf("ingest: %s changed since the analysis (SHA-256 %s, stored %s); refusing: the test must use the analysed series", in.Path, in.SHA256[:12], h[:min(12, len(h))])
		}
		delete(stored, in.Rel)
	}
	if len(stored) > 0 {
		missing := slices.Sorted(maps.Keys(stored))
		return fmt.Errorf("ingest: %d analysed series are missing from the cohort folder now (first: %s); refusing: the test must use the analysed series", len(missing), missing[0])
	}
	var names []string
	rr, err := db.QueryContext(ctx, `SELECT region_name FROM regions WHERE analysis_id = ? AND region_index IS NOT NULL ORDER BY region_index`, id)
	if err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	for rr.Next() {
		var n string
		if err := rr.Scan(&n); err != nil {
			rr.Close()
			return fmt.Errorf("ingest: %w", err)
		}
		names = append(names, n)
	}
	rr.Close()
	if len(names) != len(c.Keep) {
		return fmt.Errorf("ingest: the analysis has %d regions, the cohort now %d; refusing", len(names), len(c.Keep))
	}
	for n, j := range c.Keep {
		if c.Regions[j] != names[n] {
			return fmt.Errorf("ingest: region %d is %q in the analysis and %q now; refusing", n+1, names[n], c.Regions[j])
		}
	}
	return nil
}
