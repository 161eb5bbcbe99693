package queries

import (
	"context"
	"database/sql"
	"database/sql/driver"
	"encoding/csv"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"slices"
	"strings"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/marcboeker/go-duckdb"

	"github.com/topostate/topostate/schema"
)

// units gives the unit of every warehouse column, by "table.column" or, for
// a name with one meaning everywhere, by column name. TestUnitsCoverDictionary
// keeps it complete.
var units = map[string]string{
	"analysis_id": "id", "subject_id": "label", "session_id": "label",
	"schema_version.version": "integer", "schema_version.applied_at": "timestamp (UTC)",
	"analyses.name": "text", "analyses.created_at": "timestamp (UTC)", "analyses.tool_version": "text",
	"analyses.parameters": "JSON text", "analyses.input_dir": "path", "analyses.n_subjects": "count (series)",
	"analyses.n_regions": "count (regions)", "analyses.n_states": "count (states)",
	"analyses.n_windows": "count (windows)", "analyses.fit_windows": "count (windows)",
	"dropped_analyses.name": "text", "dropped_analyses.dropped_at": "timestamp (UTC)", "dropped_analyses.rows_removed": "count (rows)",
	"inputs.path": "path", "inputs.sha256": "hex digest", "inputs.timepoints": "count (time points)",
	"inputs.regions": "count (regions)", "inputs.tr_seconds": "seconds", "inputs.tr_source": "text",
	"excluded_inputs.path": "path", "excluded_inputs.reason": "text",
	"regions.region_index": "index (from 1)", "regions.column_index": "index (from 1)",
	"regions.region_name": "text", "regions.dropped": "true/false",
	"elbow.k": "count (states)", "elbow.wcss": "sum of k-means distances (squared correlation units for euclidean)",
	"elbow.chosen": "true/false", "elbow.chord_pick": "true/false", "elbow.second_diff_pick": "true/false",
	"elbow.gap_log_wcss": "log of elbow.wcss units", "elbow.gap_ref_log_wcss": "log of elbow.wcss units",
	"elbow.gap": "difference of logs (unitless)", "elbow.gap_se": "difference of logs (unitless)", "elbow.gap_pick": "true/false",
	"elbow.strength": "share of pairs (unitless)", "elbow.strength_se": "share of pairs (unitless)", "elbow.strength_pick": "true/false",
	"state": "state number (from 1)", "state_centroids.i": "region_index", "state_centroids.j": "region_index",
	"state_centroids.weight":      "correlation r (Fisher z when fisher_z was on)",
	"state_sequence.window_index": "window number (from 1)", "state_sequence.window_start": "time point (from 0)",
	"state_sequence.center_seconds": "seconds", "state_sequence.distance": "k-means distance (as elbow.wcss, one window)",
	"state_metrics.occupancy": "proportion (0-1)", "state_metrics.n_dwells": "count (dwells)",
	"state_metrics.mean_dwell_windows": "windows", "state_metrics.mean_dwell_seconds": "seconds",
	"subject_dynamics.n_windows": "count (windows)", "subject_dynamics.n_transitions": "count (switches)",
	"subject_dynamics.switch_rate": "switches per window step (0-1)", "subject_dynamics.states_visited": "count (states)",
	"transitions.from_state": "state number (from 1)", "transitions.to_state": "state number (from 1)",
	"transitions.count": "count (window pairs)", "transitions.probability": "probability (0-1)",
	"dimension": "0 or 1 (Betti dimension)", "betti_curves.threshold": "correlation r",
	"betti_curves.betti": "count (components or cycles)", "filtration_events.value": "correlation r",
	"state_networks.n_windows": "count (windows)", "state_networks.mean_weight": "correlation r",
	"state_networks.tree_weight":     "sum of correlations r",
	"state_networks.core_timepoints": "count (time points)",
	"core_betti_curves.threshold":    "correlation r", "core_betti_curves.betti": "count (components or cycles)",
}

// Unit returns the unit of a warehouse column ("" when unknown).
func Unit(table, column string) string {
	if u, ok := units[table+"."+column]; ok {
		return u
	}
	return units[column]
}

// ExportOptions says what Export writes.
type ExportOptions struct {
	Dir    string   // folder for the files; created when missing
	Format Format   // FormatParquet or FormatCSV; "" means Parquet
	Tables []string // tables to write; nil means every table
	// Analysis restricts the rows to one analysis (id, name or "latest");
	// "" writes every analysis.
	Analysis string
	// SliceRows bounds the rows read from DuckDB at once (a large table is
	// read in slices of subjects); 0 means 1,000,000.
	SliceRows int
	// Protect lists files no exported file may overwrite (the warehouse
	// and its .wal), by any name: see schema.Clobbers.
	Protect []string
}

