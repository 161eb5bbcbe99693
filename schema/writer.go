package schema

import (
	"context"
	"database/sql"
	"database/sql/driver"
	"errors"
	"fmt"
	"maps"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"sync"
	"time"
	"unicode"
	"unicode/utf8"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/compress"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
	"github.com/marcboeker/go-duckdb"
)

// Writer writes one analysis inside a single DuckDB transaction: either the
// whole analysis is committed or the file is left as it was. A writer made
// by BeginParquet writes Parquet files only.
type Writer struct {
	ID   int    // analysis_id of the analysis being written
	Name string // its name

	conn       *sql.Conn // nil: Parquet only
	done       bool
	parquetDir string
	path       func(table string) string // Parquet file of a table
	pq         map[string]*parquetFile
	rows       map[string]int64
	plain      map[string]bool // tables written without dictionary or compression
	views      int
	written    []string // Parquet files renamed into place by Commit
}

// Files returns the Parquet files a committed writer put in place, in
// table order.
func (w *Writer) Files() []string { return slices.Clone(w.written) }

type parquetFile struct {
	f       *os.File
	w       *pqarrow.FileWriter
	path    string // final name
	tmp     string // the file as written, a new name beside path, renamed to path by Commit
	renamed bool
}

// ErrAnalysisExists is returned when the name is already taken.
var ErrAnalysisExists = errors.New("an analysis with this name already exists")

// CheckAnalysisName reports why name cannot name a new analysis, or nil.
// Commands take an analysis as an id, a name or the keyword latest
// (queries.FindAnalysis), so a name that reads as an id or a keyword
// would be found differently by different commands; surrounding spaces are
// trimmed when a name is looked up, and control characters would print as
// terminal commands. An empty name means the default, analysis-<id>.
func CheckAnalysisName(name string) error {
	bad := func(why string) error {
		return fmt.Errorf("analysis name %q %s; choose another --analysis name", name, why)
	}
	t := strings.TrimSpace(name)
	switch {
	case name == "":
		return nil
	case t == "":
		return bad("is blank")
	case t != name:
		return bad("has leading or trailing spaces")
	case !utf8.ValidString(name):
		return bad("is not UTF-8 text")
	case strings.IndexFunc(name, unicode.IsControl) >= 0:
		return bad("holds a control character")
	case strings.EqualFold(name, "latest"):
		return bad("is reserved: latest names the newest analysis")
	}
	if _, err := strconv.ParseInt(name, 10, 64); err == nil {
		return bad("reads as an analysis id; a name needs a character that is not a digit")
	}
	return nil
}

// Begin opens a transaction for a new analysis called name. The layout is
// created or checked first. An empty name gets "analysis-<id>". When
// parquetDir is not empty every appended batch is also written to
// parquetDir/<table>.parquet.
func Begin(ctx context.Context, db *sql.DB, name, parquetDir string) (*Writer, error) {
	if err := CheckAnalysisName(name); err != nil {
		return nil, fmt.Errorf("schema: %w", err)
	}
	conn, err := db.Conn(ctx)
	if err != nil {
		return nil, fmt.Errorf("schema: %w", classify(err))
	}
	w := &Writer{conn: conn, Name: name, parquetDir: parquetDir, pq: map[string]*parquetFile{}, rows: map[string]int64{}}
	w.path = func(table string) string { return filepath.Join(parquetDir, table+".parquet") }
	if err := w.begin(ctx); err != nil {
		w.Rollback()
		return nil, err
	}
	return w, nil
}

// BeginExisting opens a transaction that adds rows to the stored analysis
// id (for example its surrogate_tests rows): the layout is created or
// upgraded first, and the analysis must exist. Nothing else of the file is
// touched unless the caller writes it; Rollback leaves the file as it was.
func BeginExisting(ctx context.Context, db *sql.DB, id int) (*Writer, error) {
	conn, err := db.Conn(ctx)
	if err != nil {
		return nil, fmt.Errorf("schema: %w", classify(err))
	}
	w := &Writer{conn: conn, ID: id, pq: map[string]*parquetFile{}, rows: map[string]int64{}}
	if _, err := conn.ExecContext(ctx, "BEGIN TRANSACTION"); err != nil {
		w.Rollback()
		return nil, fmt.Errorf("schema: begin: %w", classify(err))
	}
	if err := Migrate(ctx, conn); err != nil {
		w.Rollback()
		return nil, err
	}
	if err := conn.QueryRowContext(ctx, `SELECT name FROM analyses WHERE analysis_id = ?`, id).Scan(&w.Name); err != nil {
		w.Rollback()
		if errors.Is(err, sql.ErrNoRows) {
			return nil, fmt.Errorf("schema: no analysis with id %d", id)
		}
		return nil, fmt.Errorf("schema: %w", err)
	}
	return w, nil
}

