package schema

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/marcboeker/go-duckdb"
)

// layout1File writes a layout-1 warehouse from testdata/layout1.sql (main's
// DDL at layout 1, frozen), with one analysis row, after applying edit to
// the DDL text (to leave out a table or a column that a later layout adds).
func layout1File(t *testing.T, edit func(string) string) string {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("testdata", "layout1.sql"))
	if err != nil {
		t.Fatal(err)
	}
	ddl := string(b)
	if edit != nil {
		ddl = edit(ddl)
	}
	path := tempPath(t)
	c, err := duckdb.NewConnector(path, nil)
	if err != nil {
		t.Fatal(err)
	}
	db := sql.OpenDB(c)
	defer db.Close()
	insert := `INSERT INTO analyses (analysis_id, name, created_at, tool_version, parameters, input_dir, n_subjects, n_regions, n_states, n_windows, fit_windows)
			VALUES (1, 'old', now(), 'v0', '{}', '/in', 3, 5, 2, 24, 24)`
	if !strings.Contains(ddl, "fit_windows") {
		insert = strings.Replace(strings.Replace(insert, ", fit_windows)", ")", 1), ", 24)", ")", 1)
	}
	for _, q := range []string{ddl, `INSERT INTO schema_version VALUES (1, now())`, insert} {
		if _, err := db.Exec(q); err != nil {
			t.Fatal(err)
		}
	}
	return path
}

// TestUpgradeLayout1 upgrades layout-1 files in place: the missing tables
// and columns of the current DDL appear (new columns nullable, NULL for the
// old rows), the version becomes 2, and the old rows are kept. DuckDB's
// information_schema is the referee.
func TestUpgradeLayout1(t *testing.T) {
	ctx := context.Background()
	cases := map[string]func(string) string{
		"as main had it": nil,
		// A later layout's additions, simulated by removing them from layout 1.
		"without a table and a column": func(s string) string {
			i := strings.Index(s, "CREATE TABLE IF NOT EXISTS state_networks (")
			j := i + strings.Index(s[i:], ");") + 2
			s = s[:i] + s[j:]
			return strings.Replace(s, "    fit_windows  INTEGER NOT NULL     -- windows used to fit the states\n", "", 1)
		},
	}
	for name, edit := range cases {
		t.Run(name, func(t *testing.T) {
			path := layout1File(t, edit)
			ro, err := Open(path, true, nil)
			if err != nil {
				t.Fatal(err)
			}
			if err := CheckLayout(ctx, ro); !errors.Is(err, ErrOldLayout) || !strings.Contains(err.Error(), "topostate upgrade --db") {
				t.Errorf("CheckLayout on a layout-1 file: %v", err)
			}
			ro.Close()
			db, err := Open(path, false, nil)
			if err != nil {
				t.Fatal(err)
			}
			defer db.Close()
			from, err := Upgrade(ctx, db)
			if err != nil || from != 1 {
				t.Fatalf("Upgrade: from %d, %v", from, err)
			}
			var v int
			if err := db.QueryRow(`SELECT max(version) FROM schema_version`).Scan(&v); err != nil || v != Version {
				t.Errorf("version %d after the upgrade (%v), want %d", v, err, Version)
			}
			for _, tb := range DDLColumns() {
				for _, c := range tb.Columns {
					var n int
					db.QueryRow(`SELECT count(*) FROM information_schema.columns WHERE table_name = ? AND column_name = ?`, tb.Table, c.Name).Scan(&n)
					if n != 1 {
						t.Errorf("%s.%s missing after the upgrade", tb.Table, c.Name)
					}
				}
			}
			var name string
			var fit sql.NullInt64
			if err := db.QueryRow(`SELECT name, fit_windows FROM analyses WHERE analysis_id = 1`).Scan(&name, &fit); err != nil || name != "old" {
				t.Errorf("the old analysis row after the upgrade: %q, %v", name, err)
			}
			if edit != nil && fit.Valid {
				t.Errorf("an added column holds %v for an old row, want NULL", fit.Int64)
			}
			if edit == nil && (!fit.Valid || fit.Int64 != 24) {
				t.Errorf("fit_windows %v after the upgrade, want 24", fit)
			}
			// A second upgrade has nothing to do.
			if from, err := Upgrade(ctx, db); err != nil || from != Version {
				t.Errorf("second Upgrade: from %d, %v", from, err)
			}
		})
	}
}

