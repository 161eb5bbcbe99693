package ingest

import (
	"context"
	"crypto/rand"
	"crypto/sha256"
	"database/sql"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"maps"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/schema"
)

// The staged pipeline runs the stages of Run as separate processes that
// exchange files in a work folder, so that a scheduler can run shards of
// series side by side:
//
//	plan     (once)      validate the whole cohort; manifest.json, cohort tables
//	sample   (per shard) stage 1 for the shard's series: fitting-sample windows
//	fit      (once)      pool the fitting-sample windows of every shard in series order, cap, fit
//	compute  (per shard) stage 3 for the shard's series: every per-series table
//	merge    (once)      all tables into a warehouse in one transaction
//
// The work folder:
//
//	manifest.json                          options, cohort, shard count (plan)
//	sample/shard=<i>/data.parquet          fitting-sample windows of shard i
//	tables/<table>/shard=0/data.parquet    regions, excluded_inputs, subjects (plan); elbow, state_centroids (fit)
//	tables/<table>/shard=<i>/data.parquet  the per-series tables of shard i (compute)
//	done/<stage>[-<i>].json                written last by each stage: what it wrote
//
// Shard i of n (1-based) holds series floor((i-1)N/n) .. floor(iN/n)-1 of
// the N validated series, in the manifest's order. Every random draw is
// seeded from (seed, index in the whole cohort), the fit pools the shards
// in order and the merge appends them in order, so a sharded run writes the
// same rows as Run. Rows in the work folder carry analysis_id 0; merge
// gives them the warehouse's id.

// ManifestFormat is the layout version of manifest.json.
const ManifestFormat = 1

// Manifest is the plan of a staged run, written once by Plan.
type Manifest struct {
	Format   int              `json:"format"`
	Tool     string           `json:"tool_version"`
	PlanID   string           `json:"plan_id"` // random; every later stage records it
	Created  time.Time        `json:"created"`
	Shards   int              `json:"shards"`
	Options  Options          `json:"options"`
	Regions  []string         `json:"regions"` // every column as read
	Keep     []int            `json:"keep"`    // analysed columns (0-based)
	Dropped  []int            `json:"dropped"` // constant columns left out (0-based)
	Inputs   []PlannedInput   `json:"inputs"`  // validated series, in analysis order
	Excluded []PlannedSkip    `json:"excluded"`
	Warnings []string         `json:"warnings"`
	Counts   map[string]int64 `json:"rows"` // rows of the tables plan wrote
}

// PlannedInput is one validated series of the manifest.
type PlannedInput struct {
	Subject    string  `json:"subject"`
	Session    string  `json:"session"`
	Path       string  `json:"path"`
	Rel        string  `json:"rel"`
	Sidecar    string  `json:"sidecar"`
	SHA256     string  `json:"sha256"`
	TR         float64 `json:"tr_seconds"`
	TRSource   string  `json:"tr_source"`
	Timepoints int     `json:"timepoints"`
	Windows    int     `json:"windows"`
	Window     int     `json:"window_points,omitempty"` // 0 in older plans: the options' --window
	Step       int     `json:"step_points,omitempty"`
}

// PlannedSkip is a series excluded under --on-bad-subject skip.
type PlannedSkip struct {
	Subject string `json:"subject"`
	Session string `json:"session"`
	Path    string `json:"path"`
	Rel     string `json:"rel"`
	Reason  string `json:"reason"`
}

// Shard is shard I of N, counted from 1.
type Shard struct{ I, N int }

func (s Shard) String() string { return fmt.Sprintf("%d/%d", s.I, s.N) }

// ParseShard reads "i/n" with 1 <= i <= n.
func ParseShard(s string) (Shard, error) {
	a, b, ok := strings.Cut(s, "/")
	i, e1 := strconv.Atoi(a)
	n, e2 := strconv.Atoi(b)
	if !ok || e1 != nil || e2 != nil || n < 1 || i < 1 || i > n {
		return Shard{}, &UsageError{Err: fmt.Errorf("--shard %q: want i/n with 1 <= i <= n, for example 2/8 (with Slurm: $SLURM_ARRAY_TASK_ID/n)", s)}
	}
	return Shard{I: i, N: n}, nil
}

// Range is the series of the shard among n: lo..hi-1.
func (s Shard) Range(n int) (lo, hi int) {
	return (s.I - 1) * n / s.N, s.I * n / s.N
}

// Work is an opened work folder of a staged run.
type Work struct {
	Dir      string
	Manifest *Manifest
	cohort   *Cohort
	sum      string // SHA-256 of manifest.json as read
}

