package queries

import (
	"context"
	"database/sql"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"testing"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/ingest"
)

// The test warehouse: an invented cohort of 17 subjects (the simulator's
// groups A and B labelled "day" and "night", with night given stickier
// states, and one "pilot" subject that no group query may use), ingested
// twice: analysis 1 "first" (window 20) and analysis 2 "second" (window 26).
var (
	warehousePath string
	cohortDir     string
)

const (
	nSubjects = 17
	nRegions  = 10
)

func TestMain(m *testing.M) {
	if path := os.Getenv(holdLockEnv); path != "" {
		holdLock(path)
		return
	}
	dir, err := os.MkdirTemp("", "queries-test-")
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(1)
	}
	code := 1
	if err := buildWarehouse(dir); err != nil {
		fmt.Fprintln(os.Stderr, "building the test warehouse:", err)
	} else {
		code = m.Run()
	}
	os.RemoveAll(dir)
	os.Exit(code)
}

func buildWarehouse(dir string) error {
	cohortDir = filepath.Join(dir, "cohort")
	warehousePath = filepath.Join(dir, "w.duckdb")
	spec := compute.CohortSpec{Subjects: nSubjects, Regions: nRegions, Timepoints: 180, States: 3, TR: 2,
		Stickiness: 0.9, GroupEffect: 0.07, Offset: 700, Seed: 41}
	subs, err := compute.SimulateCohort(spec)
	if err != nil {
		return err
	}
	names := make([]string, nRegions)
	for j := range names {
		names[j] = fmt.Sprintf("roi%02d", j+1)
	}
	ids := make([]string, len(subs))
	series := make([]compute.Series, len(subs))
	rows := make([]ingest.SyntheticParticipant, len(subs))
	for i, s := range subs {
		ids[i], series[i] = s.ID, s.Series
		group := map[string]string{"A": "day", "B": "night"}[s.Group]
		if i == nSubjects-1 {
			group = "pilot"
		}
		age := strconv.Itoa(25 + (i*7)%30)
		if i == 4 {
			age = "n/a"
		}
		sleep := strconv.FormatFloat(5+float64((i*5)%9)/2, 'f', 1, 64)
		rows[i] = ingest.SyntheticParticipant{ID: s.ID, Cells: []string{group, age, sleep}}
	}
	// "sleep hours" has a space: a column name that could not be pasted
	// into SQL unquoted.
	if err := ingest.WriteCohort(cohortDir, names, 2, ids, series, []string{"group", "age", "sleep hours"}, rows); err != nil {
		return err
	}
	for _, a := range []struct {
		name   string
		window int
	}{{"first", 20}, {"second", 26}} {
		o := ingest.Defaults()
		o.Input, o.Window, o.States, o.Restarts, o.Grid, o.Seed, o.Analysis = cohortDir, a.window, 3, 3, "-0.4:1:29", 5, a.name
		if a.name == "first" {
			o.Surrogates = 19 // surrogate_summary reads it
		}
		if _, err := ingest.IntoFile(context.Background(), warehousePath, o, nil); err != nil {
			return err
		}
	}
	return nil
}

// openWarehouse opens the test warehouse read-only through Open.
func openWarehouse(t *testing.T) *DB {
	t.Helper()
	d, err := Open(context.Background(), warehousePath)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { d.Close() })
	return d
}

// rows reads a whole result into maps by column name.
func readAll(t *testing.T, rows *sql.Rows) []map[string]any {
	t.Helper()
	defer rows.Close()
	cols, err := rows.Columns()
	if err != nil {
		t.Fatal(err)
	}
	var out []map[string]any
	for rows.Next() {
		v := make([]any, len(cols))
		p := make([]any, len(cols))
		for i := range v {
			p[i] = &v[i]
		}
		if err := rows.Scan(p...); err != nil {
			t.Fatal(err)
		}
		m := map[string]any{}
		for i, c := range cols {
			m[c] = v[i]
		}
		out = append(out, m)
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	return out
}

// runBundled runs a bundled query with params and returns its rows.
func runBundled(t *testing.T, d *DB, name string, params map[string]string) []map[string]any {
	t.Helper()
	q, err := Lookup(FS, name)
	if err != nil {
		t.Fatal(err)
	}
	rows, err := Run(context.Background(), d.Conn, q, params)
	if err != nil {
		t.Fatalf("%s: %v", name, err)
	}
	return readAll(t, rows)
}

// raw runs a plain SELECT on the raw tables (no aggregation) for the
// independent Go computations.
func raw(t *testing.T, d *DB, q string, args ...any) []map[string]any {
	t.Helper()
	rows, err := d.Conn.QueryContext(context.Background(), q, args...)
	if err != nil {
		t.Fatal(err)
	}
	return readAll(t, rows)
}

func num(v any) float64 {
	switch x := v.(type) {
	case float64:
		return x
	case float32:
		return float64(x)
	case int8:
		return float64(x)
	case int16:
		return float64(x)
	case int32:
		return float64(x)
	case int64:
		return float64(x)
	}
	panic(fmt.Sprintf("num: %T", v))
}
