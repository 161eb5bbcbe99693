package queries

import (
	"context"
	"database/sql"
	"encoding/csv"
	"fmt"
	"maps"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"

	"github.com/topostate/topostate/schema"
)

// CodebookFile is the file name of the codebook Export writes beside the
// data dictionary, always as CSV.
const CodebookFile = "codebook.csv"

// CodebookHeader is the codebook's header row: one row per exported
// column (a variable of its table's file), for R, Stata and SPSS users.
//
//   - table: the exported table (file <table>.parquet or .csv)
//   - variable: the column name
//   - label: what it means (the data dictionary's meaning)
//   - type: integer, number, text, boolean or datetime (JSON is text)
//   - storage_type: the DuckDB type of the column
//   - unit: unit or scale
//   - allowed_values: "lo..hi" (every value from lo to hi; whole numbers
//     for an integer variable) or values separated by ";" (a ";" or "\"
//     inside a value is written "\;" or "\\"); empty when not fixed
//   - value_labels: "code=label" pairs separated by ";", or empty
//   - missing: how a missing value is written ("empty cell"), or "none"
//     for a column that is never NULL
var CodebookHeader = []string{"table", "variable", "label", "type", "storage_type", "unit", "allowed_values", "value_labels", "missing"}

// maxListed is the most distinct text values listed as allowed values.
const maxListed = 100

// codebookFacts are what the allowed values depend on, over the exported
// analyses.
type codebookFacts struct {
	states, regions int  // largest n_states and n_regions (0: no analyses)
	fisherZ         bool // some analysis clustered Fisher z values
	sessions        []string
	text            map[string][]string // text covariate -> distinct values (nil: more than maxListed)
	textCount       map[string]int
	covariates      map[string]covariateDoc // participants.json entries
	noSession       bool                    // some series has session_id '' (a cohort without sessions)
}

func loadCodebookFacts(ctx context.Context, conn *sql.Conn, docs []schema.ColumnDoc, analysis *int64) (*codebookFacts, error) {
	f := &codebookFacts{text: map[string][]string{}, textCount: map[string]int{}}
	var id sql.NullInt64
	if analysis != nil {
		id = sql.NullInt64{Int64: *analysis, Valid: true}
	}
	var k, p sql.NullInt64
	var z sql.NullBool
	err := conn.QueryRowContext(ctx, `SELECT max(n_states), max(n_regions), bool_or(coalesce(parameters->>'fisher_z' = 'true', false))
		FROM analyses WHERE ?::BIGINT IS NULL OR analysis_id = ?`, id, id).Scan(&k, &p, &z)
	if err != nil {
		return nil, err
	}
	f.states, f.regions, f.fisherZ = int(k.Int64), int(p.Int64), z.Bool
	if err := conn.QueryRowContext(ctx, `SELECT count(*) > 0 FROM inputs WHERE session_id = '' AND (?::BIGINT IS NULL OR analysis_id = ?)`, id, id).Scan(&f.noSession); err != nil {
		return nil, err
	}
	if f.covariates, err = covariateDocs(ctx, conn, analysis); err != nil {
		return nil, err
	}
	rows, err := conn.QueryContext(ctx, `SELECT DISTINCT session_id FROM inputs
		WHERE session_id <> '' AND (?::BIGINT IS NULL OR analysis_id = ?) ORDER BY 1 LIMIT `+strconv.Itoa(maxListed+1), id, id)
	if err != nil {
		return nil, err
	}
	for rows.Next() {
		var s string
		if err := rows.Scan(&s); err != nil {
			rows.Close()
			return nil, err
		}
		f.sessions = append(f.sessions, s)
	}
	rows.Close()
	var textCols []string
	for _, d := range docs {
		if d.Table == schema.Subjects && d.Column != "analysis_id" && d.Column != "subject_id" && portableType(d.Type) == "text" {
			textCols = append(textCols, d.Column)
		}
	}
	if len(textCols) == 0 {
		return f, rows.Err()
	}
	// Every covariate's values as data (UNPIVOT; NULLs drop out), so no
	// column name is pasted into SQL text.
	rows, err = conn.QueryContext(ctx, `SELECT covariate, value FROM (
			UNPIVOT (SELECT analysis_id, subject_id, COLUMNS(* EXCLUDE (analysis_id, subject_id))::VARCHAR FROM subjects)
			ON COLUMNS(* EXCLUDE (analysis_id, subject_id)) INTO NAME covariate VALUE value)
		WHERE ?::BIGINT IS NULL OR analysis_id = ?
		GROUP BY covariate, value ORDER BY covariate, value`, id, id)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	for rows.Next() {
		var c, v string
		if err := rows.Scan(&c, &v); err != nil {
			return nil, err
		}
		if !slices.Contains(textCols, c) {
			continue
		}
		f.textCount[c]++
		if f.textCount[c] <= maxListed {
			f.text[c] = append(f.text[c], v)
		}
	}
	return f, rows.Err()
}

// portableType maps a DuckDB type to the codebook's types.
func portableType(t string) string {
	u := strings.ToUpper(t)
	switch {
	case u == "BOOLEAN":
		return "boolean"
	case isNumericType(u) && (strings.HasPrefix(u, "FLOAT") || u == "DOUBLE" || u == "REAL" || strings.HasPrefix(u, "DECIMAL")):
		return "number"
	case isNumericType(u):
		return "integer"
	case strings.HasPrefix(u, "TIMESTAMP") || u == "DATE":
		return "datetime"
	}
	return "text"
}