// Stage results, for printing.
type (
	// ShardSummary is what a sample or compute shard did.
	ShardSummary struct {
		Shard   Shard
		Series  int              // series of this shard
		Rows    map[string]int64 // rows written per table ("fit_sample" for stage 1)
		Seconds float64
	}
	// FitSummary is what the fit stage did.
	FitSummary struct {
		States     int
		FitWindows int
		Elbow      *compute.Elbow // nil when k was fixed or the states reused
		StatesFrom *StatesFrom
		Seconds    float64
	}
)

// stageMark is written last by each stage (done/<stage>[-<i>].json); a
// later stage trusts only the outputs a mark vouches for.
type stageMark struct {
	Stage      string           `json:"stage"`
	Shard      int              `json:"shard,omitempty"`
	Shards     int              `json:"shards"`
	PlanID     string           `json:"plan_id"`
	FitID      string           `json:"fit_id,omitempty"` // fit: its id; compute: the fit it used
	Series     int              `json:"series,omitempty"`
	Rows       map[string]int64 `json:"rows"`
	Seconds    float64          `json:"seconds"`
	States     int              `json:"states,omitempty"`
	FitWindows int              `json:"fit_windows,omitempty"`
	Elbow      *compute.Elbow   `json:"elbow,omitempty"`
	StatesFrom *StatesFrom      `json:"states_from,omitempty"`
	// Manifest is the SHA-256 of manifest.json when the stage ran: a
	// manifest edited since is refused (OpenWork, readMark).
	Manifest string `json:"manifest_sha256"`
	// Files are the SHA-256 of every file the stage wrote, by path
	// relative to the work folder; later stages verify them before reading
	// (a file changed, missing, or copied from another shard is refused).
	Files map[string]string `json:"files"`
}

const (
	sampleTable = "fit_sample" // stage 1's fitting-sample windows (not a warehouse table)
	onceShard   = 0            // partition of the tables written once
)

// Tables written per series by stage 3, in the order merge appends them.
var seriesTables = []string{schema.Inputs, schema.StateSequence, schema.StateMetrics, schema.SubjectDynamics,
	schema.Transitions, schema.BettiCurves, schema.FiltrationEvts, schema.StateNetworks, schema.CoreBettiCurves}

// tablePath is the Parquet file of table in partition shard.
func (w *Work) tablePath(shard int) func(string) string {
	return func(table string) string {
		if table == sampleTable {
			return filepath.Join(w.Dir, "sample", fmt.Sprintf("shard=%d", shard), "data.parquet")
		}
		return filepath.Join(w.Dir, "tables", table, fmt.Sprintf("shard=%d", shard), "data.parquet")
	}
}

func markName(stage string, shard int) string {
	if shard == 0 {
		return stage + ".json"
	}
	return fmt.Sprintf("%s-%d.json", stage, shard)
}

// writeJSON writes v to path through a temporary file and a rename, so a
// reader never sees half a file.
func writeJSON(path string, v any) error {
	b, err := json.MarshalIndent(v, "", "  ")
	if err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	tmp := path + ".partial"
	if err := os.WriteFile(tmp, append(b, '\n'), 0o644); err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	if err := os.Rename(tmp, path); err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	return nil
}

// writeMark writes the done mark of a stage last, with the checksums of
// the files it wrote.
func (w *Work) writeMark(m stageMark, files []string) error {
	m.Shards, m.PlanID, m.Manifest = w.Manifest.Shards, w.Manifest.PlanID, w.sum
	m.Files = map[string]string{}
	for _, f := range files {
		rel, err := filepath.Rel(w.Dir, f)
		if err != nil {
			return fmt.Errorf("ingest: %w", err)
		}
		if m.Files[filepath.ToSlash(rel)], err = fileSHA256(f); err != nil {
			return err
		}
	}
	return writeJSON(filepath.Join(w.Dir, "done", markName(m.Stage, m.Shard)), m)
}

// fileSHA256 is the hex SHA-256 of a file's bytes.
func fileSHA256(path string) (string, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", fmt.Errorf("ingest: %w", err)
	}
	defer f.Close()
	h := sha256.New()
	if _, err := io.Copy(h, f); err != nil {
		return "", fmt.Errorf("ingest: %s: %w", path, err)
	}
	return hex.EncodeToString(h.Sum(nil)), nil
}

// stageName is how a mark's stage is run, for messages.
func (w *Work) stageName(m *stageMark) string {
	if m.Shard > 0 {
		return fmt.Sprintf("stage %s --shard %d/%d", m.Stage, m.Shard, w.Manifest.Shards)
	}
	return "stage " + m.Stage
}

