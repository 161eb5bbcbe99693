package queries

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"

	"github.com/topostate/topostate/schema"
)

const mixedSQL = `SELECT * FROM (VALUES
	(1, 0.1::DOUBLE, 'plain', true, TIMESTAMP '2026-03-04 05:06:07', [1.5, 2.5], {'p': 0.25, 'm': 'exact'}),
	(2, NULL, 'comma, "quote"', false, NULL, NULL, NULL),
	(3, 'NaN'::DOUBLE, 'ünïcode', NULL, NULL, [], NULL),
	(4, 1e-300, '', true, NULL, NULL, NULL),
	(5, -12345.678901234567, NULL, false, NULL, NULL, NULL)
) t(id, x, label, flag, at, xs, st) ORDER BY id`

func writeMixed(t *testing.T, f Format) string {
	t.Helper()
	conn := memConn(t)
	rows, err := conn.QueryContext(context.Background(), mixedSQL)
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	var b bytes.Buffer
	n, err := WriteRows(&b, rows, f)
	if err != nil || n != 5 {
		t.Fatalf("WriteRows %s: %d rows, %v", f, n, err)
	}
	return b.String()
}

// CSV and TSV read back with the standard library's encoding/csv reader:
// a header, NULL and NaN as empty cells, numbers that parse back to the
// exact same float64, '.' decimals, quoting where needed.
func TestWriteCSVTSV(t *testing.T) {
	for _, f := range []Format{FormatCSV, FormatTSV} {
		out := writeMixed(t, f)
		r := csv.NewReader(strings.NewReader(out))
		if f == FormatTSV {
			r.Comma = '\t'
		}
		recs, err := r.ReadAll()
		if err != nil {
			t.Fatalf("%s: %v\n%s", f, err, out)
		}
		want := [][]string{
			{"id", "x", "label", "flag", "at", "xs", "st"},
			{"1", "0.1", "plain", "true", "2026-03-04 05:06:07", "[1.5,2.5]", `{"m":"exact","p":0.25}`},
			{"2", "", `comma, "quote"`, "false", "", "", ""},
			{"3", "", "ünïcode", "", "", "[]", ""},
			{"4", "1e-300", "", "true", "", "", ""},
			{"5", "-12345.678901234567", "", "false", "", "", ""},
		}
		for i := range want {
			if !slices.Equal(recs[i], want[i]) {
				t.Errorf("%s row %d: %q, want %q", f, i, recs[i], want[i])
			}
		}
		if v, _ := strconv.ParseFloat(recs[5][1], 64); v != -12345.678901234567 {
			t.Errorf("%s: %v does not round-trip", f, recs[5][1])
		}
	}
}

func TestWriteJSON(t *testing.T) {
	out := writeMixed(t, FormatJSON)
	var got []map[string]any
	if err := json.Unmarshal([]byte(out), &got); err != nil {
		t.Fatalf("%v\n%s", err, out)
	}
	if len(got) != 5 || got[0]["x"] != 0.1 || got[1]["x"] != nil || got[2]["x"] != nil || got[1]["label"] != `comma, "quote"` ||
		got[0]["at"] != "2026-03-04 05:06:07" || got[0]["st"].(map[string]any)["m"] != "exact" || got[4]["flag"] != false {
		t.Errorf("JSON read back as %v", got)
	}
	first := out[:strings.Index(out, "}")]
	if !(strings.Index(first, `"id"`) < strings.Index(first, `"x"`) && strings.Index(first, `"x"`) < strings.Index(first, `"st"`)) {
		t.Errorf("keys not in column order: %s", first)
	}
}