// TestDDLColumnsCoverDDL: the column parser sees every CREATE TABLE and as
// many columns as the dictionary parser (two parsers of one text).
func TestDDLColumnsCoverDDL(t *testing.T) {
	tables := DDLColumns()
	if got, want := len(tables), strings.Count(ddlV1, "CREATE TABLE IF NOT EXISTS"); got != want {
		t.Fatalf("%d tables parsed, DDL has %d", got, want)
	}
	dict := Dictionary()
	for i, tb := range tables {
		if tb.Table != dict[i].Name || len(tb.Columns) != len(dict[i].Columns) {
			t.Errorf("%s: %d columns parsed, dictionary has %s with %d", tb.Table, len(tb.Columns), dict[i].Name, len(dict[i].Columns))
		}
	}
}

// TestOpenRefusesOptionPaths: a '?' or '%' in a path would be read by the
// driver as connection settings (another file, other options); refused.
func TestOpenRefusesOptionPaths(t *testing.T) {
	dir := t.TempDir()
	for _, p := range []string{filepath.Join(dir, "w?access_mode=read_write.duckdb"), filepath.Join(dir, "w%zz.duckdb"), ""} {
		if _, err := Open(p, false, nil); err == nil {
			t.Errorf("Open(%q) succeeded", p)
		}
	}
	if ents, _ := os.ReadDir(dir); len(ents) != 0 {
		t.Errorf("a refused open created %d files", len(ents))
	}
}

// TestUpgradeLayout2 upgrades a layout-2 file (the current DDL without the
// core networks of layout 3) in place: core_betti_curves appears,
// state_networks gains core_timepoints, NULL for the old rows, and the old
// rows are kept. DuckDB's information_schema is the referee.
func TestUpgradeLayout2(t *testing.T) {
	ddl := DDL()
	i := strings.Index(ddl, "CREATE TABLE IF NOT EXISTS core_betti_curves (")
	j := i + strings.Index(ddl[i:], "\n);") + 3
	ddl = ddl[:i] + ddl[j:]
	col := "    tree_weight DOUBLE NOT NULL,   -- total weight of the maximum spanning tree\n"
	k := strings.Index(ddl, col)
	end := k + len(col) + strings.Index(ddl[k+len(col):], "\n") + 1
	if i < 0 || k < 0 {
		t.Fatal("the DDL no longer has the layout-3 additions this test removes")
	}
	ddl = ddl[:k] + "    tree_weight DOUBLE NOT NULL\n" + ddl[end:]
	db := upgradedFrom(t, ddl, 2, `INSERT INTO state_networks VALUES (1, 'sub-01', '', 1, 10, 0.2, 1.5)`)
	for _, tc := range []struct{ table, column string }{{"core_betti_curves", "betti"}, {"state_networks", "core_timepoints"}} {
		var n int
		db.QueryRow(`SELECT count(*) FROM information_schema.columns WHERE table_name = ? AND column_name = ?`, tc.table, tc.column).Scan(&n)
		if n != 1 {
			t.Errorf("%s.%s missing after the upgrade", tc.table, tc.column)
		}
	}
	var core sql.NullInt64
	var windows int
	if err := db.QueryRow(`SELECT n_windows, core_timepoints FROM state_networks`).Scan(&windows, &core); err != nil || windows != 10 || core.Valid {
		t.Errorf("the old state_networks row after the upgrade: %d windows, core %v, %v", windows, core, err)
	}
}

