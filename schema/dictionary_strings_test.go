package schema

import (
	"context"
	"fmt"
	"path/filepath"
	"strings"
	"testing"
)

// longRows are the rows per subject-state of the two long subjects.
var longRows = [2]int{3000, 20}

// writeEvents writes the same filtration events into a new warehouse at
// path, with the tables in dict inserted under force_compression
// 'dictionary' (nil: DuckDB's automatic choice everywhere), and commits.
func writeEvents(t *testing.T, path string, dict map[string]bool) {
	t.Helper()
	defer func(d map[string]bool) { dictionaryStrings = d }(dictionaryStrings)
	dictionaryStrings = dict
	ctx := context.Background()
	db, err := Open(path, false, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	w, err := Begin(ctx, db, "events", "")
	if err != nil {
		t.Fatal(err)
	}
	defer w.Rollback()
	if err := w.Exec(ctx, "SET threads = 1"); err != nil { // as ingest does
		t.Fatal(err)
	}
	// Several full row groups (DuckDB's row groups hold 122,880 rows; a
	// full one is compressed during the insert): realistic subjects first.
	b := NewBatch(FiltrationEvts)
	fillEvents(b, w.ID, 0, 6)
	if err := w.Append(ctx, b); err != nil {
		t.Fatal(err)
	}
	// Then strings that suit no dictionary, in full row groups: subjects
	// longer than a string block (DuckDB keeps strings over 4 KiB in
	// overflow blocks) and one of 300,000 bytes, then one distinct,
	// non-ASCII subject per row over more than two row groups, with empty
	// sessions.
	for i, n := range []int{5000, 300000} {
		long := "sub-" + strings.Repeat(string(rune('a'+i)), n)
		for s := 1; s <= 2; s++ {
			b.AppendEvents(w.ID, long, "ses-"+long, s, 1, benchValues(longRows[i], n+s))
		}
	}
	for i := range 260000 {
		b.AppendEvents(w.ID, fmt.Sprintf("sub-ünïcødé-%07d", i), "", 1+i%3, i%2, []float64{float64(i) / 260000})
	}
	if err := w.Append(ctx, b); err != nil {
		t.Fatal(err)
	}
	var setting string
	if err := w.QueryRow(ctx, `SELECT current_setting('force_compression')::VARCHAR`, nil, &setting); err != nil {
		t.Fatal(err)
	}
	if !strings.EqualFold(setting, "auto") {
		t.Errorf("force_compression is %q after the insert, want it reset to auto", setting)
	}
	if err := w.Exec(ctx, `INSERT INTO analyses VALUES (?, ?, now(), 'test', '{}', 'in', 0, 1, 0, 0, 0)`, w.ID, w.Name); err != nil {
		t.Fatal(err)
	}
	if err := w.Commit(ctx); err != nil {
		t.Fatal(err)
	}
}

// A warehouse written with dictionary compression forced on
// filtration_events holds exactly the rows of one written with DuckDB's
// automatic choice: no row of either is missing from the other, counted
// with multiplicity (EXCEPT ALL, the SQL standard's multiset difference,
// as DuckDB documents it under "Set Operations"), and the counts agree.
func TestDictionaryStringsSameRows(t *testing.T) {
	dir := t.TempDir()
	auto, dict := filepath.Join(dir, "auto.duckdb"), filepath.Join(dir, "dict.duckdb")
	writeEvents(t, auto, nil)
	writeEvents(t, dict, map[string]bool{FiltrationEvts: true})
	db, err := Open(auto, false, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if _, err := db.Exec(`ATTACH '` + strings.ReplaceAll(dict, "'", "''") + `' AS d (READ_ONLY)`); err != nil {
		t.Fatal(err)
	}
	var nAuto, nDict, missing, extra int64
	q := `SELECT (SELECT count(*) FROM main.filtration_events), (SELECT count(*) FROM d.filtration_events),
		(SELECT count(*) FROM (FROM main.filtration_events EXCEPT ALL FROM d.filtration_events)),
		(SELECT count(*) FROM (FROM d.filtration_events EXCEPT ALL FROM main.filtration_events))`
	if err := db.QueryRow(q).Scan(&nAuto, &nDict, &missing, &extra); err != nil {
		t.Fatal(err)
	}
	want := int64(6*benchStates*(benchDim0+benchDim1) + 260000 + 2*(longRows[0]+longRows[1]))
	if nAuto != want || nDict != want || missing != 0 || extra != 0 {
		t.Fatalf("rows: automatic %d, forced dictionary %d (want %d); %d rows of the first missing from the second, %d extra",
			nAuto, nDict, want, missing, extra)
	}
	// The setting did apply, and only during the inserts: DuckDB's own
	// choice for a full row group of distinct subjects is FSST, and the
	// forced file has none but in its last row group, which is not full
	// and is compressed at COMMIT, after the inserts.
	fsst := func(schema string) int {
		var n int
		q := strings.ReplaceAll(`SELECT count(*) FILTER (compression = 'FSST' AND row_group_id < (SELECT max(row_group_id) FROM pragma_storage_info('@.filtration_events')))
			FROM pragma_storage_info('@.filtration_events') WHERE column_name = 'subject_id'`, "@", schema)
		if err := db.QueryRow(q).Scan(&n); err != nil {
			t.Fatal(err)
		}
		return n
	}
	if a, d := fsst("main"), fsst("d"); a == 0 || d != 0 {
		t.Errorf("FSST segments of subject_id before the last row group: %d in the automatic file (want some), %d in the forced one (want none)", a, d)
	}
}
