//go:build unix

package main

import (
	"bufio"
	"bytes"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// pauseEnv and pauseMarker are schema's test hook: the binary prints the
// marker and waits before COMMIT, with the whole analysis written into the
// open transaction (see schema.pauseBeforeCommit).
const (
	pauseEnv    = "TOPOSTATE_TEST_PAUSE_BEFORE_COMMIT"
	pauseMarker = "topostate-test: paused before commit"
)

// bigIngest takes a couple of seconds on the big cohort: 60 series of
// 64 regions x 400 time points give 22,260 windows and about 480,000
// filtration-event rows, so DuckDB writes row groups into the file before
// the transaction commits.
const bigIngest = "ingest --input {cohort} --db {db} --window 30 --states 4 --restarts 1 -q --analysis big"

var (
	bigOnce sync.Once
	bigDir  string
	bigErr  string
)

// bigCohort simulates the big cohort once (invented data, made by the
// binary's own simulate command).
func bigCohort(t *testing.T) string {
	t.Helper()
	bigOnce.Do(func() {
		bigDir = filepath.Join(testTmp, "big-cohort")
		r := runCmd(nil, cmdOpts{args: []string{"simulate", "--out", bigDir, "--subjects", "60", "--regions", "64", "--timepoints", "400", "--seed", "5"}})
		if r.code != 0 {
			bigErr = r.stderr
		}
	})
	if bigErr != "" {
		t.Fatalf("simulate the big cohort: %s", bigErr)
	}
	return bigDir
}

// background is a running topostate process.
type background struct {
	cmd    *exec.Cmd
	marker chan struct{} // closed when the pause marker appears on stderr
	stderr *lockedBuffer
	stdout bytes.Buffer
	done   chan struct{}
}

type lockedBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *lockedBuffer) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.String()
}

// start runs the binary in the background with the pause hook set.
func start(t *testing.T, args []string, pause string) *background {
	t.Helper()
	bg := &background{cmd: exec.Command(bin, args...), marker: make(chan struct{}), stderr: &lockedBuffer{}, done: make(chan struct{})}
	bg.cmd.Env = append(os.Environ(), pauseEnv+"="+pause)
	bg.cmd.Stdout = &bg.stdout
	pr, err := bg.cmd.StderrPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := bg.cmd.Start(); err != nil {
		t.Fatal(err)
	}
	go func() {
		defer close(bg.done)
		sc := bufio.NewScanner(pr)
		seen := false
		for sc.Scan() {
			bg.stderr.mu.Lock()
			bg.stderr.b.WriteString(sc.Text() + "\n")
			bg.stderr.mu.Unlock()
			if !seen && sc.Text() == pauseMarker {
				seen = true
				close(bg.marker)
			}
		}
		io.Copy(io.Discard, pr)
	}()
	t.Cleanup(func() {
		if bg.cmd.ProcessState == nil {
			bg.cmd.Process.Kill()
			bg.wait()
		}
	})
	return bg
}

// waitMarker waits for the pause marker; it fails the test if the process
// ends first or takes more than a minute.
func (bg *background) waitMarker(t *testing.T) {
	t.Helper()
	select {
	case <-bg.marker:
	case <-bg.done:
		t.Fatalf("the process ended before pausing; stderr:\n%s", bg.stderr.String())
	case <-time.After(time.Minute):
		t.Fatalf("no pause marker within a minute; stderr:\n%s", bg.stderr.String())
	}
}

func (bg *background) wait() *os.ProcessState {
	<-bg.done
	bg.cmd.Wait()
	return bg.cmd.ProcessState
}