func TestWriteTable(t *testing.T) {
	out := writeMixed(t, FormatTable)
	lines := strings.Split(strings.TrimSuffix(out, "\n"), "\n")
	if len(lines) != 8 || lines[7] != "(5 rows)" {
		t.Fatalf("table:\n%s", out)
	}
	// Columns line up: every numeric cell of column x ends where the
	// header's rule for x ends.
	rule := lines[1]
	end := strings.Index(rule[strings.Index(rule, " ")+2:], " ") + strings.Index(rule, " ") + 2
	for _, l := range lines[2:7] {
		if l[end-1] == ' ' {
			t.Errorf("x is not right-aligned at column %d: %q", end, l)
		}
	}
	if !strings.Contains(lines[3], "NULL") || !strings.Contains(lines[4], "NaN") || !strings.Contains(lines[6], "-12345.7") {
		t.Errorf("table cells:\n%s", out)
	}
}

// A Parquet result read back by DuckDB's own Parquet reader equals the
// query result.
func TestWriteParquet(t *testing.T) {
	d := openWarehouse(t)
	ctx := context.Background()
	q, _ := Lookup(FS, "state_dwell_by_group")
	if _, err := Bind(ctx, d.Conn, q, map[string]string{"group_a": "night", "group_b": "day", "analysis": "first"}); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "out.parquet")
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	n, err := WriteParquet(ctx, d.Conn, q.SQL, f)
	f.Close()
	if err != nil || n != 6 {
		t.Fatalf("WriteParquet: %d rows, %v", n, err)
	}
	var diff int
	check := fmt.Sprintf(`WITH q AS (%s), p AS (SELECT * FROM read_parquet('%s'))
		SELECT (SELECT count(*) FROM (SELECT * FROM q EXCEPT ALL SELECT * FROM p)) + (SELECT count(*) FROM (SELECT * FROM p EXCEPT ALL SELECT * FROM q))`,
		strings.TrimSuffix(strings.TrimSpace(stripComments(q.SQL)), ";"), path)
	if err := d.Conn.QueryRowContext(ctx, check).Scan(&diff); err != nil {
		t.Fatal(err)
	}
	if diff != 0 {
		t.Errorf("%d rows differ between the query and its Parquet file", diff)
	}
}

func stripComments(s string) string {
	var out []string
	for _, l := range strings.Split(s, "\n") {
		if !strings.HasPrefix(strings.TrimSpace(l), "--") {
			out = append(out, l)
		}
	}
	return strings.Join(out, "\n")
}

func TestUnitsCoverDictionary(t *testing.T) {
	for _, td := range schema.Dictionary() {
		for _, c := range td.Columns {
			if Unit(td.Name, c.Column) == "" {
				t.Errorf("%s.%s has no unit in the export's unit table", td.Name, c.Column)
			}
		}
	}
}

