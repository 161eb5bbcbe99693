package compute

import (
	"errors"
	"math/rand/v2"
	"testing"
)

// TestRegionWindowProblemsAgrees: validation (RegionWindowProblems) and
// the computation (Preprocess, then SlidingCorrelations) agree on whether a
// series has a window whose correlations are undefined, over random series
// with planted constant stretches of random length, position and step,
// with and without detrending and a taper. The first problem found by the
// computation is among those RegionWindowProblems lists (same region and
// window).
func TestRegionWindowProblemsAgrees(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 6))
	refused := 0
	for trial := range 400 {
		T, p := 20+rng.IntN(30), 3+rng.IntN(4)
		y := NewSeries(T, p)
		for i := range y.Data {
			y.Data[i] = 100 + rng.NormFloat64()
		}
		for range rng.IntN(3) { // constant stretches
			j, s := rng.IntN(p), rng.IntN(T)
			e := min(T, s+2+rng.IntN(10))
			for t := s; t < e; t++ {
				y.Data[t*p+j] = 101.5
			}
		}
		pre := PreprocessOptions{Detrend: trial%3 == 0}
		win := WindowOptions{Width: 3 + rng.IntN(6), Step: 1 + rng.IntN(3)}
		if trial%4 == 0 {
			win.Taper = TaperGauss
		}
		if len(ConstantRegions(y)) > 0 {
			continue // whole-series constants are the caller's policy
		}
		probs := RegionWindowProblems(y, pre, win)
		z, err := Preprocess(y, pre)
		if err == nil {
			_, err = SlidingCorrelations(z, win)
		}
		var re *RegionError
		gotErr := errors.As(err, &re) && errors.Is(err, ErrZeroVariance)
		if gotErr != (len(probs) > 0) {
			t.Fatalf("trial %d: computation error %v, validation found %d problems", trial, err, len(probs))
		}
		if !gotErr {
			continue
		}
		refused++
		found := false
		for _, pr := range probs {
			if pr.Region == re.Region && (re.Window < 0 || pr.Window == re.Window) {
				found = true
			}
		}
		if !found {
			t.Errorf("trial %d: the computation stops at region %d window %d; validation lists %v", trial, re.Region, re.Window, probs)
		}
	}
	if refused < 40 {
		t.Errorf("only %d of 400 trials had an undefined window: the test does not exercise the check", refused)
	}
}