// TestKillMidIngest kills the real binary with SIGKILL at several points of
// an ingest into a warehouse that already holds an analysis. The pause hook
// keeps every run from committing, so each kill lands before COMMIT: after
// 0.2 s (validation or sampling), 0.6 s and 1.2 s (sampling or fitting),
// 2 s (fitting or writing) and at the pause (every row of the analysis
// inside the open transaction). Each time the earlier analysis must be
// intact table for table, no table may hold rows of an uncommitted
// analysis, and the next ingest must work without repair.
func TestKillMidIngest(t *testing.T) {
	cohort := bigCohort(t)
	points := []struct {
		name   string
		after  time.Duration
		marker bool
	}{
		{"after 0.2s", 200 * time.Millisecond, false},
		{"after 0.6s", 600 * time.Millisecond, false},
		{"after 1.3s", 1300 * time.Millisecond, false},
		{"after 2s", 2 * time.Second, false},
		{"paused before commit", 0, true},
	}
	before := snapshot(t, baselineDB, 0)
	for _, p := range points {
		t.Run(p.name, func(t *testing.T) {
			tmp := t.TempDir()
			db := copyDB(t, tmp)
			size0 := fileSize(db)
			bg := start(t, expand(bigIngest, cohort, db), "10m")
			if p.marker {
				bg.waitMarker(t)
			} else {
				select {
				case <-time.After(p.after):
				case <-bg.done:
					t.Fatalf("the process ended before the kill; stderr:\n%s", bg.stderr.String())
				}
			}
			size1, wal := fileSize(db), fileSize(db+".wal")
			if err := bg.cmd.Process.Signal(syscall.SIGKILL); err != nil {
				t.Fatal(err)
			}
			st := bg.wait()
			if ws, ok := st.Sys().(syscall.WaitStatus); !ok || !ws.Signaled() || ws.Signal() != syscall.SIGKILL {
				t.Fatalf("the process was not killed mid-run: %v; stderr:\n%s", st, bg.stderr.String())
			}
			t.Logf("killed; file %d -> %d bytes, wal %d bytes at the kill", size0, size1, wal)
			sameSnapshot(t, p.name, before, snapshot(t, db, 0))
			orphanRows(t, db)
			if r := runCmd(t, cmdOpts{args: []string{"info", "--db", db}}); r.code != 0 || !strings.Contains(r.stdout, "baseline") || strings.Contains(r.stdout, "big") {
				t.Errorf("info after the kill: exit %d\n%s%s", r.code, r.stdout, r.stderr)
			}
			if !p.marker {
				return
			}
			// The next run, same name, no repair.
			r := runCmd(t, cmdOpts{args: expand(bigIngest, cohort, db)})
			if r.code != 0 {
				t.Fatalf("ingest after the kill: exit %d\n%s", r.code, r.stderr)
			}
			if got := querySQL(t, db, `SELECT string_agg(name, ',' ORDER BY analysis_id) FROM analyses`); got != "baseline,big" {
				t.Errorf("analyses after the new ingest: %s, want baseline,big", got)
			}
			if got := querySQL(t, db, `SELECT count(*) FROM inputs WHERE analysis_id = 2`); got != "60" {
				t.Errorf("inputs of the new analysis: %s, want 60", got)
			}
			// The big cohort's sheet adds a covariate column (score) to
			// the shared subjects table; analysis 1's rows get NULL there
			// and are compared on their own columns.
			want, got := snapshot(t, baselineDB, 1), snapshot(t, db, 1)
			delete(want, "subjects")
			delete(got, "subjects")
			sameSnapshot(t, "analysis 1 after the new ingest", want, got)
			q := `SELECT string_agg(concat_ws('/', subject_id, "group", age, coalesce(score::VARCHAR, 'null')), ',' ORDER BY subject_id) FROM subjects WHERE analysis_id = 1`
			if got := querySQL(t, db, q); got != "sub-01/day/34/null,sub-02/night/41/null,sub-03/day/29/null" {
				t.Errorf("analysis 1's subjects after the new ingest: %s", got)
			}
			orphanRows(t, db)
		})
	}
}