// verify checks every file the marks vouch for against its recorded
// checksum, before a stage reads them. A file that matches another
// file's checksum is named as a copy of it (one shard's file copied over
// another's).
func (w *Work) verify(marks ...*stageMark) error {
	bySum := map[string]string{}
	for _, m := range marks {
		for rel, sum := range m.Files {
			bySum[sum] = rel
		}
	}
	for _, m := range marks {
		if len(m.Files) == 0 {
			return fmt.Errorf("ingest: the done mark of %s in %s lists no files; run it again", w.stageName(m), w.Dir)
		}
		for _, rel := range slices.Sorted(maps.Keys(m.Files)) {
			p := filepath.Join(w.Dir, filepath.FromSlash(rel))
			got, err := fileSHA256(p)
			if errors.Is(err, fs.ErrNotExist) {
				return fmt.Errorf("ingest: %s is missing, though %s finished; run %s again", p, w.stageName(m), w.stageName(m))
			}
			if err != nil {
				return err
			}
			if got == m.Files[rel] {
				continue
			}
			if other, ok := bySum[got]; ok && other != rel {
				return fmt.Errorf("ingest: %s is not the file %s wrote: it is a copy of %s; run %s again", p, w.stageName(m), other, w.stageName(m))
			}
			return fmt.Errorf("ingest: %s was changed after %s wrote it (its checksum differs from the one in its done mark); run %s again", p, w.stageName(m), w.stageName(m))
		}
	}
	return nil
}

// startStage takes the stage's lock for this shard (see lockStage) and
// removes its earlier done mark, so that while it runs, and after it fails,
// no mark vouches for files being replaced.
func (w *Work) startStage(stage string, shard int) (unlock func(), err error) {
	what := "stage " + stage
	if shard > 0 {
		what = fmt.Sprintf("stage %s --shard %d/%d", stage, shard, w.Manifest.Shards)
	}
	if err := os.MkdirAll(filepath.Join(w.Dir, "done"), 0o755); err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	unlock, err = lockStage(filepath.Join(w.Dir, "done", "."+strings.TrimSuffix(markName(stage, shard), ".json")+".lock"), what)
	if err != nil {
		return nil, err
	}
	if err := os.Remove(filepath.Join(w.Dir, "done", markName(stage, shard))); err != nil && !errors.Is(err, fs.ErrNotExist) {
		unlock()
		return nil, fmt.Errorf("ingest: %w", err)
	}
	return unlock, nil
}

// readMark reads the mark of a stage (shard 0: a stage run once) and checks
// it belongs to this plan.
func (w *Work) readMark(stage string, shard int) (*stageMark, error) {
	path := filepath.Join(w.Dir, "done", markName(stage, shard))
	b, err := os.ReadFile(path)
	if errors.Is(err, fs.ErrNotExist) {
		what := "stage " + stage
		if shard > 0 {
			what = fmt.Sprintf("stage %s --shard %d/%d", stage, shard, w.Manifest.Shards)
		}
		return nil, fmt.Errorf("ingest: %s has not finished in %s (no %s); run it first", what, w.Dir, path)
	}
	if err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	var m stageMark
	if err := json.Unmarshal(b, &m); err != nil {
		return nil, fmt.Errorf("ingest: %s: %w", path, err)
	}
	if m.PlanID != w.Manifest.PlanID || m.Shards != w.Manifest.Shards || m.Stage != stage || m.Shard != shard {
		return nil, fmt.Errorf("ingest: %s belongs to another plan or shard than %s; run the stage again", path, filepath.Join(w.Dir, "manifest.json"))
	}
	if m.Manifest != w.sum {
		return nil, fmt.Errorf("ingest: %s was written under another manifest.json than the one in %s (changed since); plan again into a new folder", path, w.Dir)
	}
	return &m, nil
}

