package schema

import (
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"syscall"
	"testing"
	"time"
)

// eventSubjects sets the shape of the benchmark's filtration events: states
// per subject and the two dimensions' counts per subject-state, as for a
// 200-region network (199 spanning-tree edges, 19,701 other edges of
// 200*199/2; from the table's definition in v1.sql, not measured).
const (
	benchStates = 4
	benchDim0   = 199
	benchDim1   = 19701
)

// benchValues returns n sorted values on the correlation scale, distinct per
// seed so that compression sees realistic doubles, not repeats.
func benchValues(n, seed int) []float64 {
	v := make([]float64, n)
	x := uint64(seed)*0x9E3779B97F4A7C15 + 1
	for i := range v {
		x ^= x << 13
		x ^= x >> 7
		x ^= x << 17
		v[i] = float64(x>>11) / (1 << 53) // [0, 1)
	}
	// sorted, as the events are: a monotone transform of i plus jitter
	for i := range v {
		v[i] = -1 + 2*(float64(i)+v[i])/float64(n)
	}
	return v
}

// fillEvents appends the events of subjects [from, to) to b.
func fillEvents(b *Batch, id, from, to int) {
	for s := from; s < to; s++ {
		sub := fmt.Sprintf("sub-%04d", s+1)
		ses := "ses-" + strconv.Itoa(s%2+1)
		for st := 1; st <= benchStates; st++ {
			b.AppendEvents(id, sub, ses, st, 0, benchValues(benchDim0, s*31+st))
			b.AppendEvents(id, sub, ses, st, 1, benchValues(benchDim1, s*37+st))
		}
	}
}

func cpuTime() time.Duration {
	var ru syscall.Rusage
	syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// BenchmarkAppendEvents inserts filtration events through Writer.Append into
// a file warehouse in one transaction with DuckDB's threads set to 1, as
// ingest does (ingest/run.go), in batches of about 1M rows (ingest flushes
// at about that size), then commits (which checkpoints). It reports the
// process CPU time per million rows of the inserts (cpu-s/Mrow), of the
// commit (commit-cpu-s/Mrow) and of building the Arrow rows
// (build-cpu-s/Mrow). TOPOSTATE_BENCH_SUBJECTS sets the number of subjects
// (default 50, 4 million rows); for comparisons, TOPOSTATE_BENCH_AUTO=1
// leaves every table to DuckDB's automatic compression choice
// (dictionaryStrings empty) and TOPOSTATE_BENCH_SQL runs a statement in the
// transaction before the inserts (a setting to try).
func BenchmarkAppendEvents(b *testing.B) {
	subjects := 50
	if s := os.Getenv("TOPOSTATE_BENCH_SUBJECTS"); s != "" {
		subjects, _ = strconv.Atoi(s)
	}
	perSubject := benchStates * (benchDim0 + benchDim1)
	batchSubjects := max(1, int(math.Round(1e6/float64(perSubject))))
	if os.Getenv("TOPOSTATE_BENCH_AUTO") != "" { // compare: DuckDB's automatic choice for every table
		defer func(d map[string]bool) { dictionaryStrings = d }(dictionaryStrings)
		dictionaryStrings = nil
	}
	ctx := context.Background()
	var insert, commit, build time.Duration
	rows := 0
	for i := range b.N {
		b.StopTimer()
		db, err := Open(filepath.Join(b.TempDir(), fmt.Sprintf("w%d.duckdb", i)), false, nil)
		if err != nil {
			b.Fatal(err)
		}
		w, err := Begin(ctx, db, "bench", "")
		if err != nil {
			b.Fatal(err)
		}
		if err := w.Exec(ctx, "SET threads = 1"); err != nil {
			b.Fatal(err)
		}
		if q := os.Getenv("TOPOSTATE_BENCH_SQL"); q != "" {
			if err := w.Exec(ctx, q); err != nil {
				b.Fatal(err)
			}
		}
		b.StartTimer()
		for s := 0; s < subjects; s += batchSubjects {
			c0 := cpuTime()
			bt := NewBatch(FiltrationEvts)
			fillEvents(bt, w.ID, s, min(s+batchSubjects, subjects))
			rows += bt.Len()
			c1 := cpuTime()
			if err := w.Append(ctx, bt); err != nil {
				b.Fatal(err)
			}
			bt.Release()
			build += c1 - c0
			insert += cpuTime() - c1
		}
		if err := w.Exec(ctx, `INSERT INTO analyses VALUES (?, ?, now(), 'bench', '{}', 'in', 0, 1, 0, 0, 0)`, w.ID, w.Name); err != nil {
			b.Fatal(err)
		}
		c := cpuTime()
		if err := w.Commit(ctx); err != nil {
			b.Fatal(err)
		}
		commit += cpuTime() - c
		b.StopTimer()
		db.Close()
		b.StartTimer()
	}
	m := float64(rows) / 1e6
	b.ReportMetric(insert.Seconds()/m, "cpu-s/Mrow")
	b.ReportMetric(commit.Seconds()/m, "commit-cpu-s/Mrow")
	b.ReportMetric(build.Seconds()/m, "build-cpu-s/Mrow")
}

// BenchmarkBuildEvents builds the Arrow rows of BenchmarkAppendEvents'
// first batch (about 1M rows) without inserting them.
func BenchmarkBuildEvents(b *testing.B) {
	perSubject := benchStates * (benchDim0 + benchDim1)
	subjects := max(1, int(math.Round(1e6/float64(perSubject))))
	vals := make([][2][]float64, subjects*benchStates)
	for i := range vals {
		vals[i] = [2][]float64{benchValues(benchDim0, i), benchValues(benchDim1, i+1)}
	}
	rows := 0
	b.ResetTimer()
	for range b.N {
		bt := NewBatch(FiltrationEvts)
		for s := range subjects {
			sub := fmt.Sprintf("sub-%04d", s+1)
			for st := 1; st <= benchStates; st++ {
				v := vals[s*benchStates+st-1]
				bt.AppendEvents(1, sub, "ses-1", st, 0, v[0])
				bt.AppendEvents(1, sub, "ses-1", st, 1, v[1])
			}
		}
		rows += bt.Len()
		bt.Record().Release()
		bt.Release()
	}
	b.ReportMetric(b.Elapsed().Seconds()/(float64(rows)/1e6), "s/Mrow")
}
