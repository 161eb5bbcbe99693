package ingest

import (
	"cmp"
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"slices"
	"sort"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/schema"
)

// Progress receives the stages' progress; a nil Progress is silent.
type Progress interface {
	Stage(name string, total int)
	Add(n int)
	Finish()
}

type noProgress struct{}

func (noProgress) Stage(string, int) {}
func (noProgress) Add(int)           {}
func (noProgress) Finish()           {}

// Summary reports what an ingest did.
type Summary struct {
	AnalysisID  int
	Name        string
	Subjects    int
	Excluded    int
	Regions     int
	Dropped     []string
	States      int
	Windows     int64
	FitWindows  int
	Elbow       *compute.Elbow // nil when k was fixed or the states were reused
	StatesFrom  *StatesFrom    // the analysis whose states were reused; nil when fitted
	Warnings    []string
	Occupancies []float64 // cohort mean occupancy per state

	// PhaseTimes are the wall times of the stages in order: "sample
	// windows", "fit states", "subjects" (stage 3 until the last subject's
	// rows are built; most inserts overlap it), "write" (the
	// analysis-level tables and the inserts still running after the last
	// subject), "commit". Callers may put their own phases in front (the
	// command adds "validate").
	PhaseTimes []PhaseTime
	// WorkerTimes split the parallel stages into their parts ("sample:
	// read", "subjects: assign", ...), in seconds summed over the workers,
	// so with w busy workers they add up to about w times the stage's wall
	// time.
	WorkerTimes []PhaseTime
	// Fits are the k-means fits run by the fit stage, in order.
	Fits []FitStat
	// Surrogates are the rows of the surrogate-data test (none without
	// --surrogates).
	Surrogates []SurrogateRow
}

// PhaseTime is the wall time of one stage (or part of one).
type PhaseTime struct {
	Phase   string  `json:"phase"`
	Seconds float64 `json:"seconds"`
}

// FitStat describes one k-means fit of the fit stage (their times are in
// Summary.WorkerTimes: "fit: elbow scan", "fit: final restarts" or "fit:
// k-means").
type FitStat struct {
	K          int  `json:"k"`
	Restarts   int  `json:"restarts"`
	Iterations int  `json:"iterations"` // Lloyd iterations summed over the restarts
	Final      bool `json:"final"`      // the extra restarts at the picked k, or the fit at a fixed k
}

// Version is written into the analyses table.
var Version = "0.1.0-dev"

// Run computes every result of a cohort validated by LoadCohort and writes
// one analysis into db in a single transaction. On any error nothing is
// written.
func Run(ctx context.Context, db *sql.DB, c *Cohort, o Options, prog Progress) (*Summary, error) {
	if prog == nil {
		prog = noProgress{}
	}
	sum := &Summary{}
	clock := time.Now()
	lap := func(phase string) {
		now := time.Now()
		sum.PhaseTimes = append(sum.PhaseTimes, PhaseTime{phase, now.Sub(clock).Seconds()})
		clock = now
	}
	if err := o.Check(); err != nil {
		return nil, err
	}
	o = c.Apply(o)
	sum.Warnings = c.Warnings
	workers := o.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	st := &stages{o: o, c: c, workers: workers, prog: prog}
	if err := st.setup(); err != nil {
		return nil, err
	}
	if err := preflight(ctx, db, c, o); err != nil {
		return nil, err
	}

	if o.StatesFrom != nil {
		// Replication: the stored states instead of stages 1 and 2.
		if err := st.useStates(o.StatesFrom); err != nil {
			return nil, err
		}
		sum.StatesFrom = o.StatesFrom
	} else {
		// Stage 1: sample windows for fitting.
		sample, err := st.sample(ctx)
		if err != nil {
			return nil, err
		}
		lap("sample windows")
		// Stage 2: fit the states.
		if err := st.fit(ctx, sample); err != nil {
			return nil, err
		}
		// The pool (up to --fit-memory) is garbage now: hand it back to
		// the system before DuckDB's buffers (up to --db-memory) grow in
		// stage 4, so the two bounds do not add up in the peak.
		sample = compute.Matrix32{}
		debug.FreeOSMemory()
		sum.Elbow = st.elbow
		lap("fit states")
	}
	// The surrogate-data test (docs/methods.md §10), before the transaction
	// opens: it needs only k and the cohort.
	set := o.SurrogateSettings().withDefaults(o)
	var surr []SurrogateRow
	if set.N > 0 {
		var err error
		if surr, err = st.surrogates(ctx, set); err != nil {
			return nil, err
		}
		lap("surrogates")
	}

	// Stages 3 and 4: per-subject results, written in subject order.
	if err := limitDB(ctx, db, o.DBMemory, c.TempDir); err != nil {
		return nil, err
	}
	w, err := schema.Begin(ctx, db, o.Analysis, o.Parquet)
	if err != nil {
		return nil, err
	}
	ok := false
	defer func() {
		if !ok {
			w.Rollback()
		}
	}()
	// DuckDB runs an insert on its own threads while go-duckdb polls it
	// from the calling thread; with the cores busy computing subjects, one
	// thread (the caller's) inserts as fast for about half the CPU time
	// (measured on 2 cores: 10.6 million filtration events).
	if err := w.Exec(ctx, "SET threads = 1"); err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	if err := st.writeStatic(ctx, w); err != nil {
		return nil, err
	}
	static := time.Since(clock)
	clock = time.Now()
	occ, err := st.perSubject(ctx, w)
	if err != nil {
		return nil, err
	}
	// Stage 4 runs beside stage 3: rows are inserted while later subjects
	// are computed. "subjects" ends when the last subject's rows are
	// built; "write" is the analysis-level tables plus the inserts still
	// running then (the overlapped insert time is in WorkerTimes).
	now := time.Now()
	sum.PhaseTimes = append(sum.PhaseTimes, PhaseTime{"subjects", st.rowsDone.Sub(clock).Seconds()},
		PhaseTime{"write", (static + now.Sub(st.rowsDone)).Seconds()})
	clock = now
	if set.N > 0 {
		if err := writeSurrogates(ctx, w, surr, set); err != nil {
			return nil, err
		}
	}
	if err := st.recordAnalysis(ctx, w); err != nil {
		return nil, err
	}
	if err := w.Commit(ctx); err != nil {
		return nil, err
	}
	ok = true
	lap("commit")
	prog.Finish()

	sum.AnalysisID, sum.Name = w.ID, w.Name
	sum.Subjects, sum.Excluded = len(c.Inputs), len(c.Excluded)
	sum.Regions, sum.States = len(c.Keep), st.k
	sum.Windows, sum.FitWindows = st.totalWindows, st.fitRows
	for _, j := range c.Dropped {
		sum.Dropped = append(sum.Dropped, c.Regions[j])
	}
	sum.Occupancies = occ
	sum.WorkerTimes = st.work.list()
	sum.Fits = st.fits
	sum.Surrogates = surr
	sum.Warnings = c.Warnings // fit may have added one
	return sum, nil
}

