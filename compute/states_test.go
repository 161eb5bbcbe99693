package compute

import (
	"math"
	"testing"
)

// windowTruth is the latent state held by most of the window's time points
// (ties to the state at the window's centre).
func windowTruth(truth []int, start, width, states int) int {
	count := make([]int, states)
	for _, s := range truth[start : start+width] {
		count[s]++
	}
	best := truth[start+(width-1)/2]
	for s, c := range count {
		if c > count[best] {
			best = s
		}
	}
	return best
}

// The acceptance check: on a generated cohort of 20 subjects, 40
// regions, 600 time points and 3 latent states, sliding-window correlations
// (docs/methods.md §2) clustered at group level by k-means (docs/methods.md §3) recover the
// generating states with adjusted Rand index >= 0.9 (Hubert and Arabie,
// 1985; label-free, so no matching of cluster numbers is needed). The
// threshold 0.9 is the issue's; each window's truth is the majority latent
// state of its time points. Windows that straddle a state change mix two
// correlation patterns and are where errors happen, so the design sets the
// stickiness to 0.99 (mean dwell 100 time points) for 20-point windows;
// with the default 0.97 the same pipeline scores about 0.82 over all
// windows while the windows inside one state are still clustered perfectly
// (observed when this test was written). Windows lying wholly inside one
// state must be clustered without error (ARI >= 0.99; construction: the
// states are far apart compared with the window noise). Each recovered
// centroid is also compared with the true correlation of its state
// (StateCorrelation, whose own test checks it against gonum
// stat.Correlation). Last, the full-scale practice of docs/methods.md §3 (fit on a
// subsample, assign every window to its nearest centroid) must pass the
// same ARI bar.
func TestRecoverSimulatedStates(t *testing.T) {
	spec := CohortSpec{Subjects: 20, Regions: 40, Timepoints: 600, States: 3, Stickiness: 0.99, Offset: 1000, Seed: 2024}
	subs, err := SimulateCohort(spec)
	if err != nil {
		t.Fatal(err)
	}
	opt := WindowOptions{Width: 20, Step: 1}
	pairs := PairCount(spec.Regions)
	var data []float32
	var truth []int
	var pure []bool
	for _, s := range subs {
		m, err := SlidingCorrelations(s.Series, opt)
		if err != nil {
			t.Fatal(err)
		}
		if m.Cols != pairs {
			t.Fatalf("%d columns, want %d", m.Cols, pairs)
		}
		data = append(data, m.Data...)
		for i := 0; i < m.Rows; i++ {
			start := i * opt.Step
			truth = append(truth, windowTruth(s.Truth, start, opt.Width, spec.States))
			p := true
			for _, st := range s.Truth[start : start+opt.Width] {
				p = p && st == s.Truth[start]
			}
			pure = append(pure, p)
		}
	}
	x := Matrix32{Rows: len(truth), Cols: pairs, Data: data}
	res, err := KMeans(x, KMeansOptions{K: spec.States, Restarts: 5, Workers: 2}, 1)
	if err != nil {
		t.Fatal(err)
	}
	ari := AdjustedRandIndex(res.Labels, truth)
	var pl, pt []int
	for i, p := range pure {
		if p {
			pl, pt = append(pl, res.Labels[i]), append(pt, truth[i])
		}
	}
	pureARI := AdjustedRandIndex(pl, pt)
	t.Logf("%d windows, ARI %.4f, %d iterations; %d windows inside one state, ARI %.4f", x.Rows, ari, res.Iterations, len(pl), pureARI)
	if ari < 0.9 {
		t.Errorf("ARI = %.4f over all windows, want >= 0.9", ari)
	}
	if len(pl) < x.Rows/2 || pureARI < 0.99 {
		t.Errorf("windows inside one state: %d, ARI %.4f; want at least half of %d and ARI >= 0.99", len(pl), pureARI, x.Rows)
	}
	// Match clusters to states by majority and compare each centroid with
	// the state's true correlation (upper triangle).
	for c := 0; c < spec.States; c++ {
		votes := make([]int, spec.States)
		for i, l := range res.Labels {
			if l == c {
				votes[truth[i]]++
			}
		}
		k := 0
		for s := range votes {
			if votes[s] > votes[k] {
				k = s
			}
		}
		want, err := StateCorrelation(spec, k)
		if err != nil {
			t.Fatal(err)
		}
		sum := 0.0
		for q := 0; q < pairs; q++ {
			i, j := PairOf(spec.Regions, q)
			sum += math.Abs(float64(res.Centroids.Data[c*pairs+q]) - want[i*spec.Regions+j])
		}
		t.Logf("cluster %d -> state %d, mean |centroid - true r| = %.4f", c, k, sum/float64(pairs))
		if mae := sum / float64(pairs); mae > 0.05 {
			t.Errorf("cluster %d (state %d): mean |centroid - true r| = %.3f, want <= 0.05", c, k, mae)
		}
	}
	// Fit on every fourth window, then Assign all of them.
	sub := NewMatrix32((x.Rows+3)/4, pairs)
	for i := 0; i < sub.Rows; i++ {
		copy(sub.Row(i), x.Row(4*i))
	}
	fit, err := KMeans(sub, KMeansOptions{K: spec.States, Restarts: 5, Workers: 2}, 1)
	if err != nil {
		t.Fatal(err)
	}
	labels, _ := Assign(x, fit.Centroids, SquaredEuclidean, 2)
	if a := AdjustedRandIndex(labels, truth); a < 0.9 {
		t.Errorf("fit on a quarter, assign all: ARI = %.4f, want >= 0.9", a)
	} else {
		t.Logf("fit on %d windows, assign all: ARI %.4f", sub.Rows, a)
	}
}
