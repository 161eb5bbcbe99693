package queries

import (
	"context"
	"database/sql"
	"encoding/csv"
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"

	"github.com/topostate/topostate/schema"
)

// The codebook read back with encoding/csv describes exactly the columns
// DuckDB finds in the exported files (information_schema of views over
// read_parquet / read_csv in a separate in-memory database), and every
// value in those files lies within the codebook's allowed values; the
// states run 1..n_states of the analyses exported.
func TestCodebook(t *testing.T) {
	d := openWarehouse(t)
	ctx := context.Background()
	mem, err := sql.Open("duckdb", "")
	if err != nil {
		t.Fatal(err)
	}
	defer mem.Close()
	mem.SetMaxOpenConns(1) // views live in the one in-memory database
	for _, c := range []struct {
		format   Format
		analysis string
		tables   []string
	}{
		{FormatParquet, "", nil},
		{FormatCSV, "first", nil},
		{FormatCSV, "", []string{"state_metrics", "subjects", "regions"}},
	} {
		t.Run(fmt.Sprintf("%s/%s/%d", c.format, c.analysis, len(c.tables)), func(t *testing.T) {
			dir := t.TempDir()
			files, err := Export(ctx, d.Conn, ExportOptions{Dir: dir, Format: c.format, Analysis: c.analysis, Tables: c.tables})
			if err != nil {
				t.Fatal(err)
			}
			var book string
			var tables []ExportedFile
			for _, f := range files {
				switch f.Table {
				case "codebook":
					book = f.Path
				case DictionaryFile:
				default:
					tables = append(tables, f)
				}
			}
			if book != filepath.Join(dir, CodebookFile) {
				t.Fatalf("codebook at %q", book)
			}
			fh, err := os.Open(book)
			if err != nil {
				t.Fatal(err)
			}
			recs, err := csv.NewReader(fh).ReadAll()
			fh.Close()
			if err != nil {
				t.Fatalf("codebook does not parse as CSV: %v", err)
			}
			if !slices.Equal(recs[0], CodebookHeader) {
				t.Fatalf("header %q", recs[0])
			}
			col := func(name string) int { return slices.Index(CodebookHeader, name) }
			type entry = []string
			byVar := map[string]entry{}
			var listed []string
			for _, r := range recs[1:] {
				key := r[col("table")] + "." + r[col("variable")]
				byVar[key] = r
				listed = append(listed, key)
			}

			// Columns as DuckDB reads them from the exported files.
			var found []string
			for _, f := range tables {
				src := fmt.Sprintf("read_parquet('%s')", f.Path)
				if c.format == FormatCSV {
					src = fmt.Sprintf("read_csv('%s', header = true)", f.Path)
				}
				if _, err := mem.Exec(`CREATE OR REPLACE VIEW ` + schema.Quote(f.Table) + ` AS SELECT * FROM ` + src); err != nil {
					t.Fatalf("%s: %v", f.Table, err)
				}
				rows, err := mem.Query(`SELECT column_name, data_type FROM information_schema.columns
					WHERE table_name = ? ORDER BY ordinal_position`, f.Table)
				if err != nil {
					t.Fatal(err)
				}
				for rows.Next() {
					var name, typ string
					rows.Scan(&name, &typ)
					key := f.Table + "." + name
					found = append(found, key)
					// Parquet keeps the types: the codebook's type is the
					// file's (JSON and timestamps aside, stored as text).
					if e, ok := byVar[key]; ok && c.format == FormatParquet && e[col("type")] != "text" && e[col("type")] != "datetime" &&
						portableType(typ) != e[col("type")] {
						t.Errorf("%s: codebook type %s, file type %s", key, e[col("type")], typ)
					}
				}
				rows.Close()
			}
			if !slices.Equal(listed, found) {
				t.Errorf("codebook variables:\n%v\nexported columns:\n%v", listed, found)
			}

			// States run 1..n_states of the exported analyses.
			var k int
			q := `SELECT max(n_states) FROM analyses`
			args := []any{}
			if c.analysis != "" {
				q += ` WHERE name = ?`
				args = append(args, c.analysis)
			}
			if err := d.Conn.QueryRowContext(ctx, q, args...).Scan(&k); err != nil {
				t.Fatal(err)
			}
			states := 0
			for key, e := range byVar {
				v := strings.SplitN(key, ".", 2)[1]
				if v == "state" || v == "from_state" || v == "to_state" {
					states++
					if e[col("allowed_values")] != "1.."+strconv.Itoa(k) {
						t.Errorf("%s: allowed %q, want 1..%d", key, e[col("allowed_values")], k)
					}
				}
			}
			if states == 0 {
				t.Error("no state variable in the codebook")
			}

			// Every exported value is allowed: within lo..hi, or one of the
			// listed values.
			checked := 0
			for _, key := range listed {
				e := byVar[key]
				allowed := e[col("allowed_values")]
				if allowed == "" {
					continue
				}
				tbl, v := schema.Quote(e[col("table")]), schema.Quote(e[col("variable")])
				if lo, hi, ok := strings.Cut(allowed, ".."); ok && !strings.Contains(allowed, ";") {
					var bad int
					err := mem.QueryRow(`SELECT count(*) FROM `+tbl+` WHERE `+v+` < ?::DOUBLE OR `+v+` > ?::DOUBLE`, lo, hi).Scan(&bad)
					if err != nil || bad > 0 {
						t.Errorf("%s: %d values outside %s (%v)", key, bad, allowed, err)
					}
					checked++
					continue
				}
				values := splitValues(allowed)
				rows, err := mem.Query(`SELECT DISTINCT lower(` + v + `::VARCHAR) FROM ` + tbl + ` WHERE ` + v + ` IS NOT NULL AND ` + v + `::VARCHAR <> ''`)
				if err != nil {
					t.Fatal(err)
				}
				for rows.Next() {
					var s string
					rows.Scan(&s)
					if !slices.ContainsFunc(values, func(a string) bool { return strings.EqualFold(a, s) }) {
						t.Errorf("%s: value %q not in %q", key, s, allowed)
					}
				}
				rows.Close()
				checked++
			}
			if checked < 4 {
				t.Errorf("only %d variables with allowed values checked", checked)
			}

			// The subjects' covariates: inferred types, and for the text
			// one its distinct values, sorted, as the exported file has them.
			for key, want := range map[string]string{"subjects.group": "text", "subjects.age": "integer", "subjects.sleep hours": "number"} {
				if e := byVar[key]; e == nil || e[col("type")] != want || !strings.HasPrefix(e[col("missing")], "empty cell") {
					t.Errorf("%s: %q, want type %s and empty cells for missing", key, e, want)
				}
			}
			var distinct string
			mem.QueryRow(`SELECT string_agg(DISTINCT "group", ';' ORDER BY "group") FROM subjects`).Scan(&distinct)
			if got := byVar["subjects.group"][col("allowed_values")]; got != distinct || distinct != "day;night;pilot" {
				t.Errorf("subjects.group allowed %q, exported file has %q", got, distinct)
			}
			if e := byVar["state_metrics.state"]; e[col("missing")] != "none" || e[col("type")] != "integer" || e[col("unit")] == "" || e[col("label")] == "" {
				t.Errorf("state_metrics.state: %q", e)
			}
		})
	}
}