// preflight refuses, before anything is computed, what the write would
// refuse after the whole computation: a name already taken, and a
// covariate whose type differs from the warehouse's column of that name
// (schema.Writer checks both again inside the transaction). This run holds
// the file's lock, so nothing changes between the two checks.
func preflight(ctx context.Context, db *sql.DB, c *Cohort, o Options) error {
	var n int
	err := db.QueryRowContext(ctx, `SELECT count(*) FROM information_schema.tables
		WHERE table_catalog = current_database() AND table_schema = 'main' AND table_name IN ('analyses', 'subjects')`).Scan(&n)
	if err != nil || n < 2 {
		return nil // a new file, or one Begin will refuse with its own message
	}
	if o.Analysis != "" {
		if err := db.QueryRowContext(ctx, `SELECT count(*) FROM analyses WHERE name = ?`, o.Analysis).Scan(&n); err == nil && n > 0 {
			return fmt.Errorf("ingest: %q: %w; choose another --analysis name or remove the old one with 'topostate drop'", o.Analysis, schema.ErrAnalysisExists)
		}
	}
	p := c.Participants
	if p == nil {
		return nil
	}
	rows, err := db.QueryContext(ctx, `SELECT column_name, data_type FROM information_schema.columns
		WHERE table_catalog = current_database() AND table_schema = 'main' AND table_name = 'subjects'`)
	if err != nil {
		return nil
	}
	have := map[string]string{}
	for rows.Next() {
		var name, typ string
		if rows.Scan(&name, &typ) == nil {
			have[strings.ToLower(name)] = typ
		}
	}
	rows.Close()
	var problems Problems
	for i, cv := range p.Covariates {
		if t, ok := have[strings.ToLower(cv.Name)]; ok && !strings.EqualFold(t, cv.Type) {
			problems = append(problems, perr(p.Path, 1, i+2, "column %q is %s in this cohort but %s in the warehouse, where earlier analyses stored it; "+
				"rename the column, or write its values as that type, or use another database file", cv.Name, cv.Type, t))
		}
	}
	if len(problems) > 0 {
		return problems
	}
	return nil
}

// limitDB bounds DuckDB's memory while an analysis is written (memory
// bytes; 0 leaves DuckDB's default) and, when tmp is not "", puts its spill
// folder there (else DuckDB uses <warehouse>.tmp beside the file).
// memory_limit bounds DuckDB's buffer manager (by default 80 % of the
// machine's memory; DuckDB documentation, "Limits" and "Tuning
// Workloads": beyond it buffers are evicted or spilled to temp_directory),
// so the one transaction of a cohort-scale ingest cannot take the
// machine's memory. Both settings belong to the database instance of this
// process.
func limitDB(ctx context.Context, db *sql.DB, memory int64, tmp string) error {
	if tmp != "" {
		dir := filepath.Join(tmp, "duckdb")
		if _, err := db.ExecContext(ctx, "SET temp_directory = '"+strings.ReplaceAll(dir, "'", "''")+"'"); err != nil {
			return fmt.Errorf("ingest: set DuckDB's temp_directory: %w", err)
		}
	}
	if memory > 0 {
		if _, err := db.ExecContext(ctx, fmt.Sprintf("SET memory_limit = '%dKiB'", max(memory>>10, 1))); err != nil {
			return fmt.Errorf("ingest: set DuckDB's memory_limit: %w", err)
		}
	}
	return nil
}

// recordAnalysis inserts the analyses row, with every option as JSON.
func (s *stages) recordAnalysis(ctx context.Context, w *schema.Writer) error {
	params, err := json.Marshal(s.o)
	if err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	// input_dir is absolute, so the row still names the folder when the
	// warehouse is read from another working directory.
	inputDir, err := filepath.Abs(s.o.Input)
	if err != nil {
		inputDir = s.o.Input
	}
	if err := w.Exec(ctx, `INSERT INTO analyses VALUES (?, ?, ?, ?, ?::JSON, ?, ?, ?, ?, ?, ?)`,
		w.ID, w.Name, time.Now().UTC(), Version, string(params), inputDir, len(s.c.Inputs), len(s.c.Keep), s.k, s.totalWindows, s.fitRows); err != nil {
		return fmt.Errorf("ingest: record analysis: %w", err)
	}
	return nil
}

// stages carries what the stages share.
type stages struct {
	o       Options
	c       *Cohort
	workers int
	prog    Progress

	pre     compute.PreprocessOptions
	win     compute.WindowOptions
	dist    compute.Distance
	grid    []float64
	core    int // N of the core networks (docs/methods.md §7)
	p       int // regions analysed
	k       int
	cent    compute.Matrix32
	elbow   *compute.Elbow
	fitRows int
	// fitSeries and fitWindow: the series (position in the cohort) and
	// window index of each fitting-sample row (window -1: not known).
	fitSeries, fitWindow []int32
	sampleK              []int // windows per state in the fitting sample, after relabelling
	totalWindows         int64

	bufs      sync.Pool // *[]float32 window buffers, one per busy worker
	surrPools sync.Pool // *[]float32 fitting pools of surrogate runs, one per busy worker
	peakBufs  freeList  // the variance-peak rows of a series being sampled, one per busy worker
	work      workTimes // per-part times of the parallel stages
	rowsDone  time.Time // when stage 4 had turned the last subject into rows
	fits      []FitStat
}

// coreDefault is N of the core networks when --core-timepoints is 0: the
// window width, or with --window-seconds the widest window in points of
// any series of the cohort (each series has its own; docs/methods.md §7).
// It was once the window from --min-freq, which no series used.
func coreDefault(o Options, inputs []SubjectInput) int {
	if o.WindowSeconds <= 0 {
		return o.Window
	}
	n := 0
	for _, in := range inputs {
		n = max(n, in.Window)
	}
	if n == 0 {
		return o.Window
	}
	return n
}

