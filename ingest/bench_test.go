package ingest

import (
	"bytes"
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"strconv"
	"testing"

	"github.com/topostate/topostate/compute"
)

// The series of the benchmarks: one series of a typical cohort (960 time
// points x 100 regions; README "Performance").
const benchT, benchP = 960, 100

// BenchmarkParseSeries reads one series of a typical cohort (benchT x
// benchP, values near a scanner offset of 1000 printed with 7 significant
// digits as WriteCohort does).
func BenchmarkParseSeries(b *testing.B) {
	r := rand.New(rand.NewPCG(1, 1))
	var buf bytes.Buffer
	for j := range benchP {
		if j > 0 {
			buf.WriteByte('\t')
		}
		fmt.Fprintf(&buf, "r%03d", j)
	}
	buf.WriteByte('\n')
	for range benchT {
		for j := range benchP {
			if j > 0 {
				buf.WriteByte('\t')
			}
			buf.WriteString(strconv.FormatFloat(1000+10*r.NormFloat64(), 'g', 7, 64))
		}
		buf.WriteByte('\n')
	}
	data := buf.Bytes()
	b.SetBytes(int64(len(data)))
	for b.Loop() {
		if _, err := ParseSeries("bench.tsv", bytes.NewReader(data), '\t'); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkReadSeriesFile adds the file read and the SHA-256 checksum: what
// each stage paid per series before the parsed-series cache.
func BenchmarkReadSeriesFile(b *testing.B) {
	path := benchSeriesFile(b)
	for b.Loop() {
		if _, err := ReadSeriesFile(path); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkReadSeriesCache reads the same series back from the
// parsed-series cache, as the sample and subjects stages now do.
func BenchmarkReadSeriesCache(b *testing.B) {
	sf, err := ReadSeriesFile(benchSeriesFile(b))
	if err != nil {
		b.Fatal(err)
	}
	cache := filepath.Join(b.TempDir(), "series.f64")
	if err := writeSeriesCache(cache, sf.Series); err != nil {
		b.Fatal(err)
	}
	b.SetBytes(int64(8 * len(sf.Series.Data)))
	for b.Loop() {
		y, err := readSeriesCache(cache, sf.Series.T, sf.Series.P)
		if err != nil || y.Data[len(y.Data)-1] != sf.Series.Data[len(y.Data)-1] {
			b.Fatal(err, "or the last value differs")
		}
	}
}

func benchSeriesFile(b *testing.B) string {
	dir := b.TempDir()
	subs, err := compute.SimulateCohort(compute.CohortSpec{Subjects: 1, Regions: benchP, Timepoints: benchT, States: 3, Offset: 1000, Seed: 1})
	if err != nil {
		b.Fatal(err)
	}
	names := make([]string, benchP)
	for j := range names {
		names[j] = fmt.Sprintf("r%03d", j)
	}
	if err := WriteCohort(dir, names, 2, []string{subs[0].ID}, []compute.Series{subs[0].Series}, nil,
		[]SyntheticParticipant{{ID: subs[0].ID}}); err != nil {
		b.Fatal(err)
	}
	return filepath.Join(dir, subs[0].ID, "func", subs[0].ID+"_task-rest_timeseries.tsv")
}