// splitValues reads a codebook value list: ";" separates, "\;" and "\\"
// stand for ";" and "\".
func splitValues(s string) []string {
	var out []string
	var cur strings.Builder
	for i := 0; i < len(s); i++ {
		switch {
		case s[i] == '\\' && i+1 < len(s):
			i++
			cur.WriteByte(s[i])
		case s[i] == ';':
			out = append(out, cur.String())
			cur.Reset()
		default:
			cur.WriteByte(s[i])
		}
	}
	return append(out, cur.String())
}

// Rows of the codebook built from given facts: a covariate whose name is
// also a warehouse column name is still a covariate; separators inside
// values are escaped (and read back by splitValues); a text covariate
// with more than maxListed values gets its count instead of a list.
func TestCodebookEntries(t *testing.T) {
	many := make([]string, maxListed)
	for i := range many {
		many[i] = fmt.Sprintf("v%03d", i)
	}
	f := &codebookFacts{states: 4, regions: 9, fisherZ: true,
		text:      map[string][]string{"site": {`a;b`, `c\d`, "e"}, "code": many},
		textCount: map[string]int{"site": 3, "code": maxListed + 5}}
	for _, c := range []struct {
		doc                            schema.ColumnDoc
		typ, allowed, labels, contains string
	}{
		{schema.ColumnDoc{Table: "transitions", Column: "to_state", Type: "SMALLINT"}, "integer", "1..4", "", ""},
		{schema.ColumnDoc{Table: "betti_curves", Column: "dimension", Type: "TINYINT"}, "integer", "0;1", "0=connected components (Betti-0);1=independent cycles (Betti-1)", ""},
		{schema.ColumnDoc{Table: "regions", Column: "dropped", Type: "BOOLEAN"}, "boolean", "true;false", "", ""},
		{schema.ColumnDoc{Table: "state_centroids", Column: "j", Type: "SMALLINT"}, "integer", "1..9", "", ""},
		{schema.ColumnDoc{Table: "state_centroids", Column: "weight", Type: "DOUBLE"}, "number", "", "", ""}, // Fisher z: unbounded
		{schema.ColumnDoc{Table: "state_metrics", Column: "occupancy", Type: "DOUBLE"}, "number", "0..1", "", ""},
		{schema.ColumnDoc{Table: "subjects", Column: "state", Type: "BIGINT", Nullable: true}, "integer", "", "", ""},
		{schema.ColumnDoc{Table: "subjects", Column: "site", Type: "VARCHAR", Nullable: true}, "text", `a\;b;c\\d;e`, "", ""},
		{schema.ColumnDoc{Table: "subjects", Column: "code", Type: "VARCHAR", Nullable: true, Description: "covariate"}, "text", "", "", "105 distinct values"},
		{schema.ColumnDoc{Table: "analyses", Column: "created_at", Type: "TIMESTAMP"}, "datetime", "", "", ""},
	} {
		e := f.entry(c.doc)
		if len(e) != len(CodebookHeader) {
			t.Fatalf("%d fields", len(e))
		}
		if e[3] != c.typ || e[6] != c.allowed || e[7] != c.labels || !strings.Contains(e[2], c.contains) {
			t.Errorf("%s.%s: %q", c.doc.Table, c.doc.Column, e)
		}
	}
	if got := splitValues(`a\;b;c\\d;e`); !slices.Equal(got, []string{"a;b", `c\d`, "e"}) {
		t.Errorf("splitValues: %q", got)
	}
}
