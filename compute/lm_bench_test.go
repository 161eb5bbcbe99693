package compute

import (
	"math/rand/v2"
	"testing"
)

// benchFLData is one row of adjusted_group_contrast at cohort scale: n
// subjects, a 0/1 group, two numeric covariates (age, score), an outcome
// with a small group effect.
func benchFLData(n int) (y, g []float64, covs []Covariate, ids []string) {
	rng := rand.New(rand.NewPCG(21, 22))
	age, score := make([]float64, n), make([]float64, n)
	y, g, ids = make([]float64, n), make([]float64, n), make([]string, n)
	for i := range n {
		age[i] = 20 + 40*rng.Float64()
		score[i] = 10 + 3*rng.NormFloat64()
		g[i] = float64(i % 2)
		y[i] = 0.3 + 0.002*age[i] - 0.01*score[i] + 0.02*g[i] + 0.1*rng.NormFloat64()
		ids[i] = "sub-" + string(rune('a'+i%26)) + string(rune('a'+i/26%26)) + string(rune('a'+i/676))
	}
	return y, g, []Covariate{{"age", age}, {"score", score}}, ids
}

// BenchmarkFreedmanLane is one Freedman-Lane test of the query's default
// size: 1,000 subjects, intercept + group + 2 covariates, 9,999
// relabellings.
func BenchmarkFreedmanLane(b *testing.B) {
	y, g, covs, ids := benchFLData(1000)
	for b.Loop() {
		if _, err := FreedmanLaneTest(y, g, covs, nil, ids, 9999, rand.New(rand.NewPCG(1, 0))); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkFreedmanLaneSetup is the same test with one relabelling: the
// fits and factorisations around the loop.
func BenchmarkFreedmanLaneSetup(b *testing.B) {
	y, g, covs, ids := benchFLData(1000)
	for b.Loop() {
		if _, err := FreedmanLaneTest(y, g, covs, nil, ids, 1, rand.New(rand.NewPCG(1, 0))); err != nil {
			b.Fatal(err)
		}
	}
}