// BeginParquet starts a writer that writes no database, only one Parquet
// file per table at path(table) (folders are created as needed), for the
// stages of a sharded run. Rows carry analysis_id id. Files are written
// under a temporary name and renamed into place by Commit; Rollback removes
// them. Exec is refused and EnsureSubjectColumns does nothing.
func BeginParquet(id int, path func(table string) string) *Writer {
	return &Writer{ID: id, path: path, pq: map[string]*parquetFile{}, rows: map[string]int64{}}
}

// Plain makes the Parquet files of tables plain: no dictionary encoding and
// no compression, for columns of measured floats that neither would shrink
// (a sharded run's fitting sample), where both only cost time.
func (w *Writer) Plain(tables ...string) {
	if w.plain == nil {
		w.plain = map[string]bool{}
	}
	for _, t := range tables {
		w.plain[t] = true
	}
}

// Rows returns the number of rows appended to each table so far.
func (w *Writer) Rows() map[string]int64 { return maps.Clone(w.rows) }

func (w *Writer) begin(ctx context.Context) error {
	if _, err := w.conn.ExecContext(ctx, "BEGIN TRANSACTION"); err != nil {
		return fmt.Errorf("schema: begin: %w", classify(err))
	}
	if err := Migrate(ctx, w.conn); err != nil {
		return err
	}
	// Identifiers are never reused, not even those of dropped analyses, so
	// an exported table cannot be mistaken for a later analysis's.
	if err := w.conn.QueryRowContext(ctx, `SELECT greatest(
			(SELECT coalesce(max(analysis_id), 0) FROM analyses),
			(SELECT coalesce(max(analysis_id), 0) FROM dropped_analyses)) + 1`).Scan(&w.ID); err != nil {
		return fmt.Errorf("schema: next analysis id: %w", err)
	}
	if w.Name == "" {
		w.Name = fmt.Sprintf("analysis-%d", w.ID)
	}
	var n int
	if err := w.conn.QueryRowContext(ctx, `SELECT count(*) FROM analyses WHERE name = ?`, w.Name).Scan(&n); err != nil {
		return fmt.Errorf("schema: %w", err)
	}
	if n > 0 {
		return fmt.Errorf("schema: %q: %w; choose another --analysis name or remove the old one with 'topostate drop'", w.Name, ErrAnalysisExists)
	}
	if w.parquetDir != "" {
		if err := os.MkdirAll(w.parquetDir, 0o755); err != nil {
			return fmt.Errorf("schema: parquet folder: %w", err)
		}
	}
	return nil
}

// Column is a covariate column of the subjects table.
type Column struct {
	Name string
	Type string // DuckDB type: DOUBLE, BIGINT or VARCHAR
}

// EnsureSubjectColumns adds the covariate columns of this cohort to the
// subjects table. A column that exists with another type is an error, as
// mixing types would change earlier analyses' values.
func (w *Writer) EnsureSubjectColumns(ctx context.Context, cols []Column) error {
	if w.conn == nil {
		return nil
	}
	rows, err := w.conn.QueryContext(ctx,
		`SELECT column_name, data_type FROM information_schema.columns WHERE table_name = 'subjects'`)
	if err != nil {
		return fmt.Errorf("schema: %w", err)
	}
	have := map[string]string{}
	for rows.Next() {
		var n, t string
		if err := rows.Scan(&n, &t); err != nil {
			rows.Close()
			return fmt.Errorf("schema: %w", err)
		}
		have[strings.ToLower(n)] = t
	}
	rows.Close()
	for _, c := range cols {
		t, ok := have[strings.ToLower(c.Name)]
		if ok {
			if !strings.EqualFold(t, c.Type) {
				return fmt.Errorf("schema: participants column %q is %s in this cohort but %s in the warehouse; rename the column or use another database file", c.Name, c.Type, t)
			}
			continue
		}
		if _, err := w.conn.ExecContext(ctx, fmt.Sprintf("ALTER TABLE subjects ADD COLUMN %s %s", Quote(c.Name), c.Type)); err != nil {
			return fmt.Errorf("schema: add subjects column %q: %w", c.Name, err)
		}
	}
	return nil
}

