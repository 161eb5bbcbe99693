package main

import (
	"math"
	"testing"
)

// The lines of GNU time -v that the harness reads, in the format of the
// Debian "time" package (the values are made up; the layout is that of
// the package's output).
func TestParseGNUTime(t *testing.T) {
	out := `	Command being timed: "topostate ingest --input c --db d"
	User time (seconds): 80.01
	System time (seconds): 2.99
	Percent of CPU this job got: 165%
	Elapsed (wall clock) time (h:mm:ss or m:ss): 0:50.22
	Maximum resident set size (kbytes): 1496064
	Exit status: 0
`
	var r result
	parseGNUTime(out, &r)
	if r.UserSeconds != 80.01 || r.SystemSeconds != 2.99 || math.Abs(r.WallSeconds-50.22) > 1e-9 || r.PeakRSSMiB != 1496064.0/1024 {
		t.Fatalf("parsed %+v", r)
	}
	for _, tc := range []struct {
		in   string
		want float64
	}{{"0:50.22", 50.22}, {"1:02:03", 3723}, {"12:00.5", 720.5}} {
		if got := clockSeconds(tc.in); math.Abs(got-tc.want) > 1e-9 {
			t.Errorf("clockSeconds(%q) = %v, want %v", tc.in, got, tc.want)
		}
	}
}

// A window's true state is the latent state held by most of its time
// points, ties to the state at the window's centre (index (w-1)/2), the
// rule of compute's simulated-state test (states_test.go); worked by hand.
func TestWindowTruth(t *testing.T) {
	for _, tc := range []struct {
		states []int
		want   int
	}{
		{[]int{1, 1, 2, 2, 2}, 2},    // majority
		{[]int{3, 3, 1, 1}, 3},       // tie 2-2: centre index 1 holds 3
		{[]int{1, 1, 3, 3}, 1},       // tie: centre index 1 holds 1
		{[]int{2, 4, 4, 2, 1, 1}, 4}, // three-way tie: centre index 2 holds 4
		{[]int{5}, 5},
	} {
		if got := windowTruth(tc.states); got != tc.want {
			t.Errorf("windowTruth(%v) = %d, want %d", tc.states, got, tc.want)
		}
	}
}