func (s *stages) setup() error {
	s.pre, s.win = computeOptions(s.o)
	if s.o.Distance == "manhattan" {
		s.dist = compute.Manhattan
	}
	lo, hi, n, err := ParseGrid(s.o.Grid)
	if err != nil {
		return &UsageError{Err: err}
	}
	s.grid = compute.Grid(lo, hi, n)
	s.core = s.o.CoreTimepoints
	if s.core == 0 {
		s.core = coreDefault(s.o, s.c.Inputs)
	}
	s.p = len(s.c.Keep)
	if c := s.o.FitCap(s.p); s.o.StatesFrom == nil && c < 10 {
		return &UsageError{Err: fmt.Errorf("--fit-memory %d bytes holds only %d windows of %d regions (%d values of 4 bytes each); raise it (at least %d bytes) or leave it at its default",
			s.o.FitMemory, c, s.p, compute.PairCount(s.p), 10*4*int64(compute.PairCount(s.p)))}
	}
	for _, in := range s.c.Inputs {
		s.totalWindows += int64(in.Windows)
	}
	return nil
}

// windows reads one series again (from the parsed-series cache when the
// cohort has one) and returns its window correlations.
// stage names the stage in the worker times.
func (s *stages) windows(stage string, in SubjectInput) (compute.Matrix32, error) {
	m, _, err := s.windowsAndSeries(stage, in)
	return m, err
}

// seriesWindow is the window of series in: its own width and step in
// points when it has them (--window-seconds), else the cohort's.
func (s *stages) seriesWindow(in SubjectInput) compute.WindowOptions {
	win := s.win
	if in.Window > 0 {
		win.Width, win.Step = in.Window, in.Step
	}
	return win
}

// windowsAndSeries is windows that also returns the preprocessed series.
func (s *stages) windowsAndSeries(stage string, in SubjectInput) (compute.Matrix32, compute.Series, error) {
	y, err := s.series(stage, in)
	if err != nil {
		return compute.Matrix32{}, compute.Series{}, err
	}
	t := time.Now()
	var buf []float32
	if b, ok := s.bufs.Get().(*[]float32); ok {
		buf = *b
	}
	m, err := compute.SlidingCorrelationsInto(buf, y, s.seriesWindow(in))
	if err != nil {
		return compute.Matrix32{}, compute.Series{}, s.regionError(in.Path, err)
	}
	s.work.since(stage+": windows", t)
	return m, y, nil
}

// series reads one series again (from the parsed-series cache when the
// cohort has one) and returns it preprocessed, its analysed regions only.
func (s *stages) series(stage string, in SubjectInput) (compute.Series, error) {
	t := time.Now()
	var y compute.Series
	var err error
	if in.cache != "" {
		if y, err = readSeriesCache(in.cache, in.Timepoints, len(s.c.Regions)); err != nil {
			return compute.Series{}, err
		}
	} else {
		sf, err := s.c.Source.Read(in.Input)
		if err != nil {
			return compute.Series{}, err
		}
		if sf.SHA256 != in.SHA256 {
			return compute.Series{}, fmt.Errorf("ingest: %s changed while being analysed; run again", in.Path)
		}
		y = sf.Series
	}
	t = s.work.since(stage+": read", t)
	if len(s.c.Keep) != y.P {
		y = subset(y, s.c.Keep)
	}
	y, err = compute.Preprocess(y, s.pre)
	if err != nil {
		return compute.Series{}, s.regionError(in.Path, err)
	}
	s.work.since(stage+": preprocess", t)
	return y, nil
}

// regionError names the region of a compute.RegionError (an index into
// the analysed columns) by its name and column in the file; validation
// refuses such series first, so this is a safety net.
func (s *stages) regionError(path string, err error) error {
	var re *compute.RegionError
	if errors.As(err, &re) && errors.Is(err, compute.ErrZeroVariance) && re.Region >= 0 && re.Region < len(s.c.Keep) {
		cp := *re
		cp.Region = s.c.Keep[re.Region]
		return windowProblem(path, s.c.Regions, &cp)
	}
	return fmt.Errorf("ingest: %s: %w", path, err)
}

// release hands a window matrix's storage back for the next series; m must
// not be used afterwards.
func (s *stages) release(m compute.Matrix32) {
	b := m.Data[:0]
	s.bufs.Put(&b)
}

func subset(y compute.Series, keep []int) compute.Series {
	out := compute.NewSeries(y.T, len(keep))
	for t := 0; t < y.T; t++ {
		for c, j := range keep {
			out.Data[t*len(keep)+c] = y.Data[t*y.P+j]
		}
	}
	return out
}

// parallel runs fn for i in [0,n) on the worker pool and hands each result
// to sink in index order, with at most 2*workers results waiting. The first
// error stops the feeding and is returned.
func parallel[R any](ctx context.Context, n, workers int, fn func(i int) (R, error), sink func(i int, r R) error) error {
	type out struct {
		r   R
		err error
	}
	results := make([]chan out, n)
	for i := range results {
		results[i] = make(chan out, 1)
	}
	jobs := make(chan int)
	slots := make(chan struct{}, 2*workers)
	stop := make(chan struct{})
	go func() {
		defer close(jobs)
		for i := range n {
			select {
			case slots <- struct{}{}:
			case <-stop:
				return
			}
			select {
			case jobs <- i:
			case <-stop:
				return
			}
		}
	}()
	for range workers {
		go func() {
			for i := range jobs {
				r, err := fn(i)
				results[i] <- out{r, err}
			}
		}()
	}
	var first error
	for i := range n {
		if first == nil && ctx.Err() != nil {
			first = ctx.Err()
		}
		if first != nil {
			break
		}
		o := <-results[i]
		<-slots
		if o.err != nil {
			first = o.err
			break
		}
		if err := sink(i, o.r); err != nil {
			first = err
		}
	}
	if first != nil {
		close(stop)
		// Drain in-flight work so no goroutine is left blocked.
		go func() {
			for range jobs {
			}
		}()
	}
	return first
}

// sample is stage 1: every subject's windows once, keeping the
// variance-peak windows (local maxima of the window variance) or all
// windows, at most a fair share per subject; the pool keeps a uniform
// sample of at most FitCap of them (see fitPool), so its memory is bounded
// by --fit-windows and --fit-memory, not by the cohort.
func (s *stages) sample(ctx context.Context) (compute.Matrix32, error) {
	n := len(s.c.Inputs)
	s.prog.Stage("sampling windows", n)
	// Variance-peak windows (local maxima of a series that changes slowly
	// from window to window) were about a fifth of the windows on
	// generated cohorts, so a quarter is reserved up front and the pool
	// grows beyond that when needed, never beyond its cap.
	hint := min(int64(n)*int64(s.perSeries()), s.totalWindows)
	if s.o.FitSample == "peaks" {
		hint = min(hint, s.totalWindows/4)
	}
	pool := s.newPool(hint)
	err := s.sampleRange(ctx, 0, n, func(i int, rowsOf []float32, win []int) error {
		pool.add(rowsOf, i, win)
		s.prog.Add(1)
		return nil
	})
	s.peakBufs.drop()
	if err != nil {
		return compute.Matrix32{}, err
	}
	return s.takePool(pool), nil
}