// ExportedFile is one file Export wrote.
type ExportedFile struct {
	Table string // table name, or "data_dictionary"
	Path  string
	Rows  int64
}

// DictionaryFile is the base name of the data dictionary Export writes.
const DictionaryFile = "data_dictionary"

// Export writes warehouse tables as one file each (DIR/<table>.parquet or
// .csv) plus a data dictionary (DIR/data_dictionary.<ext>, one row per
// column of the exported tables: table, column, type, nullable, meaning,
// unit; the subjects table's covariates included) and the same columns as
// a codebook for R, Stata and SPSS (DIR/codebook.csv, see CodebookHeader:
// portable type, allowed values, value labels, missing-value code). Each
// table file is written under a temporary name and renamed when complete. conn must be a
// connection to the warehouse (read-only is enough).
func Export(ctx context.Context, conn *sql.Conn, o ExportOptions) ([]ExportedFile, error) {
	if o.Format == "" {
		o.Format = FormatParquet
	}
	if o.Format != FormatParquet && o.Format != FormatCSV {
		return nil, &ParamError{Param: "format", Err: fmt.Errorf("export writes parquet or csv, not %q", o.Format)}
	}
	if o.SliceRows <= 0 {
		o.SliceRows = 1_000_000
	}
	dict := schema.Dictionary()
	var all []string
	for _, t := range dict {
		all = append(all, t.Name)
	}
	tables := o.Tables
	if len(tables) == 0 {
		tables = all
	}
	for _, t := range tables {
		if !slices.Contains(all, t) {
			return nil, &ParamError{Param: "tables", Err: fmt.Errorf("no table %q (tables: %s)", t, strings.Join(all, ", "))}
		}
	}
	var analysis *int64
	if o.Analysis != "" {
		id, err := ResolveAnalysis(ctx, conn, o.Analysis)
		if err != nil {
			return nil, &ParamError{Param: "analysis", Err: err}
		}
		analysis = &id
	}
	finals := []string{filepath.Join(o.Dir, DictionaryFile+"."+string(o.Format)), filepath.Join(o.Dir, CodebookFile)}
	for _, t := range tables {
		finals = append(finals, filepath.Join(o.Dir, t+"."+string(o.Format)))
	}
	for _, f := range finals {
		for _, p := range o.Protect {
			if schema.Clobbers(f, p) {
				return nil, &ParamError{Param: "out", Err: fmt.Errorf("%s is the warehouse %s (or its .wal file) by another name; export never writes over it: choose another folder", f, p)}
			}
		}
	}
	if err := os.MkdirAll(o.Dir, 0o755); err != nil {
		return nil, fmt.Errorf("queries: export: %w", err)
	}
	// Every file is written as a temporary in o.Dir first; only when all
	// are whole are they renamed into place (the renames do not look at
	// ctx). A failed or interrupted export leaves the folder's earlier
	// files as they were and removes its temporaries.
	st := &staging{}
	defer st.discard()
	var out []ExportedFile
	var docs []schema.ColumnDoc
	for _, td := range dict {
		if !slices.Contains(tables, td.Name) {
			continue
		}
		f, err := exportTable(ctx, conn, td, analysis, o, st)
		if err != nil {
			return nil, err
		}
		out = append(out, f)
		cols, err := tableColumns(ctx, conn, td)
		if err != nil {
			return nil, err
		}
		docs = append(docs, cols...)
	}
	f, err := writeDictionary(docs, o, st)
	if err != nil {
		return nil, err
	}
	out = append(out, f)
	if f, err = writeCodebook(ctx, conn, docs, analysis, o.Dir, st); err != nil {
		return nil, err
	}
	out = append(out, f)
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	if err := st.commit(); err != nil {
		return nil, err
	}
	return out, nil
}

// staging holds finished temporaries until every file of an export is
// written.
type staging struct{ tmps, finals []string }

func (s *staging) add(tmp, final string) {
	s.tmps, s.finals = append(s.tmps, tmp), append(s.finals, final)
}

// discard removes the temporaries not yet renamed.
func (s *staging) discard() {
	for _, t := range s.tmps {
		os.Remove(t)
	}
	s.tmps, s.finals = nil, nil
}

// commit renames every temporary into place. A rename that fails (rare:
// the folder changed meanwhile) is reported with the files already
// replaced, so the message says exactly what the folder holds.
func (s *staging) commit() error {
	for i, t := range s.tmps {
		if err := os.Rename(t, s.finals[i]); err != nil {
			done := s.finals[:i]
			s.tmps = s.tmps[i:]
			s.finals = s.finals[i:]
			return fmt.Errorf("queries: export: %w; files already replaced: %v; the rest keep their earlier contents", err, done)
		}
	}
	s.tmps, s.finals = nil, nil
	return nil
}

