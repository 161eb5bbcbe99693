package ingest

import (
	"fmt"
	"math"
	"os"
	"path/filepath"
	"testing"
)

// Reservoir sampling keeps each of N offered rows with probability n/N
// (Vitter, ACM TOMS 11(1), 1985, Algorithm R, its invariant); over 2,000
// seeds each of 50 rows kept by a pool of 10 must be kept 400 times on
// average, and every count within 5 binomial standard deviations of it.
func TestFitPoolUniform(t *testing.T) {
	const n, rows, seeds = 10, 50, 2000
	kept := make([]int, rows)
	for seed := uint64(1); seed <= seeds; seed++ {
		p := newFitPool(n, 2, 4, seed)
		for r := range rows {
			p.add([]float32{float32(r), float32(-r)}, r, nil)
		}
		m := p.matrix()
		if m.Rows != n || cap(p.data) > n*2 {
			t.Fatalf("seed %d: %d rows, capacity %d values; want %d rows and at most %d values", seed, m.Rows, cap(p.data), n, 2*n)
		}
		seen := map[float32]bool{}
		for i := range m.Rows {
			row := m.Row(i)
			if row[1] != -row[0] || seen[row[0]] {
				t.Fatalf("seed %d: row %v torn or repeated", seed, row)
			}
			if p.series[i] != int32(row[0]) || p.window[i] != -1 {
				t.Fatalf("seed %d: row %v labelled series %d window %d, want %v and -1", seed, row, p.series[i], p.window[i], row[0])
			}
			seen[row[0]] = true
			kept[int(row[0])]++
		}
	}
	mean := float64(seeds) * n / rows
	sd := math.Sqrt(float64(seeds) * (float64(n) / rows) * (1 - float64(n)/rows))
	for r, k := range kept {
		if math.Abs(float64(k)-mean) > 5*sd {
			t.Errorf("row %d kept %d times in %d draws, want %.0f +- %.0f", r, k, seeds, mean, 5*sd)
		}
	}
}

// With no more rows than its cap the pool keeps them all, in order.
func TestFitPoolKeepsAllInOrder(t *testing.T) {
	p := newFitPool(100, 3, 1, 7)
	var want []float32
	for r := range 40 {
		row := []float32{float32(r), 1, 2}
		want = append(want, row...)
		p.add(row, 0, []int{r})
	}
	m := p.matrix()
	if m.Rows != 40 {
		t.Fatalf("%d rows, want 40", m.Rows)
	}
	for r := range 40 {
		if p.series[r] != 0 || p.window[r] != int32(r) {
			t.Fatalf("row %d labelled series %d window %d, want 0 and %d", r, p.series[r], p.window[r], r)
		}
	}
	for i, v := range want {
		if m.Data[i] != v {
			t.Fatalf("value %d is %v, want %v", i, m.Data[i], v)
		}
	}
}

// FitCap: 1 GiB of float32 windows of 200 regions (19,900 pairs, 79,600
// bytes each) is floor(2^30 / 79,600) = 13,489 windows (worked by hand);
// 100 regions fit 20,000 of them (20,000 x 19,800 bytes = 396 MB).
func TestFitCap(t *testing.T) {
	o := Defaults()
	if got := o.FitCap(200); got != 13489 {
		t.Errorf("FitCap(200) = %d, want 13489", got)
	}
	if got := o.FitCap(100); got != 20000 {
		t.Errorf("FitCap(100) = %d, want 20000", got)
	}
	o.FitMemory = 0
	if got := o.FitCap(400); got != 20000 {
		t.Errorf("FitCap(400) without a byte bound = %d, want 20000", got)
	}
}

func TestParseBytes(t *testing.T) {
	for _, tc := range []struct {
		in   string
		want int64
	}{{"1GiB", 1 << 30}, {"512MiB", 512 << 20}, {"2GB", 2e9}, {"1500", 1500}, {"0", 0}, {" 1.5 gib", 3 << 29}, {"10kb", 10000}} {
		got, err := ParseBytes(tc.in)
		if err != nil || got != tc.want {
			t.Errorf("ParseBytes(%q) = %d, %v; want %d", tc.in, got, err, tc.want)
		}
	}
	for _, bad := range []string{"", "GiB", "-1MiB", "1 parsec", "1e30GiB"} {
		if _, err := ParseBytes(bad); err == nil {
			t.Errorf("ParseBytes(%q) accepted", bad)
		}
	}
}

// A run folder whose owner process is gone is removed by the next run; one
// of a live process (this test's), one of another host and one without an
// owner file are kept.
func TestSweepStaleRunDirs(t *testing.T) {
	if _, err := os.Stat("/proc/self"); err != nil {
		t.Skip("no /proc")
	}
	tmp := t.TempDir()
	t.Setenv("TMPDIR", tmp)
	host, _ := os.Hostname()
	mk := func(name, owner string) string {
		d := filepath.Join(tmp, runDirPrefix+name)
		if err := os.Mkdir(d, 0o755); err != nil {
			t.Fatal(err)
		}
		if owner != "" {
			if err := os.WriteFile(filepath.Join(d, runOwnerFile), []byte(owner), 0o644); err != nil {
				t.Fatal(err)
			}
		}
		return d
	}
	// A process id above Linux's largest (pid_max is at most 2^22) never exists.
	dead := mk("dead", fmt.Sprintf("%s %d", host, 1<<23))
	live := mk("live", runOwner())
	other := mk("other", fmt.Sprintf("%s-elsewhere %d", host, 1<<23))
	none := mk("none", "")
	sweepStaleRunDirs()
	if _, err := os.Stat(dead); !os.IsNotExist(err) {
		t.Errorf("the folder of a dead run is still there (%v)", err)
	}
	for _, d := range []string{live, other, none} {
		if _, err := os.Stat(d); err != nil {
			t.Errorf("%s was removed: %v", d, err)
		}
	}
}