// perSeries is the most fitting-sample windows one series gives the fitting
// sample: ceil(2 C / N) for the N series of the cohort and the pool's cap
// C = FitCap, at least 1.
func (s *stages) perSeries() int {
	n := len(s.c.Inputs)
	c := s.o.FitCap(s.p)
	return max(1, (2*c+n-1)/n)
}

// newPool returns the empty fitting pool of this run: at most FitCap rows,
// hint rows reserved.
func (s *stages) newPool(hint int64) *fitPool {
	return newFitPool(s.o.FitCap(s.p), compute.PairCount(s.p), hint, s.o.Seed)
}

// takePool ends stage 1: the pool's rows as the fitting sample. It sets
// fitRows.
func (s *stages) takePool(p *fitPool) compute.Matrix32 {
	m := p.matrix()
	s.fitRows = m.Rows
	s.fitSeries, s.fitWindow = p.series, p.window
	return m
}

// fitPool is the fitting sample while stage 1 runs: a uniform sample
// without replacement of at most max of the rows offered to it, in the
// order offered (series order), by reservoir sampling (Vitter, "Random
// sampling with a reservoir", ACM TOMS 11(1), 1985, Algorithm R) with a
// generator seeded from (seed, 0). Its storage never exceeds max rows, so
// the bytes of the pool are bounded whatever the number of windows; with
// no more than max rows offered it keeps them all, in order.
type fitPool struct {
	max, d int
	seen   int64 // rows offered so far
	data   []float32
	rng    *rand.Rand
	// series and window say where each kept row came from: the series'
	// position in the cohort and the window's index in that series (-1
	// when not known).
	series, window []int32
}

func newFitPool(most, d int, hint int64, seed uint64) *fitPool {
	rows := int(min(int64(most), max(hint, 1)))
	return &fitPool{max: most, d: d, data: make([]float32, 0, rows*d), rng: rand.New(rand.NewPCG(seed, 0))}
}

// add offers rows (a whole number of rows of d values) of series i to the
// pool; win holds their window indices in the series (nil: not known).
func (p *fitPool) add(rows []float32, i int, win []int) {
	for r, off := 0, 0; off+p.d <= len(rows); r, off = r+1, off+p.d {
		row := rows[off : off+p.d]
		w := int32(-1)
		if win != nil {
			w = int32(win[r])
		}
		p.seen++
		if n := len(p.data) / p.d; n < p.max {
			if len(p.data)+p.d > cap(p.data) {
				// Grow to at most max rows: doubling, capped.
				grown := make([]float32, len(p.data), min(2*cap(p.data)+p.d, p.max*p.d))
				copy(grown, p.data)
				p.data = grown
			}
			p.data = append(p.data, row...)
			p.series, p.window = append(p.series, int32(i)), append(p.window, w)
			continue
		}
		if j := p.rng.Int64N(p.seen); j < int64(p.max) {
			copy(p.data[int(j)*p.d:], row)
			p.series[j], p.window[j] = int32(i), w
		}
	}
}

func (p *fitPool) matrix() compute.Matrix32 {
	return compute.Matrix32{Rows: len(p.data) / p.d, Cols: p.d, Data: p.data}
}

// sampleRange runs the per-series part of stage 1 for series lo..hi-1 of
// the cohort (in parallel) and hands each one's fitting-sample rows to sink in
// series order. A shard of a sharded run calls it for its own range; the
// series index i is the position in the whole cohort, so the draws do not
// depend on the sharding.
//
// sink also gets the rows' window indices in the series.
func (s *stages) sampleRange(ctx context.Context, lo, hi int, sink func(i int, rows []float32, win []int) error) error {
	perSubject := s.perSeries()
	D := compute.PairCount(s.p)
	type sampled struct {
		rows []float32
		win  []int
	}
	return parallel(ctx, hi-lo, s.workers, func(j int) (sampled, error) {
		i := lo + j
		if s.o.FitSample == "peaks" {
			rows, idx, err := s.peakWindows(s.c.Inputs[i])
			if err != nil {
				return sampled{}, err
			}
			if len(idx) > perSubject {
				rng := rand.New(rand.NewPCG(s.o.Seed, uint64(i)+1))
				pos := pickPositions(rng, len(idx), perSubject)
				kept := make([]int, len(pos))
				for n, q := range pos {
					kept[n] = idx[q]
					copy(rows[n*D:(n+1)*D], rows[q*D:(q+1)*D]) // q >= n: moves rows forward only
				}
				idx, rows = kept, rows[:len(pos)*D]
			}
			out := make([]float32, len(rows)) // the series' share, without the spare capacity
			copy(out, rows)
			s.peakBufs.put(rows)
			return sampled{out, idx}, nil
		}
		m, err := s.windows("sample", s.c.Inputs[i])
		if err != nil {
			return sampled{}, err
		}
		defer s.work.since("sample: peaks", time.Now())
		idx := fitCandidates(m, s.o.FitSample)
		if len(idx) > perSubject {
			rng := rand.New(rand.NewPCG(s.o.Seed, uint64(i)+1))
			idx = pick(rng, idx, perSubject)
		}
		out := make([]float32, 0, len(idx)*D)
		for _, r := range idx {
			out = append(out, m.Row(r)...)
		}
		s.release(m)
		return sampled{out, idx}, nil
	}, func(j int, got sampled) error {
		return sink(lo+j, got.rows, got.win)
	})
}

// peakWindows computes the windows of series in one at a time and keeps
// only its variance-peak windows (fitCandidates with "peaks": the local
// maxima of the window variance, or the middle window when there is none),
// returning their rows back to back and their window indices. A window is
// kept tentatively when its variance exceeds the one before and dropped
// when the next one's is higher, so at most one window more than the
// peaks is held, instead of every window of the series.
func (s *stages) peakWindows(in SubjectInput) ([]float32, []int, error) {
	y, err := s.series("sample", in)
	if err != nil {
		return nil, nil, err
	}
	t := time.Now()
	win := s.seriesWindow(in)
	W := compute.NumWindows(y.T, win.Width, win.Step)
	D := compute.PairCount(s.p)
	v := make([]float64, W)
	rows := s.peakBufs.get()
	var mid []float32
	var idx []int
	tentative := false
	err = compute.SlidingCorrelationsEach(y, win, nil, func(i int, r []float32) error {
		v[i] = compute.RowVariance(r)
		// LocalMaxima's test, one window late: window i-1 stays a peak
		// when v[i-1] >= v[i].
		if tentative && !(v[i-1] >= v[i]) {
			rows, idx = rows[:len(rows)-D], idx[:len(idx)-1]
		}
		tentative = (i == 0 || v[i] > v[i-1]) && !math.IsNaN(v[i])
		if tentative {
			rows, idx = append(rows, r...), append(idx, i)
		}
		if i == W/2 {
			mid = append(mid, r...)
		}
		return nil
	})
	if err != nil {
		s.peakBufs.put(rows)
		return nil, nil, s.regionError(in.Path, err)
	}
	if want := compute.LocalMaxima(v); !slices.Equal(idx, want) {
		return nil, nil, fmt.Errorf("ingest: %s: variance peaks %v kept while windows went by, %v afterwards (a bug: please report it)", in.Path, idx, want)
	}
	if len(idx) == 0 {
		rows, idx = append(rows[:0], mid...), []int{W / 2}
	}
	s.work.since("sample: windows and peaks", t)
	return rows, idx, nil
}

