package queries

import (
	"context"
	"io"
	"testing"
)

// BenchmarkWriteParquet measures writing a result of N rows x 6 columns
// (filtration_events-like) as Parquet through DuckDB's Arrow interface.
func BenchmarkWriteParquet(b *testing.B) {
	conn := memConn(b)
	q := `SELECT 1::INTEGER AS analysis_id, 'sub-' || (i // 5000) AS subject_id, '' AS session_id,
		(i % 7)::SMALLINT AS state, (i % 2)::TINYINT AS dimension, random() AS value FROM range(1000000) r(i)`
	b.ResetTimer()
	for range b.N {
		if _, err := WriteParquet(context.Background(), conn, q, io.Discard); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/1e6, "ns/row") // 1e6 rows per op
}

// BenchmarkWriteCSV is the same result written as CSV through database/sql.
func BenchmarkWriteCSV(b *testing.B) {
	conn := memConn(b)
	q := `SELECT 1::INTEGER AS analysis_id, 'sub-' || (i // 5000) AS subject_id, '' AS session_id,
		(i % 7)::SMALLINT AS state, (i % 2)::TINYINT AS dimension, random() AS value FROM range(1000000) r(i)`
	b.ResetTimer()
	for range b.N {
		rows, err := conn.QueryContext(context.Background(), q)
		if err != nil {
			b.Fatal(err)
		}
		if _, err := WriteRows(io.Discard, rows, FormatCSV); err != nil {
			b.Fatal(err)
		}
		rows.Close()
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/1e6, "ns/row") // 1e6 rows per op
}
