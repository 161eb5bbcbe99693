package schema

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
)

// A Parquet-only writer's files, read back by DuckDB's own Parquet reader
// (the outside referee, with hive partitioning on the folder names) and by
// ReadParquet, then merged into a warehouse under another analysis_id.
func TestParquetOnlyWriter(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	path := func(table string) string { return filepath.Join(dir, table, "shard=2", "data.parquet") }

	// Rolled back: nothing left behind.
	w := BeginParquet(0, path)
	b := NewBatch(StateMetrics)
	b.Row(0, "sub-01", "", 1, 0.25, 3, 4.5, 9.0, 1, 2, 5.0, 10.0)
	if err := w.Append(ctx, b); err != nil {
		t.Fatal(err)
	}
	w.Rollback()
	if left, _ := filepath.Glob(filepath.Join(dir, "*", "*", "*")); len(left) != 0 {
		t.Fatalf("after rollback: %v", left)
	}
	if err := w.Exec(ctx, "SELECT 1"); err == nil {
		t.Error("Exec on a Parquet-only writer was accepted")
	}

	w = BeginParquet(0, path)
	b.Row(0, "sub-01", "", 1, 0.25, 3, 4.5, 9.0, 1, 2, 5.0, 10.0)
	b.Row(0, "sub-01", "", 2, 0.0, 0, nil, nil, 0, 0, nil, nil)
	if err := w.Append(ctx, b); err != nil {
		t.Fatal(err)
	}
	b.Row(0, "sub-02", "ses-1", 1, 1.0, 1, 10.0, 20.0, 0, 1, nil, nil)
	if err := w.Append(ctx, b); err != nil {
		t.Fatal(err)
	}
	empty := NewBatch(ExcludedInputs)
	rec := empty.Record()
	if err := w.AppendRecord(ctx, ExcludedInputs, rec); err != nil {
		t.Fatal(err)
	}
	rec.Release()
	if _, err := os.Stat(path(StateMetrics)); err == nil {
		t.Error("the final file exists before Commit")
	}
	if err := w.Commit(ctx); err != nil {
		t.Fatal(err)
	}
	if got := w.Rows(); got[StateMetrics] != 3 || got[ExcludedInputs] != 0 {
		t.Errorf("rows %v", got)
	}

	db, err := Open(tempPath(t), false, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	var n, shard, nulls int
	var occ float64
	q := fmt.Sprintf(`SELECT count(*), min(shard), count(*) FILTER (WHERE mean_dwell_seconds IS NULL), sum(occupancy)
		FROM read_parquet('%s', hive_partitioning = true)`, filepath.Join(dir, StateMetrics, "*", "*.parquet"))
	if err := db.QueryRow(q).Scan(&n, &shard, &nulls, &occ); err != nil {
		t.Fatal(err)
	}
	if n != 3 || shard != 2 || nulls != 1 || occ != 1.25 {
		t.Errorf("DuckDB reads %d rows, shard %d, %d NULLs, occupancy sum %v", n, shard, nulls, occ)
	}
	if err := db.QueryRow(fmt.Sprintf(`SELECT count(*) FROM read_parquet('%s')`, path(ExcludedInputs))).Scan(&n); err != nil || n != 0 {
		t.Errorf("empty table file: %d rows, %v", n, err)
	}

	// Merge into a warehouse: analysis_id replaced, rows unchanged.
	mw, err := Begin(ctx, db, "merged", "")
	if err != nil {
		t.Fatal(err)
	}
	err = ReadParquet(ctx, path(StateMetrics), 2, func(rec arrow.Record) error {
		if rec.NumRows() > 2 {
			t.Errorf("a record of %d rows with batch 2", rec.NumRows())
		}
		r, err := WithAnalysisID(rec, mw.ID)
		if err != nil {
			return err
		}
		defer r.Release()
		if got := r.Column(1).(*array.String).Value(0); got != rec.Column(1).(*array.String).Value(0) {
			t.Errorf("subject %q became %q", rec.Column(1).(*array.String).Value(0), got)
		}
		return mw.AppendRecord(ctx, StateMetrics, r)
	})
	if err != nil {
		t.Fatal(err)
	}
	if err := mw.Exec(ctx, `INSERT INTO analyses VALUES (?, ?, now(), 'test', '{}', 'in', 0, 2, 0, 0, 0)`, mw.ID, mw.Name); err != nil {
		t.Fatal(err)
	}
	if err := mw.Commit(ctx); err != nil {
		t.Fatal(err)
	}
	if err := db.QueryRow(`SELECT count(*) FROM state_metrics WHERE analysis_id = ? AND (session_id = 'ses-1') = (subject_id = 'sub-02')`, mw.ID).Scan(&n); err != nil || n != 3 {
		t.Errorf("merged rows with analysis_id %d: %d, %v", mw.ID, n, err)
	}
	noID := NewBatchSchema("x", arrow.NewSchema([]arrow.Field{{Name: "analysis", Type: arrow.PrimitiveTypes.Int32}}, nil))
	defer noID.Release()
	noID.Row(1)
	r := noID.Record()
	defer r.Release()
	if _, err := WithAnalysisID(r, 1); err == nil {
		t.Error("a record without analysis_id was accepted")
	}
}