// freeList holds buffers for reuse. Unlike a sync.Pool, which the garbage
// collector empties, it keeps them: the peak rows of a series are ~15 MB
// at 200 regions, and allocating (and zeroing) them afresh for every series
// cost more CPU than computing them.
type freeList struct {
	mu   sync.Mutex
	free [][]float32
}

// get returns an empty buffer, with the capacity of one put back earlier
// when there is one.
func (l *freeList) get() []float32 {
	l.mu.Lock()
	defer l.mu.Unlock()
	if n := len(l.free); n > 0 {
		b := l.free[n-1]
		l.free = l.free[:n-1]
		return b[:0]
	}
	return nil
}

// put hands b back; it must not be used afterwards.
func (l *freeList) put(b []float32) {
	if cap(b) == 0 {
		return
	}
	l.mu.Lock()
	defer l.mu.Unlock()
	l.free = append(l.free, b)
}

// drop lets the garbage collector have every buffer.
func (l *freeList) drop() {
	l.mu.Lock()
	defer l.mu.Unlock()
	l.free = nil
}

// pick returns k of idx chosen uniformly without replacement, in their
// original order.
func pick(rng *rand.Rand, idx []int, k int) []int {
	out := pickPositions(rng, len(idx), k)
	for i, p := range out {
		out[i] = idx[p]
	}
	return out
}

// pickPositions returns k of the positions 0..n-1 chosen uniformly without
// replacement, in increasing order (pick's draws).
func pickPositions(rng *rand.Rand, n, k int) []int {
	perm := rng.Perm(n)[:k]
	sort.Ints(perm)
	return perm
}

// fit is stage 2: the elbow scan (or a fixed k) and the final centroids,
// relabelled so state 1 is the most frequent in the fitting sample.
//
// The scan fits every k with ScanRestarts restarts (0: Restarts); when that
// is fewer than Restarts, the picked k gets the remaining restarts, so its
// centroids are exactly those of a fit with Restarts restarts. The stored
// W(k) curve is the scan's.
func (s *stages) fit(ctx context.Context, x compute.Matrix32) error {
	opt := compute.KMeansOptions{Restarts: s.o.Restarts, MaxIter: s.o.MaxIter, Distance: s.dist, Workers: s.workers,
		Done: func() { s.prog.Add(1) }, Stop: func() bool { return ctx.Err() != nil }}
	var res compute.KMeansResult
	if s.o.States > 0 {
		if s.o.States > x.Rows {
			return &UsageError{Err: fmt.Errorf("--states %d is more than the %d windows available to fit the states", s.o.States, x.Rows)}
		}
		opt.K = s.o.States
		s.prog.Stage(fmt.Sprintf("k-means, k=%d", s.o.States), s.o.Restarts)
		t := time.Now()
		r, err := compute.KMeans(x, opt, s.o.Seed)
		if err != nil {
			return fmt.Errorf("ingest: fit states: %w", stopped(ctx, err))
		}
		s.work.since("fit: k-means", t)
		s.fits = append(s.fits, FitStat{K: opt.K, Restarts: opt.Restarts, Iterations: r.TotalIterations, Final: true})
		res, s.k = r, s.o.States
	} else {
		if s.o.StatesMax > x.Rows {
			return &UsageError{Err: fmt.Errorf("--states-max %d is more than the %d windows available to fit the states", s.o.StatesMax, x.Rows)}
		}
		scan := opt
		if s.o.ScanRestarts > 0 && s.o.ScanRestarts < opt.Restarts {
			scan.Restarts = s.o.ScanRestarts
		}
		// Progress moves once per restart of each k (opt.Done), then once
		// per extra restart at the picked k.
		s.prog.Stage(fmt.Sprintf("elbow scan, k=%d..%d", s.o.StatesMin, s.o.StatesMax),
			(s.o.StatesMax-s.o.StatesMin+1)*scan.Restarts+opt.Restarts-scan.Restarts)
		t := time.Now()
		e, fits, err := compute.ElbowScan(x, s.o.StatesMin, s.o.StatesMax, scan, s.o.Seed)
		if err != nil {
			return fmt.Errorf("ingest: elbow scan: %w", stopped(ctx, err))
		}
		t = s.work.since("fit: elbow scan", t)
		for _, f := range fits {
			s.fits = append(s.fits, FitStat{K: f.Centroids.Rows, Restarts: scan.Restarts, Iterations: f.TotalIterations})
		}
		s.elbow = &e
		e.Rule = s.o.KRule
		switch e.Rule {
		case "chord":
			s.k = e.ChordK
		case "second-diff":
			s.k = e.SecondDiffK
		case "gap", "strength":
		default:
			return fmt.Errorf("ingest: unknown k rule %q", e.Rule)
		}
		if e.Rule == "gap" || s.o.AllRules {
			gopt := compute.GapOptions{References: s.o.GapReferences, Sample: s.o.GapWindows, MaxIter: s.o.MaxIter,
				Distance: s.dist, Workers: s.workers, Done: func() { s.prog.Add(1) }, Stop: opt.Stop}
			s.prog.Stage(fmt.Sprintf("gap statistic, %d reference sets", s.o.GapReferences), s.o.GapReferences+1)
			tg := time.Now()
			g, err := compute.GapStatistic(x, s.o.StatesMin, s.o.StatesMax, gopt, s.o.Seed)
			if err != nil {
				return fmt.Errorf("ingest: gap statistic: %w", stopped(ctx, err))
			}
			t = s.work.since("fit: gap statistic", tg)
			e.Gap = &g
			if e.Rule == "gap" {
				s.k = g.K
			}
		}
		if e.Rule == "strength" || s.o.AllRules {
			halving := s.o.StrengthHalving
			if halving == "" { // options stored before the choice existed
				halving = "window"
			}
			strength := func(halving string) (compute.Strength, error) {
				sopt := compute.StrengthOptions{Splits: s.o.StrengthSplits, Sample: s.o.StrengthWindows, Threshold: s.o.StrengthThreshold,
					Restarts: scan.Restarts, MaxIter: s.o.MaxIter, Distance: s.dist, Workers: s.workers, Done: func() { s.prog.Add(1) }, Stop: opt.Stop}
				if halving == "subject" {
					g, err := s.strengthGroups(x.Rows)
					if err != nil {
						return compute.Strength{}, err
					}
					sopt.Groups = g
				}
				s.prog.Stage(fmt.Sprintf("prediction strength, %d random halvings by %s", s.o.StrengthSplits, halving), s.o.StrengthSplits)
				ts := time.Now()
				ps, err := compute.PredictionStrength(x, s.o.StatesMin, s.o.StatesMax, sopt, s.o.Seed)
				if err != nil {
					return ps, fmt.Errorf("ingest: prediction strength: %w", stopped(ctx, err))
				}
				t = s.work.since("fit: prediction strength", ts)
				return ps, nil
			}
			ps, err := strength(halving)
			if err != nil {
				return err
			}
			e.Strength = &ps
			if s.o.CompareHalvings {
				other := map[string]string{"subject": "window", "window": "subject"}[halving]
				ops, err := strength(other)
				if err != nil {
					return err
				}
				e.OtherStrength = &ops
			}
			if e.Rule == "strength" {
				s.k = ps.K
			}
		}
		res = fits[s.k-s.o.StatesMin]
		if scan.Restarts < opt.Restarts {
			more := opt
			more.K, more.FirstRestart, more.Restarts = s.k, scan.Restarts, opt.Restarts-scan.Restarts
			r, err := compute.KMeans(x, more, s.o.Seed)
			if err != nil {
				return fmt.Errorf("ingest: fit states: %w", stopped(ctx, err))
			}
			s.work.since("fit: final restarts", t)
			s.fits = append(s.fits, FitStat{K: more.K, Restarts: more.Restarts, Iterations: r.TotalIterations, Final: true})
			if r.WCSS < res.WCSS {
				res = r
			}
		}
	}
	if !res.Converged {
		s.c.Warnings = append(s.c.Warnings, fmt.Sprintf("the k-means fit at k = %d stopped at --max-iter %d before converging (relative change of W above 1e-6); its states may move with more iterations: raise --max-iter", s.k, s.o.MaxIter))
	}
	// Relabel: most frequent state first, ties by old label.
	order, count := frequencyOrder(res.Labels, s.k)
	s.cent = compute.NewMatrix32(s.k, x.Cols)
	s.sampleK = make([]int, s.k)
	for newL, oldL := range order {
		copy(s.cent.Row(newL), res.Centroids.Row(oldL))
		s.sampleK[newL] = count[oldL]
	}
	return nil
}

