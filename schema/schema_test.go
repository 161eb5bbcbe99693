package schema

import (
	"context"
	"path/filepath"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
)

func tempPath(t *testing.T) string { return filepath.Join(t.TempDir(), "w.duckdb") }

// duckType maps an Arrow type to the DuckDB type the DDL must declare.
func duckType(t arrow.DataType) string {
	switch t.ID() {
	case arrow.INT8:
		return "TINYINT"
	case arrow.INT16:
		return "SMALLINT"
	case arrow.INT32:
		return "INTEGER"
	case arrow.INT64:
		return "BIGINT"
	case arrow.FLOAT64:
		return "DOUBLE"
	case arrow.STRING:
		return "VARCHAR"
	case arrow.BOOL:
		return "BOOLEAN"
	}
	return t.String()
}

// The Arrow schemas and the DDL are written separately; DuckDB's own
// information_schema is the referee that they agree column for column.
func TestArrowSchemasMatchDDL(t *testing.T) {
	path := tempPath(t)
	db, err := Open(path, false, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	ctx := context.Background()
	conn, err := db.Conn(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	if err := Migrate(ctx, conn); err != nil {
		t.Fatal(err)
	}
	for table, s := range tableSchemas {
		rows, err := conn.QueryContext(ctx, `SELECT column_name, data_type, is_nullable FROM information_schema.columns
			WHERE table_name = ? ORDER BY ordinal_position`, table)
		if err != nil {
			t.Fatal(err)
		}
		var got []string
		for rows.Next() {
			var n, ty, null string
			if err := rows.Scan(&n, &ty, &null); err != nil {
				t.Fatal(err)
			}
			got = append(got, n+" "+ty+" "+null)
		}
		rows.Close()
		var want []string
		for _, fl := range s.Fields() {
			null := "NO"
			if fl.Nullable {
				null = "YES"
			}
			want = append(want, fl.Name+" "+duckType(fl.Type)+" "+null)
		}
		if strings.Join(got, ", ") != strings.Join(want, ", ") {
			t.Errorf("%s:\n DDL   %v\n Arrow %v", table, got, want)
		}
	}
}

func TestWriterCommitAndRollback(t *testing.T) {
	path := tempPath(t)
	ctx := context.Background()
	db, err := Open(path, false, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()

	write := func(name string, commit bool) {
		w, err := Begin(ctx, db, name, "")
		if err != nil {
			t.Fatal(err)
		}
		b := NewBatch(Regions)
		b.Row(w.ID, 1, 1, "left", false)
		b.Row(w.ID, nil, 2, "right", true)
		if err := w.Append(ctx, b); err != nil {
			t.Fatal(err)
		}
		if err := w.Exec(ctx, `INSERT INTO analyses VALUES (?, ?, now(), 'test', '{}', 'in', 0, 2, 0, 0, 0)`, w.ID, w.Name); err != nil {
			t.Fatal(err)
		}
		if commit {
			if err := w.Commit(ctx); err != nil {
				t.Fatal(err)
			}
		} else {
			w.Rollback()
		}
	}
	write("first", true)
	write("second", false)
	var n int
	if err := db.QueryRow(`SELECT count(*) FROM regions`).Scan(&n); err != nil {
		t.Fatal(err)
	}
	if n != 2 {
		t.Fatalf("regions rows = %d after one commit and one rollback, want 2", n)
	}
	if _, err := Begin(ctx, db, "first", ""); err == nil || !strings.Contains(err.Error(), "already exists") {
		t.Fatalf("reusing a name: err = %v, want 'already exists'", err)
	}
}
