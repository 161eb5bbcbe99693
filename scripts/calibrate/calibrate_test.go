package main

import (
	"context"
	"math/big"
	"strings"
	"testing"
)

// binomCDFExact is P(X <= k) for X ~ Binomial(n, 1/20) summed exactly in
// rationals from the definition, sum_{i<=k} C(n, i) p^i (1-p)^(n-i) (any
// probability text, e.g. Feller, An Introduction to Probability Theory and
// Its Applications, vol. 1, ch. VI; from memory): a check of the gonum CDF
// that Upper95 and TailLimit use, independent of it.
func binomCDFExact(n, k int) *big.Rat {
	p, q := big.NewRat(1, 20), big.NewRat(19, 20)
	sum := new(big.Rat)
	for i := 0; i <= k; i++ {
		t := new(big.Rat).SetInt(new(big.Int).Binomial(int64(n), int64(i)))
		for j := 0; j < i; j++ {
			t.Mul(t, p)
		}
		for j := 0; j < n-i; j++ {
			t.Mul(t, q)
		}
		sum.Add(sum, t)
	}
	return sum
}

func TestBounds(t *testing.T) {
	for _, n := range []int{20, 24, 36, 200} {
		b := Upper95(n, 0.05)
		// b is the smallest k with P(X <= k) >= 0.95.
		if binomCDFExact(n, b).Cmp(big.NewRat(95, 100)) < 0 || (b > 0 && binomCDFExact(n, b-1).Cmp(big.NewRat(95, 100)) >= 0) {
			t.Errorf("Upper95(%d) = %d is not the exact 95 %% quantile", n, b)
		}
		l := TailLimit(n, 0.05, 1e-4)
		// l is the smallest k with P(X >= k) = 1 - P(X <= k-1) < 1e-4.
		tail := func(k int) *big.Rat { return new(big.Rat).Sub(big.NewRat(1, 1), binomCDFExact(n, k-1)) }
		if tail(l).Cmp(big.NewRat(1, 10000)) >= 0 || tail(l-1).Cmp(big.NewRat(1, 10000)) < 0 {
			t.Errorf("TailLimit(%d) = %d is not the exact 1e-4 tail limit", n, l)
		}
		t.Logf("n %d: 95 %% bound %d, 1e-4 tail limit %d", n, b, l)
	}
	// The anti-conservative rates of issue 11 must be caught by the loose
	// limit of the default test.
	if TailLimit(24, 0.05, 1e-4) > 11 || TailLimit(36, 0.05, 1e-4) > 21 {
		t.Error("the tail limit would not catch 11/24 or 21/36")
	}
}

// smallConfig is the harness at a size the default test command affords:
// tiny cohorts (12 subjects x 200 time points x 10 regions, window 20) and
// 24 replicates per null kind.
func smallConfig() Config {
	return Config{
		Replicates: 24, Nulls: []string{NullNone, NullDwell, NullOne},
		Subjects: 12, Regions: 10, Timepoints: 200, States: 3,
		Stickiness: 0.95, GroupEffect: 0.03,
		Window: 20, FitStates: 3, Restarts: 1, Grid: "-1:1:41",
		NPerm: 199, Seed: 7, Parallel: 2,
	}
}

// TestCalibrationSmall runs the harness on every bundled group query and
// fails when a p column rejects a true null so often that a test at level
// 0.05 would do so with probability below 1e-4 (TailLimit): loose enough
// not to flake, tight enough to catch the rates of issue 11 (11/24, 21/36).
// The full run with 200 replicates is `go run ./scripts/calibrate`
// (README, "Calibration").
func TestCalibrationSmall(t *testing.T) {
	if testing.Short() {
		t.Skip("the calibration harness runs 72 ingests")
	}
	cfg := smallConfig()
	res, err := Run(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	var b strings.Builder
	res.WriteTable(&b, cfg.Nulls, 0.05)
	t.Log("\n" + b.String())
	if len(res.Tallies) == 0 {
		t.Fatal("no p column was counted")
	}
	for _, s := range res.Skipped {
		t.Logf("not run: %s", s)
	}
	for _, k := range res.Keys() {
		c := res.Tallies[k]
		if !IsNull(k) {
			continue
		}
		if lim := TailLimit(c.Tests, 0.05, 1e-4); c.Rejections >= lim {
			t.Errorf("%s %s (%s) under %s: %d of %d p-values below 0.05 (P < 1e-4 at the nominal rate; limit %d)",
				k.Query, k.Column, k.Row, NullNames[k.Null], c.Rejections, c.Tests, lim)
		}
	}
}