// strengthGroups labels the rows of the fitting sample for the prediction
// strength's halvings by subject (docs/methods.md §3.x): the subject's
// position among the cohort's subjects when the sample holds windows of at
// least two subjects. With one subject, each series' windows are cut into
// blocks of strengthBlock window widths, or into two halves when the series
// is shorter than two such blocks (by window start; the label is the
// series and the block), so only windows near a block's edge overlap
// windows of another block.
func (s *stages) strengthGroups(rows int) ([]int, error) {
	if len(s.fitSeries) != rows {
		return nil, fmt.Errorf("ingest: prediction strength: the fitting sample has %d rows but %d series labels", rows, len(s.fitSeries))
	}
	subject := map[string]int{}
	for _, in := range s.c.Inputs {
		if _, ok := subject[in.Subject]; !ok {
			subject[in.Subject] = len(subject)
		}
	}
	g := make([]int, rows)
	seen := map[int]bool{}
	for r, i := range s.fitSeries {
		g[r] = subject[s.c.Inputs[i].Subject]
		seen[g[r]] = true
	}
	if len(seen) >= 2 {
		return g, nil
	}
	for r, i := range s.fitSeries {
		in := s.c.Inputs[i]
		w := s.fitWindow[r]
		if w < 0 {
			return nil, fmt.Errorf("ingest: prediction strength: the fitting sample does not say which window of %s row %d is, needed to halve one subject by blocks of time", in.Rel, r+1)
		}
		win := s.seriesWindow(in)
		width, step := win.Width, win.Step
		block := max(1, min(strengthBlock*width/max(step, 1), (in.Windows+1)/2))
		g[r] = int(i)<<20 | int(w)/block
	}
	return g, nil
}

// strengthBlock is the length of the time blocks, in window widths, that
// halve a one-subject cohort for the prediction strength: windows start
// every Step points and overlap up to one width, so about 1/strengthBlock
// of a block's windows overlap a neighbouring block's (our choice, common
// practice, no source).
const strengthBlock = 4

// writeStatic writes the analysis-level tables: regions, elbow, centroids,
// subjects, excluded inputs.
func (s *stages) writeStatic(ctx context.Context, w *schema.Writer) error {
	if err := s.writeStates(ctx, w); err != nil {
		return err
	}
	return s.writeCohort(ctx, w)
}

// writeStates writes the tables of stage 2: elbow and state_centroids.
func (s *stages) writeStates(ctx context.Context, w *schema.Writer) error {
	id := w.ID
	eb := schema.NewBatch(schema.Elbow)
	defer eb.Release()
	if s.elbow != nil {
		for i, pt := range s.elbow.Points {
			var logW, refLogW, gap, se, pick, ps, psSE, psPick any
			if g := s.elbow.Gap; g != nil && i < len(g.Points) && g.Points[i].K == pt.K {
				gp := g.Points[i]
				logW, refLogW, gap, se, pick = gp.LogW, gp.RefLogW, gp.Gap, gp.SE, pt.K == g.K
			}
			if st := s.elbow.Strength; st != nil && i < len(st.Points) && st.Points[i].K == pt.K {
				ps, psSE, psPick = st.Points[i].Strength, st.Points[i].SE, pt.K == st.K
			}
			eb.Row(id, pt.K, pt.WCSS, pt.K == s.k, pt.K == s.elbow.ChordK, pt.K == s.elbow.SecondDiffK,
				logW, refLogW, gap, se, pick, ps, psSE, psPick)
		}
	}
	cb := schema.NewBatch(schema.StateCentroids)
	defer cb.Release()
	for st := range s.k {
		row := s.cent.Row(st)
		for q, v := range row {
			i, j := compute.PairOf(s.p, q)
			cb.Row(id, st+1, i+1, j+1, float64(v))
		}
	}
	for _, b := range []*schema.Batch{eb, cb} {
		if err := w.Append(ctx, b); err != nil {
			return err
		}
	}
	return nil
}

