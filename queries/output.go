package queries

import (
	"bufio"
	"context"
	"database/sql"
	"database/sql/driver"
	"encoding/csv"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"math/big"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/compress"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
	"github.com/marcboeker/go-duckdb"
)

// Format is an output format of query results.
type Format string

// Output formats.
const (
	// FormatTable is aligned columns for reading: numbers right-aligned to
	// 6 significant digits, NULL written as NULL, long cells shortened.
	FormatTable Format = "table"
	// FormatCSV is RFC 4180 CSV for R, Stata, SPSS and pandas: a header
	// row, UTF-8, '.' as the decimal point, numbers in full precision,
	// and NULL, NaN and infinities as empty cells (missing).
	FormatCSV Format = "csv"
	// FormatTSV is FormatCSV with tabs between the fields.
	FormatTSV Format = "tsv"
	// FormatJSON is one JSON array of objects, keys in column order;
	// NULL, NaN and infinities are null.
	FormatJSON Format = "json"
	// FormatParquet is a Parquet file (zstd) written through Arrow.
	FormatParquet Format = "parquet"
)

// Formats lists every format, for help texts.
var Formats = []Format{FormatTable, FormatCSV, FormatTSV, FormatJSON, FormatParquet}

// ParseFormat checks a format name.
func ParseFormat(s string) (Format, error) {
	for _, f := range Formats {
		if string(f) == strings.ToLower(s) {
			return f, nil
		}
	}
	return "", fmt.Errorf("queries: unknown format %q (want table, csv, tsv, json or parquet)", s)
}

// column is one result column's name and DuckDB type.
type column struct {
	name, dbType string
}

func columnsOf(rows *sql.Rows) ([]column, error) {
	ct, err := rows.ColumnTypes()
	if err != nil {
		return nil, err
	}
	cols := make([]column, len(ct))
	for i, c := range ct {
		cols[i] = column{c.Name(), c.DatabaseTypeName()}
	}
	return cols, nil
}

// WriteRows writes every row of rows to w in a text format (not Parquet)
// and returns the number of rows written. It does not close rows.
func WriteRows(w io.Writer, rows *sql.Rows, f Format) (int, error) {
	cols, err := columnsOf(rows)
	if err != nil {
		return 0, fmt.Errorf("queries: %w", err)
	}
	var out rowWriter
	bw := bufio.NewWriter(w)
	switch f {
	case FormatCSV, FormatTSV:
		cw := csv.NewWriter(bw)
		if f == FormatTSV {
			cw.Comma = '\t'
		}
		out = &csvWriter{w: cw}
	case FormatJSON:
		out = &jsonWriter{w: bw}
	case FormatTable:
		out = &tableWriter{w: bw}
	default:
		return 0, fmt.Errorf("queries: WriteRows cannot write %q", f)
	}
	if err := out.header(cols); err != nil {
		return 0, fmt.Errorf("queries: write: %w", err)
	}
	vals := make([]any, len(cols))
	ptrs := make([]any, len(cols))
	for i := range vals {
		ptrs[i] = &vals[i]
	}
	n := 0
	for rows.Next() {
		if err := rows.Scan(ptrs...); err != nil {
			return n, fmt.Errorf("queries: read row %d: %w", n+1, err)
		}
		if err := out.row(vals); err != nil {
			return n, fmt.Errorf("queries: write: %w", err)
		}
		n++
	}
	if err := rows.Err(); err != nil {
		return n, fmt.Errorf("queries: %w", err)
	}
	if err := out.finish(); err != nil {
		return n, fmt.Errorf("queries: write: %w", err)
	}
	return n, bw.Flush()
}

type rowWriter interface {
	header([]column) error
	row([]any) error
	finish() error
}