// Plan validates the cohort of o once (LoadCohort) and writes a new work
// folder: the manifest and the cohort tables (regions, excluded_inputs,
// subjects). Validation needs every file before any window is computed
// (constant regions are dropped from every series, all series must list the
// same regions, each series' share of the fitting sample depends on the
// cohort size), so it is one job. The input, atlas and label paths are made
// absolute so that later stages may run in other folders.
func Plan(ctx context.Context, o Options, dir string, shards int) (w *Work, err error) {
	if err := o.Check(); err != nil {
		return nil, err
	}
	if shards < 1 {
		return nil, &UsageError{Err: fmt.Errorf("--shards %d: need at least 1", shards)}
	}
	ents, statErr := os.ReadDir(dir)
	if statErr == nil && len(ents) > 0 {
		return nil, &UsageError{Err: fmt.Errorf("--work %s is not empty; plan into a new folder (a plan cannot change under finished shards)", dir)}
	}
	defer func() {
		// A failed plan leaves no folder it made, so the next one may start.
		if err != nil && errors.Is(statErr, fs.ErrNotExist) {
			os.RemoveAll(dir)
		}
	}()
	for _, p := range []*string{&o.Input, &o.Atlas, &o.AtlasLabels} {
		if *p == "" {
			continue
		}
		abs, err := filepath.Abs(*p)
		if err != nil {
			return nil, fmt.Errorf("ingest: %w", err)
		}
		*p = abs
	}
	c, err := LoadCohort(o)
	if err != nil {
		return nil, err
	}
	o = c.Apply(o)
	if shards > len(c.Inputs) {
		return nil, &UsageError{Err: fmt.Errorf("--shards %d is more than the %d series of the cohort", shards, len(c.Inputs))}
	}
	idb := make([]byte, 8)
	rand.Read(idb)
	m := &Manifest{Format: ManifestFormat, Tool: Version, PlanID: hex.EncodeToString(idb), Created: time.Now().UTC(),
		Shards: shards, Options: o, Regions: c.Regions, Keep: c.Keep, Dropped: c.Dropped, Warnings: c.Warnings}
	for _, in := range c.Inputs {
		m.Inputs = append(m.Inputs, PlannedInput{Subject: in.Subject, Session: in.Session, Path: in.Path, Rel: in.Rel,
			Sidecar: in.Sidecar, SHA256: in.SHA256, TR: in.TR, TRSource: in.TRSource, Timepoints: in.Timepoints, Windows: in.Windows, Window: in.Window, Step: in.Step})
	}
	for _, x := range c.Excluded {
		m.Excluded = append(m.Excluded, PlannedSkip{Subject: x.Subject, Session: x.Session, Path: x.Path, Rel: x.Rel, Reason: x.Reason})
	}
	w = &Work{Dir: dir, Manifest: m, cohort: c}
	st, err := w.stages(o.Workers, nil)
	if err != nil {
		return nil, err
	}
	pw := schema.BeginParquet(0, w.tablePath(onceShard))
	if err := st.writeCohort(ctx, pw); err != nil {
		pw.Rollback()
		return nil, err
	}
	if err := closeTables(ctx, pw, schema.Regions, schema.ExcludedInputs); err != nil {
		return nil, err
	}
	m.Counts = pw.Rows()
	// The manifest, then its checksum with the plan's files in the done
	// mark of the plan: a folder without both holds no plan, and an edit
	// of the manifest afterwards is refused by every later stage.
	mpath := filepath.Join(dir, "manifest.json")
	if err := writeJSON(mpath, m); err != nil {
		return nil, err
	}
	if w.sum, err = fileSHA256(mpath); err != nil {
		return nil, err
	}
	if err := w.writeMark(stageMark{Stage: "plan", Rows: m.Counts}, pw.Files()); err != nil {
		return nil, err
	}
	return w, nil
}

// closeTables gives every named table that got no rows an empty file, so
// each table a stage owns is there to read, and commits.
func closeTables(ctx context.Context, pw *schema.Writer, tables ...string) error {
	have := pw.Rows()
	for _, t := range tables {
		if _, ok := have[t]; ok {
			continue
		}
		b := schema.NewBatch(t)
		rec := b.Record()
		err := pw.AppendRecord(ctx, t, rec)
		rec.Release()
		b.Release()
		if err != nil {
			pw.Rollback()
			return err
		}
	}
	return pw.Commit(ctx)
}

// OpenWork reads the manifest of a planned work folder and checks that it
// was written by a compatible topostate.
func OpenWork(dir string) (*Work, error) {
	path := filepath.Join(dir, "manifest.json")
	b, err := os.ReadFile(path)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, &UsageError{Err: fmt.Errorf("--work %s has no manifest.json; run 'topostate stage plan' into it first", dir)}
	}
	if err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	var m Manifest
	if err := json.Unmarshal(b, &m); err != nil {
		return nil, fmt.Errorf("ingest: %s: %w", path, err)
	}
	sum := sha256.Sum256(b)
	if m.Format != ManifestFormat {
		return nil, fmt.Errorf("ingest: %s has format %d; this topostate reads format %d", path, m.Format, ManifestFormat)
	}
	if m.Tool != Version {
		return nil, fmt.Errorf("ingest: %s was planned by topostate %s, this is %s; every stage of a run must use the same version", path, m.Tool, Version)
	}
	if m.Shards < 1 || len(m.Inputs) < m.Shards {
		return nil, fmt.Errorf("ingest: %s: %d shards for %d series", path, m.Shards, len(m.Inputs))
	}
	src, err := NewSource(m.Options)
	if err != nil {
		return nil, err
	}
	c := &Cohort{Dir: m.Options.Input, Source: src, Regions: m.Regions, Keep: m.Keep, Dropped: m.Dropped, Warnings: m.Warnings}
	for _, in := range m.Inputs {
		c.Inputs = append(c.Inputs, SubjectInput{Input: Input{Subject: in.Subject, Session: in.Session, Path: in.Path, Rel: in.Rel, Sidecar: in.Sidecar},
			TR: in.TR, TRSource: in.TRSource, SHA256: in.SHA256, Timepoints: in.Timepoints, Windows: in.Windows, Window: in.Window, Step: in.Step})
	}
	for _, x := range m.Excluded {
		c.Excluded = append(c.Excluded, Exclusion{Input: Input{Subject: x.Subject, Session: x.Session, Path: x.Path, Rel: x.Rel}, Reason: x.Reason})
	}
	w := &Work{Dir: dir, Manifest: &m, cohort: c, sum: hex.EncodeToString(sum[:])}
	// The plan's done mark holds the manifest's checksum at plan time.
	pm, err := os.ReadFile(filepath.Join(dir, "done", markName("plan", 0)))
	if err != nil {
		return nil, fmt.Errorf("ingest: %s has no done/plan.json: the plan did not finish; plan again into a new folder", dir)
	}
	var plan stageMark
	if err := json.Unmarshal(pm, &plan); err != nil || plan.Manifest != w.sum || plan.PlanID != m.PlanID {
		return nil, fmt.Errorf("ingest: %s was changed after it was planned (its checksum differs from the one recorded in done/plan.json); "+
			"the recorded parameters must not change under finished shards: plan again into a new folder", path)
	}
	return w, nil
}

