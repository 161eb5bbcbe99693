package compute

import (
	"math"
	"testing"
)

// TestStrengthOfByHand checks the prediction strength of one test half
// (Tibshirani and Walther, 2005, eq. 2.1) on labels worked by hand.
func TestStrengthOfByHand(t *testing.T) {
	// Own cluster 0 = rows 0-3, predicted 0,0,0,1: pairs together 3*2 of
	// 4*3 ordered pairs = 0.5. Own cluster 1 = rows 4-6, predicted 2,2,2:
	// 1. Minimum 0.5.
	own := []int{0, 0, 0, 0, 1, 1, 1}
	pred := []int{0, 0, 0, 1, 2, 2, 2}
	if got := StrengthOf(own, pred, 2); math.Abs(got-0.5) > 1e-15 {
		t.Fatalf("strength %v, want 0.5", got)
	}
	// A singleton cluster is left out of the minimum: cluster 2 = row 7.
	own2 := append(own, 2)
	pred2 := append(pred, 5)
	if got := StrengthOf(own2, pred2, 3); math.Abs(got-0.5) > 1e-15 {
		t.Fatalf("with a singleton: %v, want 0.5", got)
	}
	// Cluster 0 split evenly 2/2: 2*(2*1)/(4*3) = 1/3.
	if got := StrengthOf([]int{0, 0, 0, 0}, []int{3, 3, 4, 4}, 1); math.Abs(got-1.0/3) > 1e-15 {
		t.Fatalf("even split: %v, want 1/3", got)
	}
}

// TestStrengthPickRule checks the rule of Tibshirani and Walther (2005),
// section 3: the largest k whose strength reaches the threshold.
func TestStrengthPickRule(t *testing.T) {
	ks := []int{1, 2, 3, 4}
	cases := []struct {
		ps   []float64
		want int
	}{
		{[]float64{1, 0.95, 0.9, 0.5}, 3},
		{[]float64{1, 0.7, 0.6, 0.5}, 1},
		{[]float64{1, 0.6, 0.86, 0.2}, 3}, // not monotone: the largest qualifying k
		{[]float64{1, math.NaN(), 0.2, 0.1}, 1},
	}
	for i, c := range cases {
		if got := StrengthPick(ks, c.ps, 0.85); got != c.want {
			t.Errorf("case %d: pick %d, want %d", i, got, c.want)
		}
	}
	// A scan from 2 with no qualifying k answers its first k.
	if got := StrengthPick([]int{2, 3}, []float64{0.5, 0.4}, 0.85); got != 2 {
		t.Errorf("scan from 2: %d, want 2", got)
	}
}

// TestPredictionStrengthKnownClusters: three well-separated blobs give
// strength 1 at k = 3 and the pick 3; one isotropic Gaussian cloud (no
// cluster structure, the null of the paper's section 4 simulations) gives
// the pick 1, since a split of a round cloud is not reproducible from half
// to half. Results do not depend on Workers.
func TestPredictionStrengthKnownClusters(t *testing.T) {
	x, _ := blobs(3, 60, 8, 11)
	s, err := PredictionStrength(x, 1, 6, StrengthOptions{}, 5)
	if err != nil {
		t.Fatal(err)
	}
	if s.K != 3 || s.Points[2].Strength != 1 || s.Points[0].Strength != 1 {
		t.Fatalf("blobs: pick %d, strengths %+v", s.K, s.Points)
	}
	g := randomMatrix(240, 8, 3)
	s1, err := PredictionStrength(g, 1, 6, StrengthOptions{Workers: 1}, 5)
	if err != nil {
		t.Fatal(err)
	}
	s2, err := PredictionStrength(g, 1, 6, StrengthOptions{Workers: 4}, 5)
	if err != nil {
		t.Fatal(err)
	}
	if s1.K != 1 {
		t.Fatalf("one Gaussian cloud: pick %d, strengths %+v", s1.K, s1.Points)
	}
	for i := range s1.Points {
		if s1.Points[i] != s2.Points[i] {
			t.Fatalf("workers change the result at k = %d: %+v vs %+v", s1.Points[i].K, s1.Points[i], s2.Points[i])
		}
	}
	if _, err := PredictionStrength(g, 1, 200, StrengthOptions{}, 5); err == nil {
		t.Fatal("k larger than a half accepted")
	}
}

