package schema

import (
	"context"
	"errors"
	"path/filepath"
	"testing"
)

// A Commit whose context has ended must roll back, say so, and leave
// neither the analysis nor its Parquet files: the command reports
// "nothing from this run was written" on exactly this error.
func TestCommitAfterCancel(t *testing.T) {
	path := tempPath(t)
	pq := filepath.Join(t.TempDir(), "parquet")
	db, err := Open(path, false, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	// A first analysis, committed, so the tables exist and hold a row.
	w0, err := Begin(context.Background(), db, "kept", "")
	if err != nil {
		t.Fatal(err)
	}
	if err := w0.Exec(context.Background(), `INSERT INTO analyses VALUES (?, ?, now(), 'test', '{}', 'in', 0, 1, 0, 0, 0)`, w0.ID, w0.Name); err != nil {
		t.Fatal(err)
	}
	if err := w0.Commit(context.Background()); err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	w, err := Begin(ctx, db, "cancelled", pq)
	if err != nil {
		t.Fatal(err)
	}
	b := NewBatch(Regions)
	b.Row(w.ID, 1, 1, "left", false)
	if err := w.Append(ctx, b); err != nil {
		t.Fatal(err)
	}
	if err := w.Exec(ctx, `INSERT INTO analyses VALUES (?, ?, now(), 'test', '{}', 'in', 0, 1, 0, 0, 0)`, w.ID, w.Name); err != nil {
		t.Fatal(err)
	}
	// Parquet files are written under a temporary name of their own
	// (.regions.parquet.*.partial) until the commit.
	if m, _ := filepath.Glob(filepath.Join(pq, ".regions.parquet.*.partial")); len(m) != 1 {
		t.Fatalf("the Parquet copy was not started: %v", m)
	}
	cancel()
	if err := w.Commit(ctx); !errors.Is(err, context.Canceled) {
		t.Fatalf("Commit after cancel: %v, want context.Canceled", err)
	}
	w.Rollback() // what a caller's deferred cleanup does: harmless now
	for q, want := range map[string]int{`SELECT count(*) FROM analyses`: 1, `SELECT count(*) FROM regions`: 0} {
		var n int
		if err := db.QueryRow(q).Scan(&n); err != nil {
			t.Fatal(err)
		}
		if n != want {
			t.Errorf("%s = %d after a cancelled commit, want %d", q, n, want)
		}
	}
	if left, _ := filepath.Glob(filepath.Join(pq, "*")); len(left) > 0 {
		t.Errorf("Parquet files of the cancelled analysis remain: %v", left)
	}
	// The file takes the next analysis as usual.
	w2, err := Begin(context.Background(), db, "cancelled", "")
	if err != nil {
		t.Fatal(err)
	}
	w2.Rollback()
}