// stages sets up the stages of the whole cohort with this run's workers.
func (w *Work) stages(workers int, prog Progress) (*stages, error) {
	if prog == nil {
		prog = noProgress{}
	}
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	st := &stages{o: w.Manifest.Options, c: w.cohort, workers: workers, prog: prog}
	if err := st.setup(); err != nil {
		return nil, err
	}
	return st, nil
}

func (w *Work) checkShard(sh Shard) error {
	if sh.N != w.Manifest.Shards {
		return &UsageError{Err: fmt.Errorf("--shard %s: the plan in %s has %d shards; use i/%d", sh, w.Dir, w.Manifest.Shards, w.Manifest.Shards)}
	}
	return nil
}

// Sample is stage 1 for one shard: the fitting-sample windows of its series, in
// series order, to sample/shard=<i>/data.parquet (columns series_index, the
// series' position in the cohort, window, its p(p-1)/2 correlations, and
// window_index, its index in the series).
func (w *Work) Sample(ctx context.Context, sh Shard, workers int, prog Progress) (*ShardSummary, error) {
	start := time.Now()
	if err := w.checkShard(sh); err != nil {
		return nil, err
	}
	st, err := w.stages(workers, prog)
	if err != nil {
		return nil, err
	}
	unlock, err := w.startStage("sample", sh.I)
	if err != nil {
		return nil, err
	}
	defer unlock()
	lo, hi := sh.Range(len(w.cohort.Inputs))
	st.prog.Stage(fmt.Sprintf("sampling windows, shard %s", sh), hi-lo)
	pw := schema.BeginParquet(0, w.tablePath(sh.I))
	pw.Plain(sampleTable)
	D := compute.PairCount(st.p)
	sc := arrow.NewSchema([]arrow.Field{
		{Name: "series_index", Type: arrow.PrimitiveTypes.Int32},
		{Name: "window", Type: arrow.ListOf(arrow.PrimitiveTypes.Float32)},
		{Name: "window_index", Type: arrow.PrimitiveTypes.Int32},
	}, nil)
	rb := array.NewRecordBuilder(memory.DefaultAllocator, sc)
	defer rb.Release()
	idx := rb.Field(0).(*array.Int32Builder)
	lb := rb.Field(1).(*array.ListBuilder)
	wb := rb.Field(2).(*array.Int32Builder)
	vb := lb.ValueBuilder().(*array.Float32Builder)
	pending := 0
	flush := func() error {
		rec := rb.NewRecord()
		defer rec.Release()
		pending = 0
		return pw.AppendRecord(ctx, sampleTable, rec)
	}
	err = st.sampleRange(ctx, lo, hi, func(i int, rows []float32, win []int) error {
		for r := 0; r < len(rows)/D; r++ {
			idx.Append(int32(i))
			wb.Append(int32(win[r]))
			lb.Append(true)
			vb.AppendValues(rows[r*D:(r+1)*D], nil)
		}
		pending += len(rows)
		st.prog.Add(1)
		if pending > 1<<22 { // 16 MB of values
			return flush()
		}
		return nil
	})
	if err == nil {
		err = flush()
	}
	if err == nil {
		err = pw.Commit(ctx)
	}
	if err != nil {
		pw.Rollback()
		return nil, err
	}
	st.prog.Finish()
	sum := &ShardSummary{Shard: sh, Series: hi - lo, Rows: pw.Rows(), Seconds: time.Since(start).Seconds()}
	return sum, w.writeMark(stageMark{Stage: "sample", Shard: sh.I, Series: sum.Series, Rows: sum.Rows, Seconds: sum.Seconds}, pw.Files())
}