// Exec runs a statement inside the analysis's transaction.
func (w *Writer) Exec(ctx context.Context, query string, args ...any) error {
	if w.conn == nil {
		return errors.New("schema: Exec on a Parquet-only writer")
	}
	_, err := w.conn.ExecContext(ctx, query, args...)
	return err
}

// QueryRow runs a one-row query inside the transaction and scans it into dest.
func (w *Writer) QueryRow(ctx context.Context, query string, args []any, dest ...any) error {
	if w.conn == nil {
		return errors.New("schema: QueryRow on a Parquet-only writer")
	}
	if err := w.conn.QueryRowContext(ctx, query, args...).Scan(dest...); err != nil {
		return fmt.Errorf("schema: %w", err)
	}
	return nil
}

// Append inserts a batch's rows into its table (by column name) and, when
// Parquet output is on, writes them there too. The batch is reset.
func (w *Writer) Append(ctx context.Context, b *Batch) error {
	if b.Len() == 0 {
		return nil
	}
	rec := b.Record()
	defer rec.Release()
	return w.AppendRecord(ctx, b.Table, rec)
}

// dictionaryStrings are the tables whose inserts run with DuckDB's
// force_compression set to dictionary. A large insert inside a transaction
// compresses each full row group as it goes (DuckDB's optimistic write),
// and for a VARCHAR column DuckDB first analyses every candidate method; on
// filtration_events, whose subject_id and session_id repeat over some
// 20,000 rows, the FSST analysis (building a symbol table per row group
// and column) took about a quarter of the insert's CPU time, only for
// DuckDB to choose dictionary compression for both columns anyway (perf on
// BenchmarkAppendEvents; pragma_storage_info). The setting changes how
// string columns are stored, never what they hold; columns of other types
// have no dictionary method and are compressed as usual, and a string that
// dictionary compression cannot take is stored uncompressed
// (TestDictionaryStringsSameRows). The setting belongs to the database
// instance and is reset after the insert.
var dictionaryStrings = map[string]bool{FiltrationEvts: true}

// AppendRecord inserts an Arrow record into table. On a Parquet-only
// writer a record without rows still creates the table's file, so that
// every table a stage owns is present.
func (w *Writer) AppendRecord(ctx context.Context, table string, rec arrow.Record) error {
	if w.done {
		return errors.New("schema: writer already finished")
	}
	w.rows[table] += rec.NumRows()
	if w.conn == nil {
		return w.writeParquet(table, rec)
	}
	w.views++
	view := fmt.Sprintf("topostate_batch_%d", w.views)
	err := w.conn.Raw(func(dc any) error {
		ar, err := duckdb.NewArrowFromConn(dc.(driver.Conn))
		if err != nil {
			return err
		}
		rdr := newOnceReader(rec)
		defer rdr.drop()
		release, err := ar.RegisterView(rdr, view)
		if err != nil {
			return err
		}
		defer release()
		ex := dc.(driver.ExecerContext)
		if dictionaryStrings[table] {
			if _, err := ex.ExecContext(ctx, "SET force_compression = 'dictionary'", nil); err != nil {
				return err
			}
			defer ex.ExecContext(context.Background(), "RESET force_compression", nil)
		}
		if _, err := ex.ExecContext(ctx, fmt.Sprintf("INSERT INTO %s BY NAME SELECT * FROM %s", Quote(table), view), nil); err != nil {
			return err
		}
		_, err = ex.ExecContext(ctx, "DROP VIEW "+view, nil)
		return err
	})
	if err != nil {
		return fmt.Errorf("schema: insert into %s: %w", table, err)
	}
	if w.parquetDir != "" {
		return w.writeParquet(table, rec)
	}
	return nil
}