// TestPredictionStrengthGroups: the method assumes independent rows
// (Tibshirani and Walther, 2005, section 2). Ten elongated Gaussian clouds
// (standard deviation 3 along one axis, 1 along seven) of 48 points, each
// point repeated 5 times with a little jitter (as overlapping windows of
// one series repeat each other): halved by row, near copies of every point
// sit in both halves and a split of the cloud "reproduces"; halved by
// group (the copies of a point share a label) the halves are independent
// again. No cloud has clusters, so the right pick is 1: halving by group
// must read at least 8 of the 10 as one cluster and more of them than
// halving by row does (measured when written: 9 against 4). Three
// separated blobs halved by groups of 4 rows are still read as 3. Fewer
// than two groups, or a label count that does not match the rows, is
// refused; each half is capped at Sample/2 rows.
func TestPredictionStrengthGroups(t *testing.T) {
	const points, copies = 48, 5
	var x Matrix32
	groups := make([]int, points*copies)
	oneByRow, oneByGroup := 0, 0
	for seed := uint64(1); seed <= 10; seed++ {
		base := randomMatrix(points, 8, seed)
		jitter := randomMatrix(points*copies, 8, seed+100)
		x = NewMatrix32(points*copies, 8)
		for i := range x.Rows {
			groups[i] = i / copies
			for j, v := range base.Row(i / copies) {
				if j == 0 {
					v *= 3
				}
				x.Row(i)[j] = v + 0.02*jitter.Row(i)[j]
			}
		}
		byRow, err := PredictionStrength(x, 1, 6, StrengthOptions{}, 5)
		if err != nil {
			t.Fatal(err)
		}
		byGroup, err := PredictionStrength(x, 1, 6, StrengthOptions{Groups: groups}, 5)
		if err != nil {
			t.Fatal(err)
		}
		if byGroup.Groups != points || byGroup.Rows != x.Rows || byRow.Groups != 0 {
			t.Fatalf("%d groups and %d rows by group, %d groups by row; want %d, %d, 0", byGroup.Groups, byGroup.Rows, byRow.Groups, points, x.Rows)
		}
		if byRow.K == 1 {
			oneByRow++
		}
		if byGroup.K == 1 {
			oneByGroup++
		}
	}
	if oneByGroup < 8 || oneByGroup <= oneByRow {
		t.Fatalf("one elongated cloud read as one cluster %d of 10 times by group, %d by row; want at least 8 and more than by row", oneByGroup, oneByRow)
	}
	capped, err := PredictionStrength(x, 1, 6, StrengthOptions{Groups: groups, Sample: 100}, 5)
	if err != nil {
		t.Fatal(err)
	}
	if capped.Rows != 100 {
		t.Fatalf("halves capped at 50 rows each hold %d rows together, want 100", capped.Rows)
	}
	b, _ := blobs(3, 60, 8, 11)
	bg := make([]int, b.Rows)
	for i := range bg {
		bg[i] = i / 4
	}
	s, err := PredictionStrength(b, 1, 6, StrengthOptions{Groups: bg}, 5)
	if err != nil {
		t.Fatal(err)
	}
	if s.K != 3 {
		t.Fatalf("blobs halved by group: pick %d, strengths %+v", s.K, s.Points)
	}
	if _, err := PredictionStrength(x, 1, 6, StrengthOptions{Groups: make([]int, x.Rows)}, 5); err == nil {
		t.Fatal("one group accepted")
	}
	if _, err := PredictionStrength(x, 1, 6, StrengthOptions{Groups: groups[1:]}, 5); err == nil {
		t.Fatal("a label missing accepted")
	}
}