// readSample pools the fitting-sample windows of every shard in shard order, that is in
// series order, as stage 1 of Run does.
func (w *Work) readSample(ctx context.Context, st *stages) (compute.Matrix32, error) {
	D := compute.PairCount(st.p)
	marks := make([]*stageMark, w.Manifest.Shards)
	var total int64
	for i := range marks {
		mk, err := w.readMark("sample", i+1)
		if err != nil {
			return compute.Matrix32{}, err
		}
		marks[i] = mk
		total += mk.Rows[sampleTable]
	}
	if err := w.verify(marks...); err != nil {
		return compute.Matrix32{}, err
	}
	pool := st.newPool(total)
	next := 0 // series_index must not go back
	for i := 1; i <= w.Manifest.Shards; i++ {
		mk := marks[i-1]
		path := w.tablePath(i)(sampleTable)
		got := 0
		err := schema.ReadParquet(ctx, path, 0, func(rec arrow.Record) error {
			if rec.NumCols() != 3 {
				return fmt.Errorf("ingest: %s: columns %s, want series_index, window and window_index (a sample written by an older version: run stage sample --shard %d/%d again)", path, rec.Schema(), i, w.Manifest.Shards)
			}
			si, ok1 := rec.Column(0).(*array.Int32)
			l, ok2 := rec.Column(1).(*array.List)
			wi, ok3 := rec.Column(2).(*array.Int32)
			if !ok1 || !ok2 || !ok3 {
				return fmt.Errorf("ingest: %s: columns %s, want series_index INT32, window LIST<FLOAT> and window_index INT32", path, rec.Schema())
			}
			vals, ok := l.ListValues().(*array.Float32)
			if !ok {
				return fmt.Errorf("ingest: %s: window values are %s, want FLOAT", path, l.ListValues().DataType())
			}
			for r := 0; r < l.Len(); r++ {
				a, b := l.ValueOffsets(r)
				if int(b-a) != D {
					return fmt.Errorf("ingest: %s: row %d has %d values, want %d", path, got+r+1, b-a, D)
				}
				s := int(si.Value(r))
				if s < next {
					return fmt.Errorf("ingest: %s: series %d after series %d", path, s, next)
				}
				next = s
				pool.add(vals.Float32Values()[a:b], s, []int{int(wi.Value(r))})
			}
			got += l.Len()
			return nil
		})
		if err != nil {
			return compute.Matrix32{}, err
		}
		if int64(got) != mk.Rows[sampleTable] {
			return compute.Matrix32{}, fmt.Errorf("ingest: %s has %d windows, its shard wrote %d; run stage sample --shard %d/%d again", path, got, mk.Rows[sampleTable], i, w.Manifest.Shards)
		}
	}
	return st.takePool(pool), nil
}

// Fit is stage 2, once: the fitting-sample windows of every shard pooled in series
// order and capped exactly as in Run, then the elbow scan or fixed k; or,
// with from, the stored states of an earlier analysis (no sample stage is
// needed then). It writes the elbow and state_centroids tables.
func (w *Work) Fit(ctx context.Context, workers int, from *StatesFrom, prog Progress) (*FitSummary, error) {
	start := time.Now()
	st, err := w.stages(workers, prog)
	if err != nil {
		return nil, err
	}
	unlock, err := w.startStage("fit", 0)
	if err != nil {
		return nil, err
	}
	defer unlock()
	if from != nil {
		if err := st.useStates(from); err != nil {
			return nil, err
		}
	} else {
		x, err := w.readSample(ctx, st)
		if err != nil {
			return nil, err
		}
		if err := st.fit(ctx, x); err != nil {
			return nil, err
		}
	}
	pw := schema.BeginParquet(0, w.tablePath(onceShard))
	if err := st.writeStates(ctx, pw); err != nil {
		pw.Rollback()
		return nil, err
	}
	if err := closeTables(ctx, pw, schema.Elbow, schema.StateCentroids); err != nil {
		return nil, err
	}
	st.prog.Finish()
	idb := make([]byte, 8)
	rand.Read(idb)
	sum := &FitSummary{States: st.k, FitWindows: st.fitRows, Elbow: st.elbow, StatesFrom: from, Seconds: time.Since(start).Seconds()}
	return sum, w.writeMark(stageMark{Stage: "fit", FitID: hex.EncodeToString(idb), Rows: pw.Rows(), Seconds: sum.Seconds,
		States: st.k, FitWindows: st.fitRows, Elbow: st.elbow, StatesFrom: from}, pw.Files())
}