// text renders one value as plain text: "" for NULL, NaN and infinities
// (null is true for those), numbers in full precision with '.' as the
// decimal point, times in ISO 8601 form, lists, structs and maps as JSON.
func text(v any, dbType string) (s string, null bool) {
	switch x := v.(type) {
	case nil:
		return "", true
	case float64:
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return "", true
		}
		return strconv.FormatFloat(x, 'g', -1, 64), false
	case float32:
		f := float64(x)
		if math.IsNaN(f) || math.IsInf(f, 0) {
			return "", true
		}
		return strconv.FormatFloat(f, 'g', -1, 32), false
	case string:
		return x, false
	case bool:
		return strconv.FormatBool(x), false
	case time.Time:
		switch {
		case dbType == "DATE":
			return x.Format("2006-01-02"), false
		case strings.HasPrefix(dbType, "TIME") && !strings.HasPrefix(dbType, "TIMESTAMP"):
			return x.Format("15:04:05.999999"), false
		}
		return x.Format("2006-01-02 15:04:05.999999"), false
	case []byte:
		if dbType == "UUID" && len(x) == 16 {
			h := hex.EncodeToString(x)
			return h[:8] + "-" + h[8:12] + "-" + h[12:16] + "-" + h[16:20] + "-" + h[20:], false
		}
		return `\x` + hex.EncodeToString(x), false
	case *big.Int:
		return x.String(), false
	case duckdb.Decimal:
		return decimalText(x), false
	case duckdb.Interval:
		return fmt.Sprintf("%d months %d days %d microseconds", x.Months, x.Days, x.Micros), false
	case int8, int16, int32, int64, int, uint8, uint16, uint32, uint64, uint:
		return fmt.Sprint(x), false
	}
	b, err := json.Marshal(jsonable(v))
	if err != nil {
		return fmt.Sprint(v), false
	}
	return string(b), false
}

func decimalText(d duckdb.Decimal) string {
	s := new(big.Int).Abs(d.Value).String()
	scale := int(d.Scale)
	if scale > 0 {
		for len(s) <= scale {
			s = "0" + s
		}
		s = s[:len(s)-scale] + "." + s[len(s)-scale:]
	}
	if d.Value.Sign() < 0 {
		s = "-" + s
	}
	return s
}

// jsonable converts a scanned value into one encoding/json writes as the
// JSON format promises.
func jsonable(v any) any {
	switch x := v.(type) {
	case float64:
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return nil
		}
		return x
	case float32:
		return jsonable(float64(x))
	case []any:
		out := make([]any, len(x))
		for i, e := range x {
			out[i] = jsonable(e)
		}
		return out
	case map[string]any:
		out := make(map[string]any, len(x))
		for k, e := range x {
			out[k] = jsonable(e)
		}
		return out
	case duckdb.Map:
		out := make(map[string]any, len(x))
		for k, e := range x {
			out[fmt.Sprint(k)] = jsonable(e)
		}
		return out
	case duckdb.Decimal:
		return json.Number(decimalText(x))
	case *big.Int:
		return json.Number(x.String())
	case time.Time, []byte, duckdb.Interval:
		s, _ := text(x, "")
		return s
	}
	return v
}

type csvWriter struct {
	w     *csv.Writer
	types []column
}

func (c *csvWriter) header(cols []column) error {
	rec := make([]string, len(cols))
	for i, col := range cols {
		rec[i] = col.name
	}
	c.w.Write(rec)
	c.types = cols
	return c.w.Error()
}

func (c *csvWriter) row(v []any) error {
	rec := make([]string, len(v))
	for i, x := range v {
		rec[i], _ = text(x, c.types[i].dbType)
	}
	return c.w.Write(rec)
}

func (c *csvWriter) finish() error {
	c.w.Flush()
	return c.w.Error()
}

type jsonWriter struct {
	w     *bufio.Writer
	cols  []column
	keys  []string
	count int
}

func (j *jsonWriter) header(cols []column) error {
	j.cols = cols
	for _, c := range cols {
		k, _ := json.Marshal(c.name)
		j.keys = append(j.keys, string(k))
	}
	_, err := j.w.WriteString("[")
	return err
}

func (j *jsonWriter) row(v []any) error {
	if j.count > 0 {
		j.w.WriteString(",")
	}
	j.count++
	j.w.WriteString("\n  {")
	for i, x := range v {
		if i > 0 {
			j.w.WriteString(", ")
		}
		j.w.WriteString(j.keys[i])
		j.w.WriteString(": ")
		var val any
		switch y := x.(type) {
		case time.Time, []byte, duckdb.Interval:
			val, _ = text(y, j.cols[i].dbType)
		default:
			val = jsonable(x)
		}
		b, err := json.Marshal(val)
		if err != nil {
			return err
		}
		j.w.Write(b)
	}
	_, err := j.w.WriteString("}")
	return err
}

func (j *jsonWriter) finish() error {
	if j.count > 0 {
		j.w.WriteString("\n")
	}
	_, err := j.w.WriteString("]\n")
	return err
}

// tableWriter holds the rows to align the columns.
type tableWriter struct {
	w       *bufio.Writer
	cols    []column
	cells   [][]string
	numeric []bool
}

const maxCell = 48

func (t *tableWriter) header(cols []column) error {
	t.cols = cols
	t.numeric = make([]bool, len(cols))
	for i, c := range cols {
		t.numeric[i] = isNumericType(c.dbType)
	}
	return nil
}