func (w *Writer) writeParquet(table string, rec arrow.Record) error {
	pf, ok := w.pq[table]
	if !ok {
		path := w.path(table)
		if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
			return fmt.Errorf("schema: parquet: %w", err)
		}
		// A name of its own (exclusive creation), so that two runs writing
		// the same table never write into one file, and an earlier file
		// at path stays as it was until Commit succeeds.
		f, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".*.partial")
		if err != nil {
			return fmt.Errorf("schema: parquet: %w", err)
		}
		if err := f.Chmod(0o644); err != nil {
			f.Close()
			os.Remove(f.Name())
			return fmt.Errorf("schema: parquet: %w", err)
		}
		props := parquet.NewWriterProperties(parquet.WithCompression(compress.Codecs.Zstd))
		if w.plain[table] {
			props = parquet.NewWriterProperties(parquet.WithCompression(compress.Codecs.Uncompressed), parquet.WithDictionaryDefault(false))
		}
		fw, err := pqarrow.NewFileWriter(rec.Schema(), f, props, pqarrow.DefaultWriterProps())
		if err != nil {
			f.Close()
			os.Remove(f.Name())
			return fmt.Errorf("schema: parquet %s: %w", table, err)
		}
		pf = &parquetFile{f: f, w: fw, path: path, tmp: f.Name()}
		w.pq[table] = pf
	}
	if err := pf.w.Write(rec); err != nil {
		return fmt.Errorf("schema: parquet %s: %w", table, err)
	}
	return nil
}

// Commit makes the analysis visible. The analyses row must have been
// inserted with Exec beforehand.
func (w *Writer) Commit(ctx context.Context) error {
	if w.done {
		return errors.New("schema: writer already finished")
	}
	pauseBeforeCommit(ctx)
	if err := ctx.Err(); err != nil {
		w.Rollback()
		return fmt.Errorf("schema: commit: %w", err)
	}
	var errs []error
	for _, t := range slices.Sorted(maps.Keys(w.pq)) {
		pf := w.pq[t]
		if err := pf.w.Close(); err != nil {
			errs = append(errs, fmt.Errorf("schema: parquet %s: %w", t, err))
		}
	}
	if err := errors.Join(errs...); err != nil {
		w.Rollback() // removes the temporaries; earlier files are untouched
		return err
	}
	if w.conn == nil { // Parquet only: the renames are the commit
		if err := w.renameParquet(); err != nil {
			w.Rollback()
			return err
		}
		w.pq = map[string]*parquetFile{}
		w.done = true
		return nil
	}
	// Once COMMIT starts it runs to the end even if ctx ends meanwhile:
	// DuckDB may finish a COMMIT whose context was cancelled and still
	// return the cancellation, and the caller would then report "nothing
	// written" about an analysis that is in the file.
	_, err := w.conn.ExecContext(context.Background(), "COMMIT")
	if err != nil {
		w.Rollback() // the connection goes back to the pool: no transaction left open on it
		return fmt.Errorf("schema: commit: %w", err)
	}
	w.done = true
	// Success means the analysis is in the file the user named, not only in
	// its .wal: a full disk at the checkpoint is reported (ErrNotDurable).
	err = Checkpoint(ctx, w.conn, fmt.Sprintf("analysis %q (id %d)", w.Name, w.ID))
	w.conn.Close()
	// The Parquet copies replace earlier files only now, when the analysis
	// is in the warehouse file: a run that fails at any point before leaves
	// the files of an earlier run in the folder as they were.
	if err != nil {
		if len(w.pq) > 0 {
			err = fmt.Errorf("%w; the Parquet files were not written (%s is as it was): once the analysis is complete, 'topostate export --analysis %s' writes them", err, w.parquetDir, w.Name)
		}
		w.removeParquet()
		return err
	}
	if err := w.renameParquet(); err != nil {
		w.removeParquet()
		return fmt.Errorf("%w (the analysis is in the warehouse; 'topostate export --analysis %s' writes its tables)", err, w.Name)
	}
	w.pq = map[string]*parquetFile{}
	return nil
}

// renameParquet moves every closed Parquet temporary to its final name.
func (w *Writer) renameParquet() error {
	for _, t := range slices.Sorted(maps.Keys(w.pq)) {
		pf := w.pq[t]
		if err := os.Rename(pf.tmp, pf.path); err != nil {
			return fmt.Errorf("schema: parquet %s: %w", t, err)
		}
		pf.renamed = true
		w.written = append(w.written, pf.path)
	}
	return nil
}

