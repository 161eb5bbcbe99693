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