func (t *tableWriter) row(v []any) error {
	rec := make([]string, len(v))
	for i, x := range v {
		switch y := x.(type) {
		case nil:
			rec[i] = "NULL"
		case float64:
			rec[i] = strconv.FormatFloat(y, 'g', 6, 64)
		case float32:
			rec[i] = strconv.FormatFloat(float64(y), 'g', 6, 32)
		default:
			s, _ := text(x, t.cols[i].dbType)
			rec[i] = s
		}
		if utf8.RuneCountInString(rec[i]) > maxCell {
			r := []rune(rec[i])
			rec[i] = string(r[:maxCell-3]) + "..."
		}
	}
	t.cells = append(t.cells, rec)
	return nil
}

func (t *tableWriter) finish() error {
	width := make([]int, len(t.cols))
	for i, c := range t.cols {
		width[i] = utf8.RuneCountInString(c.name)
	}
	for _, r := range t.cells {
		for i, s := range r {
			width[i] = max(width[i], utf8.RuneCountInString(s))
		}
	}
	line := func(rec []string) {
		for i, s := range rec {
			if i > 0 {
				t.w.WriteString("  ")
			}
			pad := strings.Repeat(" ", width[i]-utf8.RuneCountInString(s))
			if t.numeric[i] {
				t.w.WriteString(pad + s)
			} else if i == len(rec)-1 {
				t.w.WriteString(s)
			} else {
				t.w.WriteString(s + pad)
			}
		}
		t.w.WriteString("\n")
	}
	names := make([]string, len(t.cols))
	rule := make([]string, len(t.cols))
	for i, c := range t.cols {
		names[i] = c.name
		rule[i] = strings.Repeat("-", width[i])
	}
	line(names)
	line(rule)
	for _, r := range t.cells {
		line(r)
	}
	unit := "rows"
	if len(t.cells) == 1 {
		unit = "row"
	}
	_, err := fmt.Fprintf(t.w, "(%d %s)\n", len(t.cells), unit)
	return err
}

// WriteParquet runs query on conn (after Bind, when it reads parameters)
// through DuckDB's Arrow interface and writes the result to w as one
// Parquet file (zstd). The whole result is held in memory once, as Arrow
// record batches. It returns the number of rows written.
func WriteParquet(ctx context.Context, conn *sql.Conn, query string, w io.Writer) (int64, error) {
	var n int64
	err := conn.Raw(func(dc any) error {
		ar, err := duckdb.NewArrowFromConn(dc.(driver.Conn))
		if err != nil {
			return err
		}
		rdr, err := ar.QueryContext(ctx, query)
		if err != nil {
			return err
		}
		defer rdr.Release()
		n, err = writeRecords(rdr.Schema(), func(yield func(arrow.Record) error) error {
			for rdr.Next() {
				if err := yield(rdr.Record()); err != nil {
					return err
				}
			}
			return rdr.Err()
		}, w)
		return err
	})
	if err != nil {
		return n, fmt.Errorf("queries: parquet: %w", err)
	}
	return n, nil
}

// writeRecords writes the records that each calls yield on into one
// Parquet file. w is left open (the caller owns it).
//
// DuckDB hands over Arrow batches of a few thousand rows; buffered writing
// gathers them into row groups of up to a million rows instead of one small
// row group per batch. A buffered row group still points into the batches'
// memory, which the reader frees as it moves on, so every batch is retained
// until the file is closed (the result is held in memory once anyway).
func writeRecords(sc *arrow.Schema, each func(yield func(arrow.Record) error) error, w io.Writer) (int64, error) {
	props := parquet.NewWriterProperties(parquet.WithCompression(compress.Codecs.Zstd),
		parquet.WithMaxRowGroupLength(1_000_000))
	// pqarrow closes a sink that is an io.Closer; hide Close from it.
	fw, err := pqarrow.NewFileWriter(sc, writeOnly{w}, props, pqarrow.DefaultWriterProps())
	if err != nil {
		return 0, err
	}
	var held []arrow.Record
	defer func() {
		for _, r := range held {
			r.Release()
		}
	}()
	var n int64
	err = each(func(rec arrow.Record) error {
		rec.Retain()
		held = append(held, rec)
		n += rec.NumRows()
		return fw.WriteBuffered(rec)
	})
	if cerr := fw.Close(); err == nil {
		err = cerr
	}
	return n, err
}

type writeOnly struct{ w io.Writer }

func (o writeOnly) Write(p []byte) (int, error) { return o.w.Write(p) }