// writeCohort writes the tables known once the cohort is validated:
// regions, excluded_inputs and subjects.
func (s *stages) writeCohort(ctx context.Context, w *schema.Writer) error {
	id := w.ID
	rb := schema.NewBatch(schema.Regions)
	defer rb.Release()
	node := map[int]int{}
	for n, j := range s.c.Keep {
		node[j] = n + 1
	}
	for j, name := range s.c.Regions {
		if n, ok := node[j]; ok {
			rb.Row(id, n, j+1, name, false)
		} else {
			rb.Row(id, nil, j+1, name, true)
		}
	}
	xb := schema.NewBatch(schema.ExcludedInputs)
	defer xb.Release()
	for _, x := range s.c.Excluded {
		xb.Row(id, x.Subject, x.Session, x.Rel, x.Reason)
	}
	for _, b := range []*schema.Batch{rb, xb} {
		if err := w.Append(ctx, b); err != nil {
			return err
		}
	}
	return s.writeSubjects(ctx, w)
}

// perSubject is stage 3 (parallel) feeding stage 4 (in order): results
// become rows in series order, and full batches are inserted by a writer
// goroutine while the workers go on.
func (s *stages) perSubject(ctx context.Context, w *schema.Writer) ([]float64, error) {
	n := len(s.c.Inputs)
	s.prog.Stage("subjects", n)
	out := newOutBatches()
	full := make(chan *outBatches, 1)
	var werr error
	var failed atomic.Bool
	written := make(chan struct{})
	go func() {
		defer close(written)
		for b := range full {
			if werr == nil {
				t := time.Now()
				werr = b.flush(ctx, w)
				s.work.since("write: inserts", t)
				failed.Store(werr != nil)
			}
			b.release()
		}
	}()
	occ := make([]float64, s.k)
	err := parallel(ctx, n, s.workers, func(i int) (*subjectResult, error) {
		return s.subject(s.c.Inputs[i])
	}, func(i int, r *subjectResult) error {
		defer s.work.since("write: rows", time.Now())
		in := s.c.Inputs[i]
		out.add(w.ID, in, r, s)
		for k := range occ {
			occ[k] += r.dyn.Occupancy[k] / float64(n)
		}
		s.prog.Add(1)
		if out.rows() > 1<<20 {
			if failed.Load() {
				return errors.New("ingest: writing stopped") // the writer's error is returned below
			}
			full <- out
			out = newOutBatches()
		}
		return nil
	})
	s.rowsDone = time.Now()
	if err == nil {
		full <- out
	} else {
		out.release()
	}
	close(full)
	<-written
	if werr != nil {
		return nil, werr
	}
	if err != nil {
		return nil, err
	}
	return occ, nil
}

// subjectResult is one series' results, before they become rows.
type subjectResult struct {
	labels []int
	dist   []float64
	dyn    compute.StateDynamics
	nets   []*stateNet // per state; nil when the state is never visited
}

type stateNet struct {
	windows    int
	meanWeight float64
	filt       compute.Filtration
	b0, b1     []int
	// core is the number of core time points of the state;
	// coreB0, coreB1 the Betti curves of the network of the first
	// stages.core of them, nil when there are fewer (docs/methods.md §7).
	core           int
	coreB0, coreB1 []int
}

func (s *stages) subject(in SubjectInput) (*subjectResult, error) {
	y, err := s.series("subjects", in)
	if err != nil {
		return nil, err
	}
	t := time.Now()
	// Each window is labelled and added to its state's sum as soon as it
	// is computed, while it is in the processor's cache; the windows of
	// the series are never held together (the same labels, distances and
	// sums as compute.Assign and compute.SumRowsByLabel on the matrix:
	// compute's TestAssignerEqualsAssign and TestRowSumsAndVarianceEqualMatrixForms).
	win := s.seriesWindow(in)
	W := compute.NumWindows(y.T, win.Width, win.Step)
	labels, dist := make([]int, W), make([]float64, W)
	as := compute.NewAssigner(s.cent, s.dist)
	dots := as.Scratch()
	rs := compute.NewRowSums(s.k, compute.PairCount(s.p))
	err = compute.SlidingCorrelationsEach(y, win, nil, func(i int, row []float32) error {
		l, d := as.Nearest(row, dots)
		if l < 0 {
			return fmt.Errorf("window %d has no finite distance to any state", i+1)
		}
		labels[i], dist[i] = l, d
		rs.Add(row, l)
		return nil
	})
	if err != nil {
		return nil, s.regionError(in.Path, err)
	}
	t = s.work.since("subjects: windows, assign and sums", t)
	dyn, err := compute.Dynamics(labels, s.k)
	if err != nil {
		return nil, fmt.Errorf("ingest: %s: %w", in.Path, err)
	}
	r := &subjectResult{labels: labels, dist: dist, dyn: dyn, nets: make([]*stateNet, s.k)}
	sums, counts := rs.Sums, rs.Counts
	core, err := compute.CoreTimepoints(labels, s.k, y.T, win.Width, win.Step)
	if err != nil {
		return nil, fmt.Errorf("ingest: %s: %w", in.Path, err)
	}
	t = s.work.since("subjects: dynamics and networks", t)
	defer s.work.since("subjects: filtrations and Betti curves", t)
	for st := range s.k {
		if counts[st] == 0 {
			continue
		}
		net := sums[st]
		mean := 0.0
		for q := range net {
			net[q] /= float64(counts[st])
			if s.o.FisherZ {
				net[q] = math.Tanh(net[q])
			}
			mean += net[q]
		}
		f, err := compute.GraphFiltration(s.p, net)
		if err != nil {
			return nil, fmt.Errorf("ingest: %s state %d: %w", in.Path, st+1, err)
		}
		b0, b1 := f.Curves(s.grid)
		sn := &stateNet{windows: counts[st], meanWeight: mean / float64(len(net)), filt: f, b0: b0, b1: b1, core: len(core[st])}
		if len(core[st]) >= s.core {
			cn, err := compute.CorrelationOfRows(y, core[st][:s.core])
			if err != nil {
				return nil, fmt.Errorf("ingest: %s state %d core network: %w", in.Path, st+1, err)
			}
			cf, err := compute.GraphFiltration(s.p, cn)
			if err != nil {
				return nil, fmt.Errorf("ingest: %s state %d core network: %w", in.Path, st+1, err)
			}
			sn.coreB0, sn.coreB1 = cf.Curves(s.grid)
		}
		r.nets[st] = sn
	}
	return r, nil
}