// readStates reads the centroids the fit stage wrote.
func (w *Work) readStates(ctx context.Context, st *stages, fit *stageMark) error {
	k, D := fit.States, compute.PairCount(st.p)
	st.k, st.fitRows, st.elbow = k, fit.FitWindows, fit.Elbow
	st.cent = compute.NewMatrix32(k, D)
	path := w.tablePath(onceShard)(schema.StateCentroids)
	n := 0
	err := schema.ReadParquet(ctx, path, 0, func(rec arrow.Record) error {
		state, _ := rec.Column(1).(*array.Int16)
		ci, _ := rec.Column(2).(*array.Int16)
		cj, _ := rec.Column(3).(*array.Int16)
		wt, _ := rec.Column(4).(*array.Float64)
		if state == nil || ci == nil || cj == nil || wt == nil {
			return fmt.Errorf("ingest: %s: unexpected columns %s", path, rec.Schema())
		}
		for r := 0; r < int(rec.NumRows()); r++ {
			s, i, j := int(state.Value(r)), int(ci.Value(r)), int(cj.Value(r))
			if s < 1 || s > k || i < 1 || j <= i || j > st.p {
				return fmt.Errorf("ingest: %s: entry (state %d, i %d, j %d) outside %d states x %d regions", path, s, i, j, k, st.p)
			}
			// float32 -> float64 -> float32 is exact.
			st.cent.Data[(s-1)*D+compute.PairIndex(st.p, i-1, j-1)] = float32(wt.Value(r))
			n++
		}
		return nil
	})
	if err != nil {
		return err
	}
	if n != k*D {
		return fmt.Errorf("ingest: %s has %d centroid values, want %d states x %d pairs; run stage fit again", path, n, k, D)
	}
	return nil
}

// Compute is stage 3 for one shard: every per-series table of its series,
// to tables/<table>/shard=<i>/data.parquet.
func (w *Work) Compute(ctx context.Context, sh Shard, workers int, prog Progress) (*ShardSummary, error) {
	start := time.Now()
	if err := w.checkShard(sh); err != nil {
		return nil, err
	}
	unlock, err := w.startStage("compute", sh.I)
	if err != nil {
		return nil, err
	}
	defer unlock()
	fit, err := w.readMark("fit", 0)
	if err != nil {
		return nil, err
	}
	if err := w.verify(fit); err != nil {
		return nil, err
	}
	lo, hi := sh.Range(len(w.cohort.Inputs))
	// Stage 3 draws nothing at random and treats each series alone, so the
	// shard runs it on a cohort of its own series.
	part := *w.cohort
	part.Inputs = w.cohort.Inputs[lo:hi]
	sw := &Work{Dir: w.Dir, Manifest: w.Manifest, cohort: &part}
	st, err := sw.stages(workers, prog)
	if err != nil {
		return nil, err
	}
	if err := w.readStates(ctx, st, fit); err != nil {
		return nil, err
	}
	pw := schema.BeginParquet(0, w.tablePath(sh.I))
	if _, err := st.perSubject(ctx, pw); err != nil {
		pw.Rollback()
		return nil, err
	}
	if err := closeTables(ctx, pw, seriesTables...); err != nil {
		return nil, err
	}
	st.prog.Finish()
	sum := &ShardSummary{Shard: sh, Series: hi - lo, Rows: pw.Rows(), Seconds: time.Since(start).Seconds()}
	return sum, w.writeMark(stageMark{Stage: "compute", Shard: sh.I, FitID: fit.FitID, Series: sum.Series, Rows: sum.Rows, Seconds: sum.Seconds}, pw.Files())
}