// TestUpgradeLayout3: a layout-3 file (the current DDL without layout 4's
// complete-run dwell columns of state_metrics) upgrades in place to layout
// 4: the four columns appear, NULL for the old rows, and the old values
// are kept.
func TestUpgradeLayout3(t *testing.T) {
	ddl := ddlV1
	for _, c := range []string{"n_complete_dwells", "n_censored_dwells", "complete_dwell_windows", "complete_dwell_seconds"} {
		i := strings.Index(ddl, "    "+c+" ")
		if i < 0 {
			t.Fatalf("the DDL no longer has %s", c)
		}
		j := i + strings.Index(ddl[i:], "\n") + 1
		ddl = ddl[:i] + ddl[j:]
	}
	// The last column left now ends with a comma before ");".
	ddl = strings.Replace(ddl, "mean_dwell_seconds DOUBLE,", "mean_dwell_seconds DOUBLE ", 1)
	db := upgradedFrom(t, ddl, 3, `INSERT INTO state_metrics VALUES (1, 's1', '', 1, 0.5, 3, 4.0, 8.0)`)
	var v int
	if err := db.QueryRow(`SELECT max(version) FROM schema_version`).Scan(&v); err != nil || v != 4 || Version != 4 {
		t.Errorf("version %d after the upgrade (%v), want 4", v, err)
	}
	var n, nc sql.NullInt64
	var dw, cs sql.NullFloat64
	if err := db.QueryRow(`SELECT n_dwells, n_complete_dwells, mean_dwell_seconds, complete_dwell_seconds FROM state_metrics`).Scan(&n, &nc, &dw, &cs); err != nil {
		t.Fatal(err)
	}
	if n.Int64 != 3 || dw.Float64 != 8 || nc.Valid || cs.Valid {
		t.Errorf("old row after the upgrade: n_dwells %v mean %v complete %v %v; want 3, 8, NULL, NULL", n, dw, nc, cs)
	}
}

// TestUpgradeLayout3Surrogates upgrades a layout-3 file (the current DDL without the
// surrogate_tests table of layout 4) in place: the table appears and the
// old rows are kept. DuckDB's information_schema is the referee.
func TestUpgradeLayout3Surrogates(t *testing.T) {
	ddl := DDL()
	i := strings.Index(ddl, "CREATE TABLE IF NOT EXISTS surrogate_tests (")
	if i < 0 {
		t.Fatal("the DDL no longer has the layout-4 table this test removes")
	}
	j := i + strings.Index(ddl[i:], "\n);") + 3
	ddl = ddl[:i] + ddl[j:]
	db := upgradedFrom(t, ddl, 3, `INSERT INTO state_networks VALUES (1, 'sub-01', '', 1, 10, 0.2, 1.5, NULL)`)
	var n, rows int
	db.QueryRow(`SELECT count(*) FROM information_schema.columns WHERE table_name = 'surrogate_tests'`).Scan(&n)
	db.QueryRow(`SELECT count(*) FROM state_networks`).Scan(&rows)
	if n != 13 || rows != 1 {
		t.Errorf("after the upgrade: surrogate_tests has %d columns (want 13), state_networks %d rows (want 1)", n, rows)
	}
}

// upgradedFrom writes a file of layout `from` with ddl and the rows of
// inserts, opens it and upgrades it in place (schema.Upgrade must report
// `from`), and returns the open database, closed when the test ends.
func upgradedFrom(t *testing.T, ddl string, from int, inserts ...string) *sql.DB {
	t.Helper()
	path := tempPath(t)
	c, err := duckdb.NewConnector(path, nil)
	if err != nil {
		t.Fatal(err)
	}
	raw := sql.OpenDB(c)
	for _, q := range append([]string{ddl, fmt.Sprintf("INSERT INTO schema_version VALUES (%d, now())", from)}, inserts...) {
		if _, err := raw.Exec(q); err != nil {
			raw.Close()
			t.Fatalf("%v\n%s", err, q)
		}
	}
	raw.Close()
	db, err := Open(path, false, nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	if got, err := Upgrade(context.Background(), db); err != nil || got != int64(from) {
		t.Fatalf("Upgrade: from %d, %v; want from %d", got, err, from)
	}
	return db
}
