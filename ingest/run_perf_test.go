package ingest

import (
	"database/sql"
	"fmt"
	"path/filepath"
	"slices"
	"testing"
)

// With --scan-restarts below --restarts the picked k gets the remaining
// restarts, so its states must be exactly those of a fit with a fixed k and
// all the restarts (compute.KMeansOptions.FirstRestart; restart r always
// draws from the same generator). Also checks the phase and worker times
// the benchmark harness reads.
func TestScanRestartsFinalFitIsFullFit(t *testing.T) {
	dir := makeCohort(t, 5, 10, 160, 3, 21)
	tmp := t.TempDir()
	o := testOptions(dir)
	o.States, o.StatesMin, o.StatesMax, o.Restarts, o.ScanRestarts = 0, 2, 5, 3, 1
	scanDB := filepath.Join(tmp, "scan.duckdb")
	sum := ingestInto(t, scanDB, o)
	var names []string
	for _, p := range sum.PhaseTimes {
		names = append(names, p.Phase)
	}
	if want := []string{"sample windows", "fit states", "subjects", "write", "commit"}; !slices.Equal(names, want) {
		t.Errorf("phases %v, want %v", names, want)
	}
	parts := map[string]bool{}
	for _, p := range sum.WorkerTimes {
		parts[p.Phase] = true
	}
	for _, p := range []string{"sample: read", "sample: windows and peaks", "fit: elbow scan", "fit: final restarts", "subjects: windows, assign and sums", "write: inserts"} {
		if !parts[p] {
			t.Errorf("worker times lack %q: %v", p, sum.WorkerTimes)
		}
	}
	if n := len(sum.Fits); n != 5 || !sum.Fits[4].Final || sum.Fits[4].Restarts != 2 || sum.Fits[0].Restarts != 1 {
		t.Errorf("fits %+v, want 4 scan fits with 1 restart and a final one with 2", sum.Fits)
	}

	fixed := o
	fixed.States, fixed.ScanRestarts = sum.States, 0
	fixedDB := filepath.Join(tmp, "fixed.duckdb")
	fsum := ingestInto(t, fixedDB, fixed)
	// The same restarts ran: the scan's restart 0 at k plus the final
	// restarts 1..2 took as many Lloyd iterations as restarts 0..2.
	scanIters := sum.Fits[sum.States-o.StatesMin].Iterations + sum.Fits[4].Iterations
	if len(fsum.Fits) != 1 || fsum.Fits[0].Iterations != scanIters {
		t.Errorf("fixed-k fit %+v; scan fit and final restarts took %d iterations", fsum.Fits, scanIters)
	}

	db, err := sql.Open("duckdb", "")
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if _, err := db.Exec(fmt.Sprintf(`ATTACH '%s' AS a (READ_ONLY); ATTACH '%s' AS b (READ_ONLY)`, scanDB, fixedDB)); err != nil {
		t.Fatal(err)
	}
	for _, table := range []string{"state_centroids", "state_sequence"} {
		q := fmt.Sprintf(`SELECT (SELECT count(*) FROM (SELECT * FROM a.%[1]s EXCEPT ALL SELECT * FROM b.%[1]s))
			+ (SELECT count(*) FROM (SELECT * FROM b.%[1]s EXCEPT ALL SELECT * FROM a.%[1]s)), (SELECT count(*) FROM a.%[1]s)`, table)
		var diff, n int
		if err := db.QueryRow(q).Scan(&diff, &n); err != nil {
			t.Fatal(err)
		}
		if diff != 0 || n == 0 {
			t.Errorf("%s: %d rows differ between the scan's final fit and the fixed-k fit (%d rows)", table, diff, n)
		}
	}
}