// TestKillFirstIngest kills the first ingest into a new file at the pause:
// the file is left without tables, info says so plainly, and the next
// ingest fills it.
func TestKillFirstIngest(t *testing.T) {
	db := filepath.Join(t.TempDir(), "new.duckdb")
	abs, _ := filepath.Abs(goodCohort)
	bg := start(t, expand(baseIngest, abs, db), "10m")
	bg.waitMarker(t)
	bg.cmd.Process.Signal(syscall.SIGKILL)
	bg.wait()
	r := runCmd(t, cmdOpts{args: []string{"info", "--db", db}})
	if r.code != 1 || !strings.Contains(r.stderr, "holds no tables yet") || r.stdout != "" {
		t.Errorf("info on the killed first ingest: exit %d\nstdout: %s\nstderr: %s", r.code, r.stdout, r.stderr)
	}
	if r := runCmd(t, cmdOpts{args: expand(baseIngest, abs, db)}); r.code != 0 {
		t.Fatalf("ingest after the kill: exit %d\n%s", r.code, r.stderr)
	}
	if got := querySQL(t, db, `SELECT count(*) FROM analyses`); got != "1" {
		t.Errorf("%s analyses, want 1", got)
	}
}

// TestInterrupt sends SIGINT (Ctrl-C) during an ingest: the run must stop
// with a message on standard error, exit 1, print no results and write
// nothing; a file the run created is removed.
func TestInterrupt(t *testing.T) {
	cohort := bigCohort(t)
	before := snapshot(t, baselineDB, 0)
	cases := []struct {
		name   string
		after  time.Duration
		marker bool
		newDB  bool
	}{
		{"early", 300 * time.Millisecond, false, false},
		{"paused before commit", 0, true, false},
		{"paused before commit, new file", 0, true, true},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			tmp := t.TempDir()
			db := filepath.Join(tmp, "new.duckdb")
			if !c.newDB {
				db = copyDB(t, tmp)
			}
			bg := start(t, expand(bigIngest, cohort, db), "10m")
			if c.marker {
				bg.waitMarker(t)
			} else {
				time.Sleep(c.after)
			}
			sent := time.Now()
			if err := bg.cmd.Process.Signal(os.Interrupt); err != nil {
				t.Fatal(err)
			}
			st := bg.wait()
			t.Logf("stopped %v after the signal", time.Since(sent).Round(time.Millisecond))
			if st.ExitCode() != 1 {
				t.Errorf("exit code %d after Ctrl-C, want 1 (%v)", st.ExitCode(), st)
			}
			if !strings.Contains(bg.stderr.String(), "topostate: stop requested; stopping at the next safe point") ||
				!strings.Contains(bg.stderr.String(), "topostate: interrupted; nothing from this run was written") {
				t.Errorf("no interruption message; stderr:\n%s", bg.stderr.String())
			}
			if bg.stdout.Len() != 0 {
				t.Errorf("results printed after Ctrl-C:\n%s", bg.stdout.String())
			}
			if c.newDB {
				if _, err := os.Stat(db); err == nil {
					t.Errorf("the interrupted run left the file it created")
				}
				return
			}
			sameSnapshot(t, c.name, before, snapshot(t, db, 0))
		})
	}
}

// TestInterruptDuringFit: one Ctrl-C in the middle of a long elbow scan
// ends the run at the next k-means fit (KMeansOptions.Stop), with the
// usual message and nothing written.
func TestInterruptDuringFit(t *testing.T) {
	cohort := bigCohort(t)
	before := snapshot(t, baselineDB, 0)
	db := copyDB(t, t.TempDir())
	// Validation and sampling take about 0.3 s on this cohort; the elbow
	// scan with 20 restarts per k takes over 10 s, so 1.5 s lands in it.
	bg := start(t, expand("ingest --input {cohort} --db {db} --window 30 --restarts 20 -q", cohort, db), "10m")
	time.Sleep(1500 * time.Millisecond)
	sent := time.Now()
	bg.cmd.Process.Signal(os.Interrupt)
	st := bg.wait()
	t.Logf("stopped %v after the signal", time.Since(sent).Round(time.Millisecond))
	if st.ExitCode() != 1 || !strings.Contains(bg.stderr.String(), "interrupted; nothing from this run was written") {
		t.Errorf("after one Ctrl-C: %v\nstderr: %s", st, bg.stderr.String())
	}
	sameSnapshot(t, "after Ctrl-C during the fit", before, snapshot(t, db, 0))
}