// Merge is stage 4, once: every table of the work folder into db as one
// analysis called name, in one transaction (nothing is written on error),
// in a fixed order: the tables written once, then each per-series table
// shard by shard. Every shard must have finished with the same fit.
func (w *Work) Merge(ctx context.Context, db *sql.DB, name string, prog Progress) (*Summary, error) {
	start := time.Now()
	fit, err := w.readMark("fit", 0)
	if err != nil {
		return nil, err
	}
	marks := make([]*stageMark, w.Manifest.Shards)
	for i := range marks {
		if marks[i], err = w.readMark("compute", i+1); err != nil {
			return nil, err
		}
		if marks[i].FitID != fit.FitID {
			return nil, fmt.Errorf("ingest: shard %d/%d was computed with another fit than the last one in %s; run stage compute --shard %d/%d again",
				i+1, w.Manifest.Shards, w.Dir, i+1, w.Manifest.Shards)
		}
	}
	plan, err := w.readMark("plan", 0)
	if err != nil {
		return nil, err
	}
	// Every file is checked against its stage's mark before anything is
	// written: a shard's file copied over another's, or any file changed,
	// is refused with the stage to run again.
	if err := w.verify(append([]*stageMark{plan, fit}, marks...)...); err != nil {
		return nil, err
	}
	st, err := w.stages(1, prog)
	if err != nil {
		return nil, err
	}
	st.k, st.fitRows, st.elbow = fit.States, fit.FitWindows, fit.Elbow
	st.o.StatesFrom = fit.StatesFrom
	if prog == nil {
		prog = noProgress{}
	}
	prog.Stage("merging shards", w.Manifest.Shards)

	if err := limitDB(ctx, db, DefaultDBMemory, ""); err != nil {
		return nil, err
	}
	sw, err := schema.Begin(ctx, db, name, "")
	if err != nil {
		return nil, err
	}
	ok := false
	defer func() {
		if !ok {
			sw.Rollback()
		}
	}()
	occ := make([]float64, st.k)
	appendFile := func(table string, shard int, want int64) error {
		path := w.tablePath(shard)(table)
		var got int64
		err := schema.ReadParquet(ctx, path, 1<<18, func(rec arrow.Record) error {
			if table == schema.Subjects && got == 0 {
				if err := ensureColumns(ctx, sw, rec.Schema()); err != nil {
					return err
				}
			}
			if table == schema.StateMetrics {
				addOccupancy(occ, rec)
			}
			r, err := schema.WithAnalysisID(rec, sw.ID)
			if err != nil {
				return fmt.Errorf("ingest: %s: %w", path, err)
			}
			defer r.Release()
			got += r.NumRows()
			return sw.AppendRecord(ctx, table, r)
		})
		if err != nil {
			return err
		}
		if got != want {
			return fmt.Errorf("ingest: %s has %d rows, its stage wrote %d; run that stage again", path, got, want)
		}
		return nil
	}
	for _, t := range []string{schema.Regions, schema.ExcludedInputs, schema.Subjects} {
		if err := appendFile(t, onceShard, w.Manifest.Counts[t]); err != nil {
			return nil, err
		}
	}
	// The covariates' descriptions (participants.json), written by plan
	// beside the subjects; a plan without covariates has no file of them.
	if n := w.Manifest.Counts[schema.Covariates]; n > 0 {
		if err := appendFile(schema.Covariates, onceShard, n); err != nil {
			return nil, err
		}
	}
	for _, t := range []string{schema.Elbow, schema.StateCentroids} {
		if err := appendFile(t, onceShard, fit.Rows[t]); err != nil {
			return nil, err
		}
	}
	for i, mk := range marks {
		for _, t := range seriesTables {
			if err := appendFile(t, i+1, mk.Rows[t]); err != nil {
				return nil, err
			}
		}
		prog.Add(1)
	}
	surr, err := w.mergeSurrogates(ctx, sw, fit)
	if err != nil {
		return nil, err
	}
	if err := st.recordAnalysis(ctx, sw); err != nil {
		return nil, err
	}
	if err := sw.Commit(ctx); err != nil {
		return nil, err
	}
	ok = true
	prog.Finish()
	c := w.cohort
	n := float64(len(c.Inputs))
	for k := range occ {
		occ[k] /= n
	}
	sum := &Summary{AnalysisID: sw.ID, Name: sw.Name, Subjects: len(c.Inputs), Excluded: len(c.Excluded),
		Regions: len(c.Keep), States: st.k, Windows: st.totalWindows, FitWindows: st.fitRows, Elbow: st.elbow,
		StatesFrom: fit.StatesFrom, Warnings: c.Warnings, Occupancies: occ,
		Surrogates: surr,
		PhaseTimes: []PhaseTime{{"merge", time.Since(start).Seconds()}}}
	for _, j := range c.Dropped {
		sum.Dropped = append(sum.Dropped, c.Regions[j])
	}
	return sum, nil
}

// ensureColumns adds the covariate columns of a subjects file to the
// warehouse's subjects table.
func ensureColumns(ctx context.Context, w *schema.Writer, sc *arrow.Schema) error {
	var cols []schema.Column
	for _, f := range sc.Fields()[2:] {
		t, err := schema.ColumnType(f.Type)
		if err != nil {
			return fmt.Errorf("ingest: subjects column %q: %w", f.Name, err)
		}
		cols = append(cols, schema.Column{Name: f.Name, Type: t})
	}
	return w.EnsureSubjectColumns(ctx, cols)
}

// addOccupancy adds the occupancy column of state_metrics rows to occ by
// state.
func addOccupancy(occ []float64, rec arrow.Record) {
	state, _ := rec.Column(3).(*array.Int16)
	v, _ := rec.Column(4).(*array.Float64)
	if state == nil || v == nil {
		return
	}
	for r := 0; r < int(rec.NumRows()); r++ {
		if s := int(state.Value(r)); s >= 1 && s <= len(occ) {
			occ[s-1] += v.Value(r)
		}
	}
}
