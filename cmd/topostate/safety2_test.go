//go:build unix

package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// More regression tests of issue 13's classes (data safety), through the
// real binary: exit code, message, and every file the command was not
// asked to write byte-identical afterwards (hashTree, sameTree).

// TestReservedAnalysisNames (class 9): a name that reads as an id or the
// keyword latest, an empty or blank name, surrounding spaces and control
// characters are refused by ingest and stage merge before anything is
// computed or opened (exit 2), and the warehouse is byte-identical.
func TestReservedAnalysisNames(t *testing.T) {
	tmp := t.TempDir()
	db := copyDB(t, tmp)
	abs, _ := filepath.Abs(goodCohort)
	work := filepath.Join(tmp, "work")
	mustRun(t, append([]string{"stage", "plan", "--work", work, "--shards", "1"}, expand("--input {cohort} --window 5 --states 2", abs, "")...)...)
	mustRun(t, "stage", "sample", "--work", work, "--shard", "1/1", "-q")
	mustRun(t, "stage", "fit", "--work", work, "-q")
	mustRun(t, "stage", "compute", "--work", work, "--shard", "1/1", "-q")
	before := hashTree(t, tmp)
	for _, c := range []struct{ name, want string }{
		{"2", "reads as an analysis id"},
		{"007", "reads as an analysis id"},
		{"-1", "reads as an analysis id"},
		{"latest", "latest names the newest analysis"},
		{"LATEST", "latest names the newest analysis"},
		{"", "cannot be empty"},
		{"   ", "is blank"},
		{" rest", "leading or trailing spaces"},
		{"rest ", "leading or trailing spaces"},
		{"rest\x1b[2J", "holds a control character"},
		{"two\nlines", "holds a control character"},
	} {
		for _, args := range [][]string{
			append(expand(baseIngest, abs, db), "--analysis", c.name),
			{"stage", "merge", "--work", work, "--db", db, "-q", "--analysis", c.name},
		} {
			r := runCmd(t, cmdOpts{args: args})
			if r.code != 2 || !strings.Contains(r.stderr, c.want) || r.stdout != "" {
				t.Errorf("%s --analysis %q: exit %d (want 2), stderr %q (want %q)", args[0], c.name, r.code, r.stderr, c.want)
			}
			if strings.ContainsAny(r.stderr, "\x1b") {
				t.Errorf("%s --analysis %q: the control character was printed raw", args[0], c.name)
			}
		}
	}
	sameTree(t, "after the refused names", before, hashTree(t, tmp), nil)
	// A name with a digit and a letter is a name.
	if r := runCmd(t, cmdOpts{args: append(expand(baseIngest, abs, db), "--analysis", "2b")}); r.code != 0 {
		t.Errorf("--analysis 2b: exit %d: %s", r.code, r.stderr)
	}
}

// TestControlCharactersEscaped (class 9): names and input folders stored
// by another client (or an older version) with control characters print
// escaped in info and in the list of analyses of a failed lookup.
func TestControlCharactersEscaped(t *testing.T) {
	tmp := t.TempDir()
	db := copyDB(t, tmp)
	// (An UPDATE of the key-holding row trips DuckDB's index limits: the
	// row is written anew.)
	execSQL(t, db, "CREATE TEMP TABLE a AS SELECT * REPLACE ('bad' || chr(27) || '[31mred' AS name, 'in' || chr(10) || 'put' AS input_dir) FROM analyses",
		"DELETE FROM analyses", "INSERT INTO analyses SELECT * FROM a", "CHECKPOINT")
	for _, args := range [][]string{
		{"info", "--db", db},
		{"query", "--db", db, "subject_features", "--param", "analysis=nothing"},
	} {
		r := runCmd(t, cmdOpts{args: args})
		out := r.stdout + r.stderr
		if strings.Contains(out, "\x1b") || strings.Contains(out, "in\nput") {
			t.Errorf("%s printed a control character raw:\n%q", args[0], out)
		}
		if !strings.Contains(out, `bad\x1b[31mred`) {
			t.Errorf("%s: the name is not shown escaped:\n%q", args[0], out)
		}
	}
}