// removeParquet removes the temporaries not renamed yet.
func (w *Writer) removeParquet() {
	for _, pf := range w.pq {
		pf.w.Close()
		if !pf.renamed {
			os.Remove(pf.tmp)
		}
	}
	w.pq = map[string]*parquetFile{}
}

// pauseEnv is a test hook, not a user setting (undocumented on purpose):
// when it holds a Go duration, Commit prints pauseMarker on standard error
// and waits that long, or until ctx ends, with the whole analysis written
// into the open transaction but not committed. cmd/topostate's crash and
// lock tests use it to kill the real binary, or to hold the file's lock, at
// exactly that point.
const (
	pauseEnv    = "TOPOSTATE_TEST_PAUSE_BEFORE_COMMIT"
	pauseMarker = "topostate-test: paused before commit"
)

func pauseBeforeCommit(ctx context.Context) {
	d, err := time.ParseDuration(os.Getenv(pauseEnv))
	if err != nil || d <= 0 {
		return
	}
	fmt.Fprintln(os.Stderr, pauseMarker)
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-ctx.Done():
	case <-t.C:
	}
}

// Rollback abandons the analysis; the file keeps its earlier contents and
// the Parquet temporaries of this analysis are removed (files of an
// earlier run at the final names are never touched). Safe to call twice.
func (w *Writer) Rollback() {
	for _, pf := range w.pq {
		pf.w.Close()
		if !pf.renamed {
			os.Remove(pf.tmp)
		}
	}
	w.pq = map[string]*parquetFile{}
	if w.done {
		return
	}
	w.done = true
	if w.conn == nil {
		return
	}
	w.conn.ExecContext(context.Background(), "ROLLBACK")
	w.conn.Close()
}

// Printable returns s with every control character (and any byte that is
// not UTF-8) written as a Go escape (\n, \x1b, \u0085), so a name stored by
// another client or an older version prints as text, never as a terminal
// command or a line break.
func Printable(s string) string {
	if utf8.ValidString(s) && strings.IndexFunc(s, unicode.IsControl) < 0 {
		return s
	}
	var b strings.Builder
	for i := 0; i < len(s); {
		r, size := utf8.DecodeRuneInString(s[i:])
		switch {
		case r == utf8.RuneError && size <= 1:
			fmt.Fprintf(&b, `\x%02x`, s[i])
		case unicode.IsControl(r):
			q := strconv.QuoteRune(r)
			b.WriteString(q[1 : len(q)-1])
		default:
			b.WriteRune(r)
		}
		i += size
	}
	return b.String()
}

// onceReader hands one record to DuckDB's Arrow scan. go-duckdb exports
// the reader through the Arrow C stream interface, and the stream is never
// released (RegisterView's release frees only the C struct), so the
// exported reader, and with array.NewRecordReader its last record, would
// stay reachable until the process ends: every row ever inserted, about
// 2.7 GB of Arrow buffers for the filtration events of a 1,000-series,
// 200-region cohort. drop, called once the INSERT has read the view, lets
// go of the record whatever the stream's fate (TestAppendReleasesRecords).
type onceReader struct {
	schema   *arrow.Schema
	mu       sync.Mutex
	rec, cur arrow.Record
}

func newOnceReader(rec arrow.Record) *onceReader {
	rec.Retain()
	return &onceReader{schema: rec.Schema(), rec: rec}
}

func (r *onceReader) Retain()               {}
func (r *onceReader) Release()              {}
func (r *onceReader) Schema() *arrow.Schema { return r.schema }
func (r *onceReader) Err() error            { return nil }
func (r *onceReader) Record() arrow.Record  { r.mu.Lock(); defer r.mu.Unlock(); return r.cur }

func (r *onceReader) Next() bool {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.cur != nil {
		r.cur.Release()
		r.cur = nil
	}
	if r.rec == nil {
		return false
	}
	r.cur, r.rec = r.rec, nil
	return true
}

// drop releases the record, read or not.
func (r *onceReader) drop() {
	r.mu.Lock()
	defer r.mu.Unlock()
	for _, x := range []*arrow.Record{&r.rec, &r.cur} {
		if *x != nil {
			(*x).Release()
			*x = nil
		}
	}
}