// escapeValue writes one value of a ";"-separated list.
func escapeValue(s string) string {
	return strings.ReplaceAll(strings.ReplaceAll(s, `\`, `\\`), ";", `\;`)
}

func valueList(vs []string) string {
	out := make([]string, len(vs))
	for i, v := range vs {
		out[i] = escapeValue(v)
	}
	return strings.Join(out, ";")
}

// entry is the codebook row of one column.
func (f *codebookFacts) entry(d schema.ColumnDoc) []string {
	typ := portableType(d.Type)
	unit := Unit(d.Table, d.Column)
	label := d.Description
	var allowed, labels string
	rng := func(lo, hi int) string { return fmt.Sprintf("%d..%d", lo, hi) }
	name := d.Table + "." + d.Column
	covariate := d.Table == schema.Subjects && d.Column != "analysis_id" && d.Column != "subject_id"
	switch {
	case covariate:
		unit = "as recorded in participants.tsv"
		if d.Unit != "" {
			unit = d.Unit
		}
		switch {
		case len(f.covariates[d.Column].levels) > 0:
			// participants.json's Levels: the codes and their meanings.
			lv := f.covariates[d.Column].levels
			codes := slices.Sorted(maps.Keys(lv))
			pairs := make([]string, len(codes))
			for i, c := range codes {
				pairs[i] = escapeValue(c + "=" + lv[c])
			}
			allowed, labels = valueList(codes), strings.Join(pairs, ";")
		case typ == "boolean":
			allowed = "true;false"
		case typ == "text":
			if n := f.textCount[d.Column]; n > maxListed {
				label += fmt.Sprintf(" (%d distinct values)", n)
			} else {
				allowed = valueList(f.text[d.Column])
			}
		}
	case d.Column == "state" || d.Column == "from_state" || d.Column == "to_state":
		if f.states > 0 {
			allowed = rng(1, f.states)
		}
	case d.Column == "dimension":
		allowed, labels = "0;1", "0=connected components (Betti-0);1=independent cycles (Betti-1)"
	case typ == "boolean":
		allowed = "true;false"
	case d.Column == "region_index" || name == "state_centroids.i" || name == "state_centroids.j":
		if f.regions > 0 {
			allowed = rng(1, f.regions)
		}
	case name == "state_metrics.occupancy" || name == "transitions.probability" || name == "subject_dynamics.switch_rate":
		allowed = "0..1"
	case name == "filtration_events.value" || name == "state_networks.mean_weight" || name == "state_centroids.weight" && !f.fisherZ:
		allowed = "-1..1"
	case d.Column == "session_id":
		// '' is a value (the cohort has no sessions), never missing. In
		// CSV it is an empty cell, which readers that guess types take for
		// a missing value when the whole column is empty (R's read.csv
		// types it logical NA, pandas NaN: from memory, neither is
		// installed here); the codebook says so where the reader looks.
		label += " ('' = no session: the cohort has one series per subject)"
		if len(f.sessions) > 0 && len(f.sessions) <= maxListed {
			allowed = valueList(f.sessions)
		}
		if f.noSession {
			allowed = strings.TrimPrefix(valueList(f.sessions)+";''", ";")
			labels = "''=no session"
		}
	}
	missing := "none"
	if d.Column == "session_id" && f.noSession {
		missing = "none: an empty cell in CSV is the value '' (no session), not a missing value; read this column as text and keep empty cells as '' (R: read.csv(..., colClasses = c(session_id = \"character\")); pandas: read_csv(...).fillna({\"session_id\": \"\"}))"
	}
	if d.Nullable {
		missing = "empty cell"
		if d.Table == schema.Subjects {
			missing = "empty cell (n/a or empty in participants.tsv)"
		}
	}
	return []string{d.Table, d.Column, label, typ, d.Type, unit, allowed, labels, missing}
}

// writeCodebook writes DIR/codebook.csv for the exported columns docs.
func writeCodebook(ctx context.Context, conn *sql.Conn, docs []schema.ColumnDoc, analysis *int64, dir string, st *staging) (ExportedFile, error) {
	ef := ExportedFile{Table: "codebook", Path: filepath.Join(dir, CodebookFile), Rows: int64(len(docs))}
	fail := func(err error) (ExportedFile, error) { return ef, fmt.Errorf("queries: export codebook: %w", err) }
	facts, err := loadCodebookFacts(ctx, conn, docs, analysis)
	if err != nil {
		return fail(err)
	}
	tmp, err := os.CreateTemp(dir, ".codebook-*.tmp")
	if err != nil {
		return fail(err)
	}
	st.add(tmp.Name(), ef.Path) // renamed by Export once every file is written
	w := csv.NewWriter(tmp)
	w.Write(CodebookHeader)
	for _, d := range docs {
		w.Write(facts.entry(d))
	}
	w.Flush()
	err = w.Error()
	if cerr := tmp.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Chmod(tmp.Name(), 0o644)
	}
	if err != nil {
		return fail(err)
	}
	return ef, nil
}