// readFileString is os.ReadFile for messages.
func readFileString(t *testing.T, p string) string {
	t.Helper()
	b, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

// TestSimulateNeverOverwrites (class 3): simulate --out into an existing
// cohort, or into any folder holding a file, is refused (exit 2, naming
// what is there) and the folder is byte-identical; there is no option to
// force it. A new or empty folder works.
func TestSimulateNeverOverwrites(t *testing.T) {
	tmp := t.TempDir()
	cohort := filepath.Join(tmp, "cohort")
	copyTree(t, goodCohort, cohort)
	notes := filepath.Join(tmp, "notes")
	if err := os.MkdirAll(notes, 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(notes, "readme.txt"), []byte("mine\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	before := hashTree(t, tmp)
	for _, c := range []struct {
		dir, want string
	}{
		{cohort, "is not empty (it holds participants.tsv, sub-01, sub-02, ...)"},
		{notes, "is not empty (it holds readme.txt)"},
		{filepath.Join(notes, "readme.txt"), "is a file, not a folder"},
	} {
		r := runCmd(t, cmdOpts{args: []string{"simulate", "--out", c.dir, "--subjects", "3", "--regions", "5", "--timepoints", "40", "--truth"}})
		if r.code != 2 || !strings.Contains(r.stderr, c.want) || r.stdout != "" {
			t.Errorf("simulate --out %s: exit %d (want 2)\nstderr: %s", c.dir, r.code, r.stderr)
		}
	}
	sameTree(t, "after simulate into existing folders", before, hashTree(t, tmp), nil)
	empty := filepath.Join(tmp, "empty")
	if err := os.Mkdir(empty, 0o755); err != nil {
		t.Fatal(err)
	}
	if r := runCmd(t, cmdOpts{args: []string{"simulate", "--out", empty, "--subjects", "3", "--regions", "5", "--timepoints", "40"}}); r.code != 0 {
		t.Errorf("simulate into an empty folder: exit %d: %s", r.code, r.stderr)
	}
	sameTree(t, "after simulate into a new folder", before, hashTree(t, tmp), func(p string) bool { return strings.HasPrefix(p, "empty"+string(filepath.Separator)) })
}

// TestDemoChecksEveryFile (class 3): demo --dir refuses a folder where any
// file it would write exists: the cohort folder (with anything in it), the
// warehouse, or the warehouse's .wal; the folder is byte-identical.
func TestDemoChecksEveryFile(t *testing.T) {
	for _, c := range []struct {
		file, want string
	}{
		{filepath.Join("cohort", "participants.tsv"), "is not empty (it holds participants.tsv)"},
		{filepath.Join("cohort", "sub-07", "func", "x.tsv"), "is not empty (it holds sub-07)"},
		{"demo.duckdb.wal", "demo.duckdb.wal exists already"},
		{"demo.duckdb", "demo.duckdb exists already"},
	} {
		dir := t.TempDir()
		p := filepath.Join(dir, c.file)
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p, []byte("a user's file\n"), 0o644); err != nil {
			t.Fatal(err)
		}
		before := hashTree(t, dir)
		r := runCmd(t, cmdOpts{args: []string{"demo", "--dir", dir, "-q"}})
		if r.code != 2 || !strings.Contains(r.stderr, c.want) {
			t.Errorf("demo --dir with %s: exit %d (want 2)\nstderr: %s", c.file, r.code, r.stderr)
		}
		sameTree(t, "demo beside "+c.file, before, hashTree(t, dir), nil)
	}
}

// TestParquetKeptOnFailure (class 3): an ingest with --parquet DIR that
// fails (a bad cohort; the checkpoint after the commit failing; an
// interrupt with the whole analysis written but not committed) leaves the
// Parquet files an earlier run wrote there byte-identical and adds no file.
func TestParquetKeptOnFailure(t *testing.T) {
	tmp := t.TempDir()
	db := copyDB(t, tmp)
	pq := filepath.Join(tmp, "parquet")
	abs, _ := filepath.Abs(goodCohort)
	if r := runCmd(t, cmdOpts{args: append(expand(baseIngest, abs, db), "--analysis", "first", "--parquet", pq)}); r.code != 0 {
		t.Fatalf("first ingest: exit %d: %s", r.code, r.stderr)
	}
	before := hashTree(t, pq)
	if len(before) < 5 {
		t.Fatalf("the first ingest wrote %d Parquet files", len(before))
	}
	bad := filepath.Join("..", "..", "testdata", "bad", "series-nan-cell", "cohort")
	badAbs, _ := filepath.Abs(bad)
	r := runCmd(t, cmdOpts{args: append(expand(baseIngest, badAbs, db), "--analysis", "second", "--parquet", pq)})
	if r.code != 1 {
		t.Errorf("bad cohort: exit %d: %s", r.code, r.stderr)
	}
	sameTree(t, "Parquet folder after a refused cohort", before, hashTree(t, pq), nil)

	r = runCmd(t, cmdOpts{args: append(expand(baseIngest, abs, db), "--analysis", "third", "--parquet", pq), env: []string{"TOPOSTATE_TEST_FAIL_CHECKPOINT=1"}})
	if r.code != 1 || !strings.Contains(r.stderr, "the Parquet files were not written") || !strings.Contains(r.stderr, pq+" is as it was") {
		t.Errorf("failing checkpoint: exit %d\nstderr: %s", r.code, r.stderr)
	}
	sameTree(t, "Parquet folder after a failed checkpoint", before, hashTree(t, pq), nil)
	if r := runCmd(t, cmdOpts{args: []string{"upgrade", "--db", db}}); r.code != 0 { // completes the checkpoint
		t.Fatalf("upgrade: exit %d: %s", r.code, r.stderr)
	}

	bg := start(t, append(expand(baseIngest, abs, db), "--analysis", "fourth", "--parquet", pq), "1m")
	bg.waitMarker(t)
	if err := bg.cmd.Process.Signal(os.Interrupt); err != nil {
		t.Fatal(err)
	}
	if st := bg.wait(); st.ExitCode() == 0 {
		t.Errorf("interrupted ingest exited 0")
	}
	sameTree(t, "Parquet folder after an interrupt before the commit", before, hashTree(t, pq), nil)
	if got := querySQL(t, db, `SELECT string_agg(name, ',' ORDER BY analysis_id) FROM analyses`); got != "baseline,first,third" {
		t.Errorf("analyses %s, want baseline,first,third", got)
	}
}

// TestUndefinedWindowStages (class 6): a series with a region that does
// not vary for a window's length, with --on-bad-subject skip, is left out
// alike by ingest and by stage plan, and the staged run (plan, sample,
// fit, compute, merge) gives the same rows as the single ingest: the
// computation never meets the undefined window. (The refusals without
// skip, and the skip of ingest, are corpus cases window-constant-*.)
func TestUndefinedWindowStages(t *testing.T) {
	tmp := t.TempDir()
	cohort, _ := filepath.Abs(filepath.Join("..", "..", "testdata", "bad", "window-constant-region", "cohort"))
	opts := []string{"--input", cohort, "--window", "5", "--states", "2", "--on-bad-subject", "skip"}
	single := filepath.Join(tmp, "single.duckdb")
	mustRun(t, append([]string{"ingest", "-q", "--db", single, "--analysis", "a"}, opts...)...)
	work := filepath.Join(tmp, "work")
	out := mustRun(t, append([]string{"stage", "plan", "--work", work, "--shards", "2"}, opts...)...)
	if !strings.Contains(out, "planned 2 series") || !strings.Contains(out, "(1 excluded)") {
		t.Errorf("stage plan with skip: %s", out)
	}
	for _, sh := range []string{"1/2", "2/2"} {
		mustRun(t, "stage", "sample", "--work", work, "--shard", sh, "-q")
	}
	mustRun(t, "stage", "fit", "--work", work, "-q")
	for _, sh := range []string{"1/2", "2/2"} {
		mustRun(t, "stage", "compute", "--work", work, "--shard", sh, "-q")
	}
	merged := filepath.Join(tmp, "merged.duckdb")
	mustRun(t, "stage", "merge", "--work", work, "--db", merged, "-q", "--analysis", "a")
	sameAnalysis(t, single, merged, "excluded_inputs", "inputs")
	if got := querySQL(t, merged, `SELECT count(*) FROM excluded_inputs WHERE reason LIKE '%region "node2" does not vary over time points 4..8%'`); got != "1" {
		t.Errorf("excluded_inputs of the staged run: %s rows with the reason", got)
	}
}

// TestStageIntegrity (class 8): one shard's file copied over another's,
// a changed file and an edited manifest are refused by merge (exit 1,
// naming the file and the stage to run again; the warehouse is not
// created); a shard whose lock another process holds is refused at once
// and its earlier mark kept; several runs of one shard at once leave files
// that match their mark, and merge then succeeds.
func TestStageIntegrity(t *testing.T) {
	tmp := t.TempDir()
	abs, _ := filepath.Abs(goodCohort)
	work := filepath.Join(tmp, "work")
	mustRun(t, append([]string{"stage", "plan", "--work", work, "--shards", "3"}, expand("--input {cohort} --window 5 --states 2", abs, "")...)...)
	for _, sh := range []string{"1/3", "2/3", "3/3"} {
		mustRun(t, "stage", "sample", "--work", work, "--shard", sh, "-q")
	}
	mustRun(t, "stage", "fit", "--work", work, "-q")
	for _, sh := range []string{"1/3", "2/3", "3/3"} {
		mustRun(t, "stage", "compute", "--work", work, "--shard", sh, "-q")
	}
	db := filepath.Join(tmp, "w.duckdb")
	merge := []string{"stage", "merge", "--work", work, "--db", db, "-q"}
	refused := func(what, want string) {
		t.Helper()
		r := runCmd(t, cmdOpts{args: merge})
		if r.code != 1 || !strings.Contains(r.stderr, want) || r.stdout != "" {
			t.Errorf("%s: merge exit %d (want 1)\nstderr: %s\nwant: %s", what, r.code, r.stderr, want)
		}
		if _, err := os.Stat(db); err == nil {
			t.Errorf("%s: merge left %s", what, db)
		}
	}
	seq := func(i int) string {
		return filepath.Join(work, "tables", "state_sequence", "shard="+string(rune('0'+i)), "data.parquet")
	}
	orig := readFileString(t, seq(2))

	copyFile(t, seq(1), seq(2))
	refused("shard 1's file over shard 2's", "is not the file stage compute --shard 2/3 wrote: it is a copy of tables/state_sequence/shard=1/data.parquet; run stage compute --shard 2/3 again")
	if err := os.WriteFile(seq(2), []byte(orig[:len(orig)-1]+"x"), 0o644); err != nil {
		t.Fatal(err)
	}
	refused("a changed file", "was changed after stage compute --shard 2/3 wrote it")
	os.Remove(seq(2))
	refused("a missing file", "is missing, though stage compute --shard 2/3 finished")
	if err := os.WriteFile(seq(2), []byte(orig), 0o644); err != nil {
		t.Fatal(err)
	}

	manifest := filepath.Join(work, "manifest.json")
	m := readFileString(t, manifest)
	if !strings.Contains(m, `"window": 5`) {
		t.Fatalf("manifest without the window: %s", m)
	}
	if err := os.WriteFile(manifest, []byte(strings.Replace(m, `"window": 5`, `"window": 6`, 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	refused("an edited manifest", "manifest.json was changed after it was planned")
	if r := runCmd(t, cmdOpts{args: []string{"stage", "compute", "--work", work, "--shard", "1/3", "-q"}}); r.code != 1 || !strings.Contains(r.stderr, "was changed after it was planned") {
		t.Errorf("compute under an edited manifest: exit %d: %s", r.code, r.stderr)
	}
	if err := os.WriteFile(manifest, []byte(m), 0o644); err != nil {
		t.Fatal(err)
	}

	// Another process holds shard 1's compute lock.
	mark := filepath.Join(work, "done", "compute-1.json")
	markBefore := readFileString(t, mark)
	unlock := holdStageLock(t, filepath.Join(work, "done", ".compute-1.lock"))
	r := runCmd(t, cmdOpts{args: []string{"stage", "compute", "--work", work, "--shard", "1/3", "-q"}})
	if r.code != 1 || !strings.Contains(r.stderr, "stage compute --shard 1/3 is running in another process") {
		t.Errorf("compute while the shard is locked: exit %d: %s", r.code, r.stderr)
	}
	unlock()
	if readFileString(t, mark) != markBefore {
		t.Errorf("the refused run changed the shard's done mark")
	}

	// Four runs of shard 2 at once: each finishes or is refused; the mark
	// left matches the files left, and merge succeeds.
	const n = 4
	codes := make(chan result, n)
	for range n {
		go func() {
			codes <- runCmd(t, cmdOpts{args: []string{"stage", "compute", "--work", work, "--shard", "2/3", "-q"}})
		}()
	}
	ok := 0
	for range n {
		r := <-codes
		switch {
		case r.code == 0:
			ok++
		case r.code == 1 && strings.Contains(r.stderr, "is running in another process"):
		default:
			t.Errorf("a concurrent run of shard 2: exit %d: %s", r.code, r.stderr)
		}
	}
	if ok == 0 {
		t.Fatal("no concurrent run of shard 2 finished")
	}
	if r := runCmd(t, cmdOpts{args: append(merge, "--analysis", "merged")}); r.code != 0 {
		t.Fatalf("merge after the concurrent runs: exit %d: %s", r.code, r.stderr)
	}
	if got := querySQL(t, db, `SELECT count(DISTINCT subject_id) || '/' || count(*) FROM inputs`); got != "3/3" {
		t.Errorf("inputs after merge: %s, want 3 subjects once each", got)
	}
}

// TestPoisonedWarehouse (class 4): a warehouse in which an earlier version
// stored a participants.tsv header cell in Latin-1 as it was (a column
// name that is not UTF-8, which stops DuckDB's catalog views). Every
// command says what to do (topostate upgrade) instead of failing without a
// way back, and leaves the file byte-identical; upgrade renames the column
// to UTF-8, keeping its values, after which the commands work.
func TestPoisonedWarehouse(t *testing.T) {
	tmp := t.TempDir()
	db := copyDB(t, tmp)
	execSQL(t, db, "ALTER TABLE subjects ADD COLUMN \"\xe2ge\" BIGINT", "UPDATE subjects SET \"\xe2ge\" = 3", "CHECKPOINT")
	abs, _ := filepath.Abs(goodCohort)
	before := hashTree(t, tmp)
	for _, args := range [][]string{
		{"info", "--db", db},
		{"export", "--db", db, "--out", filepath.Join(tmp, "exp")},
		{"report", "--db", db, "--out", filepath.Join(tmp, "r.html")},
		{"query", "--db", db, "subject_features"},
		{"drop", "--db", db, "--analysis", "baseline", "--yes"},
		append(expand(baseIngest, abs, db), "--analysis", "second"),
	} {
		r := runCmd(t, cmdOpts{args: args})
		if r.code != 1 || !strings.Contains(r.stderr, "run 'topostate upgrade --db FILE' once") {
			t.Errorf("%s on the poisoned file: exit %d: %s", args[0], r.code, r.stderr)
		}
	}
	sameTree(t, "commands on the poisoned file", before, hashTree(t, tmp), nil)
	r := runCmd(t, cmdOpts{args: []string{"upgrade", "--db", db}})
	if r.code != 0 || !strings.Contains(r.stdout, `subjects column "\xe2ge" renamed to "âge"`) {
		t.Fatalf("upgrade: exit %d\n%s%s", r.code, r.stdout, r.stderr)
	}
	if got := querySQL(t, db, `SELECT sum("âge") FROM subjects`); got != "9" {
		t.Errorf("the renamed column holds %s, want the 3 values of 3", got)
	}
	for _, args := range [][]string{
		{"info", "--db", db},
		{"export", "--db", db, "--out", filepath.Join(tmp, "exp")},
		{"query", "--db", db, "subject_features"},
		{"drop", "--db", db, "--analysis", "baseline", "--yes"},
	} {
		if r := runCmd(t, cmdOpts{args: args}); r.code != 0 {
			t.Errorf("%s after upgrade: exit %d: %s", args[0], r.code, r.stderr)
		}
	}
}