// tableColumns returns the dictionary rows of a table, adding the subjects
// table's covariate columns as the file has them.
func tableColumns(ctx context.Context, conn *sql.Conn, td schema.TableDoc) ([]schema.ColumnDoc, error) {
	cols := slices.Clone(td.Columns)
	if td.Name != schema.Subjects {
		return cols, nil
	}
	rows, err := conn.QueryContext(ctx, `SELECT column_name, data_type FROM information_schema.columns
		WHERE table_name = 'subjects' AND column_name NOT IN ('analysis_id', 'subject_id') ORDER BY ordinal_position`)
	if err != nil {
		return nil, fmt.Errorf("queries: export: %w", err)
	}
	defer rows.Close()
	for rows.Next() {
		var n, t string
		if err := rows.Scan(&n, &t); err != nil {
			return nil, fmt.Errorf("queries: export: %w", err)
		}
		cols = append(cols, schema.ColumnDoc{Table: td.Name, Column: n, Type: t, Nullable: true,
			Description: "covariate from participants.tsv (n/a and empty cells are NULL)"})
	}
	return cols, rows.Err()
}

// slice is one bounded read of a table: a WHERE clause and its arguments.
type slice struct {
	where string
	args  []any
}

// slices plans the reads of a table: per analysis, and for tables with a
// subject_id column and more than o.SliceRows rows, per range of subjects.
// Only fixed clauses are built here; every value is an argument.
func planSlices(ctx context.Context, conn *sql.Conn, td schema.TableDoc, analysis *int64, limit int) ([]slice, error) {
	has := func(c string) bool {
		return slices.ContainsFunc(td.Columns, func(d schema.ColumnDoc) bool { return d.Column == c })
	}
	if !has("analysis_id") {
		return []slice{{}}, nil
	}
	table := schema.Quote(td.Name)
	var ids []int64
	if analysis != nil {
		ids = []int64{*analysis}
	} else {
		rows, err := conn.QueryContext(ctx, `SELECT DISTINCT analysis_id FROM `+table+` ORDER BY 1`)
		if err != nil {
			return nil, err
		}
		for rows.Next() {
			var id int64
			rows.Scan(&id)
			ids = append(ids, id)
		}
		rows.Close()
		if len(ids) == 0 {
			return []slice{{}}, nil // an empty table: write its columns
		}
	}
	var out []slice
	for _, id := range ids {
		whole := slice{"analysis_id = ?", []any{id}}
		if !has("subject_id") {
			out = append(out, whole)
			continue
		}
		var n int64
		if err := conn.QueryRowContext(ctx, `SELECT count(*) FROM `+table+` WHERE analysis_id = ?`, id).Scan(&n); err != nil {
			return nil, err
		}
		if n <= int64(limit) {
			out = append(out, whole)
			continue
		}
		rows, err := conn.QueryContext(ctx, `SELECT DISTINCT subject_id FROM `+table+` WHERE analysis_id = ? ORDER BY 1`, id)
		if err != nil {
			return nil, err
		}
		var subs []string
		for rows.Next() {
			var s string
			rows.Scan(&s)
			subs = append(subs, s)
		}
		rows.Close()
		per := max(1, int(int64(limit)*int64(len(subs))/n))
		for i := 0; i < len(subs); i += per {
			j := min(i+per, len(subs)) - 1
			out = append(out, slice{"analysis_id = ? AND subject_id >= ? AND subject_id <= ?", []any{id, subs[i], subs[j]}})
		}
	}
	return out, nil
}

func exportTable(ctx context.Context, conn *sql.Conn, td schema.TableDoc, analysis *int64, o ExportOptions, st *staging) (ExportedFile, error) {
	ef := ExportedFile{Table: td.Name, Path: filepath.Join(o.Dir, td.Name+"."+string(o.Format))}
	fail := func(err error) (ExportedFile, error) {
		return ef, fmt.Errorf("queries: export %s: %w", td.Name, err)
	}
	plan, err := planSlices(ctx, conn, td, analysis, o.SliceRows)
	if err != nil {
		return fail(err)
	}
	// The table name comes from the dictionary (fixed names), quoted.
	base := `SELECT * FROM ` + schema.Quote(td.Name)
	queryOf := func(s slice) string {
		if s.where == "" {
			return base
		}
		return base + ` WHERE ` + s.where
	}
	tmp, err := os.CreateTemp(o.Dir, "."+td.Name+"-*.tmp")
	if err != nil {
		return fail(err)
	}
	st.add(tmp.Name(), ef.Path) // renamed by Export once every file is written
	// CreateTemp makes the file private (0600); an exported table is as
	// readable as any file the user writes (0644 before the umask).
	if err := tmp.Chmod(0o644); err != nil {
		tmp.Close()
		return fail(err)
	}
	if o.Format == FormatCSV {
		ef.Rows, err = exportCSV(ctx, conn, plan, queryOf, tmp)
	} else {
		ef.Rows, err = exportParquet(ctx, conn, plan, queryOf, tmp)
	}
	if cerr := tmp.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fail(err)
	}
	return ef, nil
}

