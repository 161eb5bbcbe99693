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

// BenchmarkParseSeries reads one series of the design size (1,200 time
// points x 116 regions, values near a scanner offset of 1000 printed with 7
// significant digits as WriteCohort does).
func BenchmarkParseSeries(b *testing.B) {
	r := rand.New(rand.NewPCG(1, 1))
	var buf bytes.Buffer
	for j := range 116 {
		if j > 0 {
			buf.WriteByte('\t')
		}
		fmt.Fprintf(&buf, "r%03d", j)
	}
	buf.WriteByte('\n')
	for range 1200 {
		for j := range 116 {
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

// BenchmarkReadSeriesFile adds the file read and the SHA-256 checksum.
func BenchmarkReadSeriesFile(b *testing.B) {
	dir := b.TempDir()
	subs, err := compute.SimulateCohort(compute.CohortSpec{Subjects: 1, Regions: 116, Timepoints: 1200, States: 3, Offset: 1000, Seed: 1})
	if err != nil {
		b.Fatal(err)
	}
	names := make([]string, 116)
	for j := range names {
		names[j] = fmt.Sprintf("r%03d", j)
	}
	if err := WriteCohort(dir, names, 2, []string{subs[0].ID}, []compute.Series{subs[0].Series}, nil,
		[]SyntheticParticipant{{ID: subs[0].ID}}); err != nil {
		b.Fatal(err)
	}
	path := filepath.Join(dir, subs[0].ID, "func", subs[0].ID+"_task-rest_timeseries.tsv")
	for b.Loop() {
		if _, err := ReadSeriesFile(path); err != nil {
			b.Fatal(err)
		}
	}
}