// Export in both formats, whole and for one analysis, with slices small
// enough that the large tables are read in several pieces: every file
// equals its table (Parquet read back by DuckDB's reader, CSV by
// encoding/csv), and the dictionary lists every column with a unit.
func TestExport(t *testing.T) {
	d := openWarehouse(t)
	ctx := context.Background()
	for _, c := range []struct {
		format   Format
		analysis string
		where    string
	}{
		{FormatParquet, "", ""},
		{FormatParquet, "second", " WHERE analysis_id = 2"},
		{FormatCSV, "1", " WHERE analysis_id = 1"},
	} {
		t.Run(fmt.Sprintf("%s/%s", c.format, c.analysis), func(t *testing.T) {
			dir := filepath.Join(t.TempDir(), "out")
			files, err := Export(ctx, d.Conn, ExportOptions{Dir: dir, Format: c.format, Analysis: c.analysis, SliceRows: 700})
			if err != nil {
				t.Fatal(err)
			}
			dict := schema.Dictionary()
			if len(files) != len(dict)+2 {
				t.Fatalf("%d files, want %d tables + dictionary + codebook", len(files), len(dict))
			}
			for _, f := range files[:len(dict)] {
				if st, err := os.Stat(f.Path); err != nil || st.Mode().Perm()&0o044 == 0 {
					t.Errorf("%s: exported file is not readable by others (mode %v, %v)", f.Table, st.Mode(), err)
				}
				where := c.where
				if f.Table == "schema_version" {
					where = ""
				}
				var want int64
				d.Conn.QueryRowContext(ctx, `SELECT count(*) FROM `+schema.Quote(f.Table)+where).Scan(&want)
				if f.Rows != want {
					t.Errorf("%s: %d rows written, table has %d", f.Table, f.Rows, want)
				}
				if c.format == FormatParquet {
					var diff int
					q := fmt.Sprintf(`SELECT (SELECT count(*) FROM (SELECT * FROM %[1]s%[3]s EXCEPT ALL SELECT * FROM read_parquet('%[2]s')))
						+ (SELECT count(*) FROM (SELECT * FROM read_parquet('%[2]s') EXCEPT ALL SELECT * FROM %[1]s%[3]s))`, f.Table, f.Path, where)
					if f.Table == "analyses" {
						q = strings.ReplaceAll(q, "SELECT * FROM", "SELECT * EXCLUDE (parameters), parameters::VARCHAR FROM")
					}
					if err := d.Conn.QueryRowContext(ctx, q).Scan(&diff); err != nil {
						t.Fatalf("%s: %v", f.Table, err)
					}
					if diff != 0 {
						t.Errorf("%s: %d rows differ from the table", f.Table, diff)
					}
					continue
				}
				b, err := os.ReadFile(f.Path)
				if err != nil {
					t.Fatal(err)
				}
				recs, err := csv.NewReader(bytes.NewReader(b)).ReadAll()
				if err != nil {
					t.Fatalf("%s: %v", f.Table, err)
				}
				if int64(len(recs)-1) != want {
					t.Errorf("%s: %d CSV records, want %d", f.Table, len(recs)-1, want)
				}
			}
			if c.format == FormatCSV {
				// Spot check: state_metrics values parse back exactly.
				b, _ := os.ReadFile(filepath.Join(dir, "state_metrics.csv"))
				recs, _ := csv.NewReader(bytes.NewReader(b)).ReadAll()
				var sum float64
				for _, r := range recs[1:] {
					v, err := strconv.ParseFloat(r[4], 64)
					if err != nil {
						t.Fatal(err)
					}
					sum += v
				}
				var want float64
				d.Conn.QueryRowContext(ctx, `SELECT sum(occupancy) FROM state_metrics WHERE analysis_id = 1`).Scan(&want)
				if math.Abs(sum-want) > 1e-9 {
					t.Errorf("occupancy sums to %v in the CSV, %v in the table", sum, want)
				}
			}
			dictPath := files[len(dict)].Path
			var rows, missing, covariates int
			src := fmt.Sprintf("read_parquet('%s')", dictPath)
			if c.format == FormatCSV {
				src = fmt.Sprintf("read_csv('%s', header = true)", dictPath)
			}
			q := `SELECT count(*), count(*) FILTER (WHERE unit IS NULL OR unit = '' OR meaning IS NULL OR meaning = ''),
				count(*) FILTER (WHERE "table" = 'subjects' AND "column" IN ('group', 'age', 'sleep hours')) FROM ` + src
			if err := d.Conn.QueryRowContext(ctx, q).Scan(&rows, &missing, &covariates); err != nil {
				t.Fatal(err)
			}
			var cols int
			for _, td := range dict {
				cols += len(td.Columns)
			}
			if rows != cols+3 || missing != 0 || covariates != 3 {
				t.Errorf("dictionary: %d rows (want %d), %d without meaning or unit, %d covariates", rows, cols+3, missing, covariates)
			}
			left, _ := filepath.Glob(filepath.Join(dir, ".*.tmp"))
			if len(left) > 0 {
				t.Errorf("temporary files left: %v", left)
			}
		})
	}
	if _, err := Export(ctx, d.Conn, ExportOptions{Dir: t.TempDir(), Tables: []string{"subjects; DROP TABLE subjects"}}); err == nil {
		t.Error("an unknown table was accepted")
	}
}
