package schema

import (
	"context"
	"testing"

	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
)

// Every Arrow buffer of an inserted record is released once the insert is
// done: the writer must not keep the rows it handed to DuckDB (DuckDB copies
// them), or an ingest holds every row it ever wrote until it ends. Checked
// with Arrow's own accounting (memory.CheckedAllocator counts the bytes
// allocated and not yet freed through it).
func TestAppendReleasesRecords(t *testing.T) {
	ctx := context.Background()
	db, err := Open(tempPath(t), false, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	w, err := Begin(ctx, db, "first", "")
	if err != nil {
		t.Fatal(err)
	}
	defer w.Rollback()
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	for round := range 3 {
		rb := array.NewRecordBuilder(mem, tableSchemas[FiltrationEvts])
		b := &Batch{Table: FiltrationEvts, b: rb}
		for i := range 10000 {
			b.Row(w.ID, "sub-01", "", 1, i%2, float64(i)/10000)
		}
		rec := b.Record()
		if err := w.AppendRecord(ctx, FiltrationEvts, rec); err != nil {
			t.Fatal(err)
		}
		rec.Release()
		rb.Release()
		if n := mem.CurrentAlloc(); n != 0 {
			t.Fatalf("round %d: %d bytes of Arrow buffers still held after the insert", round, n)
		}
	}
	var n int
	if err := w.QueryRow(ctx, `SELECT count(*) FROM filtration_events WHERE analysis_id = ?`, []any{w.ID}, &n); err != nil {
		t.Fatal(err)
	}
	if n != 30000 {
		t.Fatalf("%d rows inserted, want 30000", n)
	}
}