func exportCSV(ctx context.Context, conn *sql.Conn, plan []slice, queryOf func(slice) string, w io.Writer) (int64, error) {
	cw := &csvWriter{w: csv.NewWriter(w)}
	var n int64
	for i, s := range plan {
		rows, err := conn.QueryContext(ctx, queryOf(s), s.args...)
		if err != nil {
			return n, err
		}
		cols, err := columnsOf(rows)
		if err != nil {
			rows.Close()
			return n, err
		}
		if i == 0 {
			if err := cw.header(cols); err != nil {
				rows.Close()
				return n, err
			}
		}
		vals := make([]any, len(cols))
		ptrs := make([]any, len(cols))
		for j := range vals {
			ptrs[j] = &vals[j]
		}
		for rows.Next() {
			if err := rows.Scan(ptrs...); err != nil {
				rows.Close()
				return n, err
			}
			if err := cw.row(vals); err != nil {
				rows.Close()
				return n, err
			}
			n++
		}
		err = rows.Err()
		rows.Close()
		if err != nil {
			return n, err
		}
	}
	return n, cw.finish()
}

func exportParquet(ctx context.Context, conn *sql.Conn, plan []slice, queryOf func(slice) string, w io.Writer) (int64, error) {
	var n int64
	err := conn.Raw(func(dc any) error {
		ar, err := duckdb.NewArrowFromConn(dc.(driver.Conn))
		if err != nil {
			return err
		}
		first, err := ar.QueryContext(ctx, queryOf(plan[0]), plan[0].args...)
		if err != nil {
			return err
		}
		defer first.Release()
		n, err = writeRecords(first.Schema(), func(yield func(arrow.Record) error) error {
			for i, s := range plan {
				rdr := first
				if i > 0 {
					if rdr, err = ar.QueryContext(ctx, queryOf(s), s.args...); err != nil {
						return err
					}
				}
				for rdr.Next() {
					if err := yield(rdr.Record()); err != nil {
						return err
					}
				}
				err := rdr.Err()
				if i > 0 {
					rdr.Release()
				}
				if err != nil {
					return err
				}
			}
			return nil
		}, w)
		return err
	})
	return n, err
}

// writeDictionary writes the data dictionary rows in o.Format.
func writeDictionary(docs []schema.ColumnDoc, o ExportOptions, st *staging) (ExportedFile, error) {
	ef := ExportedFile{Table: DictionaryFile, Path: filepath.Join(o.Dir, DictionaryFile+"."+string(o.Format)), Rows: int64(len(docs))}
	header := []string{"table", "column", "type", "nullable", "meaning", "unit"}
	record := func(d schema.ColumnDoc) []string {
		unit := Unit(d.Table, d.Column)
		if unit == "" && d.Table == schema.Subjects {
			unit = "as recorded in participants.tsv"
		}
		return []string{d.Table, d.Column, d.Type, fmt.Sprint(d.Nullable), d.Description, unit}
	}
	f, err := os.CreateTemp(o.Dir, "."+DictionaryFile+"-*.tmp")
	if err != nil {
		return ef, fmt.Errorf("queries: export dictionary: %w", err)
	}
	st.add(f.Name(), ef.Path)
	if err := f.Chmod(0o644); err != nil {
		f.Close()
		return ef, fmt.Errorf("queries: export dictionary: %w", err)
	}
	if o.Format == FormatCSV {
		cw := csv.NewWriter(f)
		cw.Write(header)
		for _, d := range docs {
			cw.Write(record(d))
		}
		cw.Flush()
		err = cw.Error()
	} else {
		fields := make([]arrow.Field, len(header))
		for i, h := range header {
			fields[i] = arrow.Field{Name: h, Type: arrow.BinaryTypes.String}
		}
		fields[3].Type = arrow.FixedWidthTypes.Boolean
		rb := array.NewRecordBuilder(memory.DefaultAllocator, arrow.NewSchema(fields, nil))
		for _, d := range docs {
			for i, s := range record(d) {
				if i == 3 {
					rb.Field(i).(*array.BooleanBuilder).Append(d.Nullable)
					continue
				}
				rb.Field(i).(*array.StringBuilder).Append(s)
			}
		}
		rec := rb.NewRecord()
		rb.Release()
		_, err = writeRecords(rec.Schema(), func(yield func(arrow.Record) error) error { return yield(rec) }, f)
		rec.Release()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return ef, fmt.Errorf("queries: export dictionary: %w", err)
	}
	return ef, nil
}