// TestInterruptTwice: a second Ctrl-C ends the process at once, whatever
// the first one is waiting for, and the warehouse still holds only the
// baseline.
func TestInterruptTwice(t *testing.T) {
	cohort := bigCohort(t)
	before := snapshot(t, baselineDB, 0)
	db := copyDB(t, t.TempDir())
	// The default elbow scan (k = 2..10, 5 restarts) takes minutes here.
	bg := start(t, expand("ingest --input {cohort} --db {db} --window 30 -q", cohort, db), "10m")
	time.Sleep(1500 * time.Millisecond)
	bg.cmd.Process.Signal(os.Interrupt)
	time.Sleep(500 * time.Millisecond)
	bg.cmd.Process.Signal(os.Interrupt)
	st := bg.wait()
	ws, _ := st.Sys().(syscall.WaitStatus)
	switch {
	case ws.Signaled() && ws.Signal() == syscall.SIGINT:
		t.Logf("ended by the second Ctrl-C")
	case st.ExitCode() == 1 && strings.Contains(bg.stderr.String(), "interrupted; nothing from this run was written"):
		t.Logf("the first Ctrl-C landed in a stage that stops at once")
	default:
		t.Errorf("after two Ctrl-C: %v\nstderr: %s", st, bg.stderr.String())
	}
	if !strings.Contains(bg.stderr.String(), "Ctrl-C again stops at once") {
		t.Errorf("the first Ctrl-C was not acknowledged; stderr: %s", bg.stderr.String())
	}
	sameSnapshot(t, "after two Ctrl-C", before, snapshot(t, db, 0))
}

// TestSecondWriter holds a warehouse with a paused ingest and checks that
// every other process is told plainly that the file is in use, and that
// read-only commands share the file with each other.
func TestSecondWriter(t *testing.T) {
	tmp := t.TempDir()
	db := copyDB(t, tmp)
	abs, _ := filepath.Abs(goodCohort)
	before := snapshot(t, db, 0)

	// Readers share the file: a read-only handle here and info there.
	reader := openSnapshotHandle(t, db)
	if r := runCmd(t, cmdOpts{args: []string{"info", "--db", db}}); r.code != 0 || !strings.Contains(r.stdout, "baseline") {
		t.Errorf("info beside another reader: exit %d\n%s%s", r.code, r.stdout, r.stderr)
	}
	// A writer is refused while a reader holds the file.
	if r := runCmd(t, cmdOpts{args: expand(baseIngest+" --analysis second", abs, db)}); r.code != 1 || !strings.Contains(r.stderr, "database is in use by another process") {
		t.Errorf("ingest beside a reader: exit %d\n%s", r.code, r.stderr)
	}
	reader.Close()

	first := start(t, expand(baseIngest+" --analysis first", abs, db), "10m")
	first.waitMarker(t)
	for _, args := range [][]string{
		expand(baseIngest+" --analysis second", abs, db),
		{"info", "--db", db},
		{"drop", "--db", db, "--analysis", "baseline", "--yes"},
	} {
		r := runCmd(t, cmdOpts{args: args})
		if r.code != 1 || !strings.Contains(r.stderr, "database is in use by another process") || r.stdout != "" {
			t.Errorf("topostate %s while a writer holds the file: exit %d\nstdout: %s\nstderr: %s", args[0], r.code, r.stdout, r.stderr)
		}
	}
	// The paused writer is killed: the file is as it was, and free again.
	if err := first.cmd.Process.Signal(syscall.SIGKILL); err != nil {
		t.Fatal(err)
	}
	first.wait()
	sameSnapshot(t, "after the refused writers", before, snapshot(t, db, 0))
	if r := runCmd(t, cmdOpts{args: []string{"info", "--db", db}}); r.code != 0 || !strings.Contains(r.stdout, "baseline") {
		t.Errorf("info once no writer holds the file: exit %d\n%s%s", r.code, r.stdout, r.stderr)
	}
}

func fileSize(p string) int64 {
	st, err := os.Stat(p)
	if err != nil {
		return 0
	}
	return st.Size()
}
