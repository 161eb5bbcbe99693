package schema

import (
	"context"
	"flag"
	"os"
	"path/filepath"
	"testing"
)

var update = flag.Bool("update", false, "rewrite SCHEMA.md from the DDL")

// The dictionary parsed from the DDL comments must list exactly the
// columns DuckDB creates from the same DDL, each with a description.
func TestDictionaryMatchesDuckDB(t *testing.T) {
	db, err := Open(filepath.Join(t.TempDir(), "d.duckdb"), false, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	ctx := context.Background()
	conn, _ := db.Conn(ctx)
	defer conn.Close()
	if err := Migrate(ctx, conn); err != nil {
		t.Fatal(err)
	}
	docs := Dictionary()
	if len(docs) < 10 {
		t.Fatalf("only %d tables parsed from the DDL", len(docs))
	}
	for _, td := range docs {
		rows, err := conn.QueryContext(ctx, `SELECT column_name, data_type FROM information_schema.columns WHERE table_name = ? ORDER BY ordinal_position`, td.Name)
		if err != nil {
			t.Fatal(err)
		}
		i := 0
		for rows.Next() {
			var n, ty string
			rows.Scan(&n, &ty)
			if i >= len(td.Columns) || td.Columns[i].Column != n || td.Columns[i].Type != ty {
				t.Errorf("%s column %d: DuckDB has %s %s, dictionary %+v", td.Name, i, n, ty, td.Columns)
				break
			}
			if td.Columns[i].Description == "" {
				t.Errorf("%s.%s has no description comment in v1.sql", td.Name, n)
			}
			i++
		}
		rows.Close()
		if i != len(td.Columns) {
			t.Errorf("%s: DuckDB has %d columns, dictionary %d", td.Name, i, len(td.Columns))
		}
	}
}

func TestSchemaDocUpToDate(t *testing.T) {
	want := Markdown()
	if *update {
		if err := os.WriteFile("SCHEMA.md", []byte(want), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	got, err := os.ReadFile("SCHEMA.md")
	if err != nil {
		t.Fatalf("%v (run go test ./schema -update)", err)
	}
	if string(got) != want {
		t.Error("schema/SCHEMA.md is stale; run go test ./schema -update")
	}
}