// outBatches accumulates per-subject rows between flushes.
type outBatches struct {
	inputs, seq, metrics, dyn, trans, curves, events, nets, core *schema.Batch
}

func newOutBatches() *outBatches {
	return &outBatches{
		inputs: schema.NewBatch(schema.Inputs), seq: schema.NewBatch(schema.StateSequence),
		metrics: schema.NewBatch(schema.StateMetrics), dyn: schema.NewBatch(schema.SubjectDynamics),
		trans: schema.NewBatch(schema.Transitions), curves: schema.NewBatch(schema.BettiCurves),
		events: schema.NewBatch(schema.FiltrationEvts), nets: schema.NewBatch(schema.StateNetworks),
		core: schema.NewBatch(schema.CoreBettiCurves),
	}
}

func (b *outBatches) all() []*schema.Batch {
	return []*schema.Batch{b.inputs, b.seq, b.metrics, b.dyn, b.trans, b.curves, b.events, b.nets, b.core}
}

func (b *outBatches) rows() int {
	n := 0
	for _, x := range b.all() {
		n += x.Len()
	}
	return n
}

func (b *outBatches) flush(ctx context.Context, w *schema.Writer) error {
	var errs []error
	for _, x := range b.all() {
		if err := w.Append(ctx, x); err != nil {
			errs = append(errs, err)
		}
	}
	return errors.Join(errs...)
}

func (b *outBatches) release() {
	for _, x := range b.all() {
		x.Release()
	}
}

func (b *outBatches) add(id int, in SubjectInput, r *subjectResult, s *stages) {
	sub, ses := in.Subject, in.Session
	window, step := in.Window, in.Step
	if window == 0 { // a plan written before per-series windows
		window, step = s.o.Window, s.o.Step
	}
	b.inputs.Row(id, sub, ses, in.Rel, in.SHA256, in.Timepoints, len(s.c.Regions), in.TR, in.TRSource, window, step)
	half := float64(window-1) / 2
	for wi, l := range r.labels {
		start := wi * step
		b.seq.Row(id, sub, ses, wi+1, start, (float64(start)+half)*in.TR, l+1, r.dist[wi])
	}
	d := r.dyn
	visited := 0
	for st := range s.k {
		var mw, ms *float64
		if d.Dwells[st] > 0 {
			visited++
			a, c := d.MeanDwell[st], d.MeanDwell[st]*float64(step)*in.TR
			mw, ms = &a, &c
		}
		var cw, cs *float64 // complete runs only (docs/methods.md §4)
		if d.CompleteDwells[st] > 0 {
			a, c := d.CompleteMeanDwell[st], d.CompleteMeanDwell[st]*float64(step)*in.TR
			cw, cs = &a, &c
		}
		b.metrics.Row(id, sub, ses, st+1, d.Occupancy[st], d.Dwells[st], mw, ms,
			d.CompleteDwells[st], d.Dwells[st]-d.CompleteDwells[st], cw, cs)
	}
	rate := 0.0
	if d.Windows > 1 {
		rate = float64(d.Transitions) / float64(d.Windows-1)
	}
	b.dyn.Row(id, sub, ses, d.Windows, d.Transitions, rate, visited)
	prob, ok := d.Probabilities()
	for i := range s.k {
		for j := range s.k {
			var p *float64
			if ok[i] {
				v := prob[i][j]
				p = &v
			}
			b.trans.Row(id, sub, ses, i+1, j+1, d.Counts[i][j], p)
		}
	}
	for st, net := range r.nets {
		if net == nil {
			continue
		}
		for g, e := range s.grid {
			b.curves.Row(id, sub, ses, st+1, 0, e, net.b0[g])
		}
		for g, e := range s.grid {
			b.curves.Row(id, sub, ses, st+1, 1, e, net.b1[g])
		}
		b.events.AppendEvents(id, sub, ses, st+1, 0, net.filt.Beta0Events)
		b.events.AppendEvents(id, sub, ses, st+1, 1, net.filt.Beta1Events)
		tree := 0.0
		for _, v := range net.filt.Beta0Events {
			tree += v
		}
		b.nets.Row(id, sub, ses, st+1, net.windows, net.meanWeight, tree, net.core)
		if net.coreB0 != nil {
			for g, e := range s.grid {
				b.core.Row(id, sub, ses, st+1, 0, e, net.coreB0[g])
			}
			for g, e := range s.grid {
				b.core.Row(id, sub, ses, st+1, 1, e, net.coreB1[g])
			}
		}
	}
}

// stopped turns a fit ended by KMeansOptions.Stop into the context's error,
// so an interrupt reads as one whatever stage it reached.
func stopped(ctx context.Context, err error) error {
	if errors.Is(err, compute.ErrStopped) && ctx.Err() != nil {
		return ctx.Err()
	}
	return err
}

// IntoFile validates the cohort o names and writes it as one analysis into
// the warehouse file at path (created when missing): LoadCohort, then Run on
// a connection to that file. The command line does the same steps itself,
// to interleave its own checks; library users and tests call this.
func IntoFile(ctx context.Context, path string, o Options, prog Progress) (*Summary, error) {
	c, err := LoadCohort(o)
	if err != nil {
		return nil, err
	}
	defer c.Close()
	db, err := schema.Open(path, false, nil)
	if err != nil {
		return nil, err
	}
	defer db.Close()
	return Run(ctx, db, c, o, prog)
}

// fitCandidates returns the windows (rows of m) of one series that may enter
// the fitting sample: every window with --fit-sample all, else the local
// maxima of window variance, or the middle window when there is none
// (docs/methods.md §3). Every surrogate run and the analysis's sample with
// --fit-sample all draw from it; with peaks the analysis's sample applies
// the same rule window by window (peakWindows, which checks its peaks
// against LocalMaxima).
func fitCandidates(m compute.Matrix32, fitSample string) []int {
	if fitSample == "peaks" {
		if idx := compute.LocalMaxima(compute.WindowVariance(m)); len(idx) > 0 {
			return idx
		}
		return []int{m.Rows / 2}
	}
	idx := make([]int, m.Rows)
	for r := range idx {
		idx[r] = r
	}
	return idx
}

// frequencyOrder returns the k labels ordered by how often they occur in
// labels, most frequent first, ties by label (the relabelling that makes
// state 1 the most frequent state of the fitting sample), and the count of
// each label.
func frequencyOrder(labels []int, k int) (order, count []int) {
	count = make([]int, k)
	for _, l := range labels {
		count[l]++
	}
	order = make([]int, k)
	for i := range order {
		order[i] = i
	}
	slices.SortStableFunc(order, func(a, b int) int { return cmp.Compare(count[b], count[a]) })
	return order, count
}
