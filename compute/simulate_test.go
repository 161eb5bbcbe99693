package compute

import (
	"fmt"
	"math"
	"reflect"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
)

func TestSimulateCohortShapeAndDeterminism(t *testing.T) {
	spec := CohortSpec{Subjects: 5, Regions: 7, Timepoints: 120, States: 3, Seed: 17}
	a, err := SimulateCohort(spec)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := SimulateCohort(spec)
	if !reflect.DeepEqual(a, b) {
		t.Fatal("same spec gave different cohorts")
	}
	spec.Seed = 18
	c, _ := SimulateCohort(spec)
	if reflect.DeepEqual(a[0].Series, c[0].Series) {
		t.Fatal("a different seed gave the same series")
	}
	for i, s := range a {
		if s.ID != fmt.Sprintf("sub-%03d", i+1) || s.Group != []string{"A", "B"}[i%2] {
			t.Errorf("subject %d: ID %q group %q", i, s.ID, s.Group)
		}
		if s.Series.T != 120 || s.Series.P != 7 || len(s.Series.Data) != 120*7 || len(s.Truth) != 120 {
			t.Errorf("subject %d: %d x %d series, %d truth labels", i, s.Series.T, s.Series.P, len(s.Truth))
		}
		for _, k := range s.Truth {
			if k < 0 || k >= 3 {
				t.Fatalf("truth state %d", k)
			}
		}
	}
	// A subject's series does not depend on how many subjects follow it
	// (per-subject generator seeded from (Seed, index)).
	spec.Subjects = 2
	d, _ := SimulateCohort(spec)
	if !reflect.DeepEqual(d[1], c[1]) {
		t.Error("subject 2 changed with the cohort size")
	}
}

// Within state k the time points are draws with correlation
// StateCorrelation(spec, k); the sample correlation over them (gonum
// stat.Correlation) has standard error about (1 - r^2)/sqrt(n) (Fisher;
// from memory), so 5 SE bounds the error.
func TestSimulateCohortStateCorrelation(t *testing.T) {
	spec := CohortSpec{Subjects: 1, Regions: 8, Timepoints: 6000, States: 3, Stickiness: 0.995, Offset: 1000, Seed: 5}
	subs, err := SimulateCohort(spec)
	if err != nil {
		t.Fatal(err)
	}
	s := subs[0]
	for k := 0; k < spec.States; k++ {
		var rows []int
		for t0, st := range s.Truth {
			if st == k {
				rows = append(rows, t0)
			}
		}
		if len(rows) < 500 {
			t.Fatalf("state %d visited at only %d time points", k, len(rows))
		}
		want, err := StateCorrelation(spec, k)
		if err != nil {
			t.Fatal(err)
		}
		p := spec.Regions
		col := func(j int) []float64 {
			c := make([]float64, len(rows))
			for i, t0 := range rows {
				c[i] = s.Series.At(t0, j)
			}
			return c
		}
		for i := 0; i < p; i++ {
			if want[i*p+i] != 1 {
				t.Fatalf("diagonal %v", want[i*p+i])
			}
			ci := col(i)
			if m := stat.Mean(ci, nil); math.Abs(m-1000) > 0.2 { // offset; the sd is ~1.1
				t.Errorf("state %d region %d mean %v, want 1000", k, i, m)
			}
			for j := i + 1; j < p; j++ {
				r := want[i*p+j]
				if r != want[j*p+i] {
					t.Fatalf("not symmetric at (%d,%d)", i, j)
				}
				got := stat.Correlation(ci, col(j), nil)
				se := (1 - r*r) / math.Sqrt(float64(len(rows)))
				if math.Abs(got-r) > 5*se {
					t.Errorf("state %d (%d,%d): sample r %.3f, true %.3f (n = %d)", k, i, j, got, r, len(rows))
				}
			}
		}
		// A correlation matrix is positive definite (gonum Cholesky).
		var ch mat.Cholesky
		if !ch.Factorize(mat.NewSymDense(p, want)) {
			t.Errorf("state %d correlation not positive definite", k)
		}
	}
	// Each state has its own module layout: the state matrices differ.
	c0, _ := StateCorrelation(spec, 0)
	c1, _ := StateCorrelation(spec, 1)
	if reflect.DeepEqual(c0, c1) {
		t.Error("states 0 and 1 share one correlation matrix")
	}
}

// The chain stays with probability q per time point (Markov chain
// definition), so the fraction of t with s_t = s_{t+1} estimates q; group B
// uses q + GroupEffect. Binomial bound of 5 SE (common practice, no source).
func TestSimulateCohortStickiness(t *testing.T) {
	spec := CohortSpec{Subjects: 4, Regions: 3, Timepoints: 5000, States: 4, Stickiness: 0.9, GroupEffect: 0.05, Seed: 2}
	subs, err := SimulateCohort(spec)
	if err != nil {
		t.Fatal(err)
	}
	for i, s := range subs {
		q := 0.9
		if s.Group == "B" {
			q = 0.95
		}
		d, err := Dynamics(s.Truth, spec.States)
		if err != nil {
			t.Fatal(err)
		}
		n := float64(len(s.Truth) - 1)
		stay := 1 - float64(d.Transitions)/n
		if se := math.Sqrt(q * (1 - q) / n); math.Abs(stay-q) > 5*se {
			t.Errorf("subject %d (%s): stay fraction %.4f, want %.2f +- %.4f", i, s.Group, stay, q, 5*se)
		}
	}
}

func TestSimulateCohortErrors(t *testing.T) {
	ok := CohortSpec{Subjects: 2, Regions: 4, Timepoints: 10, States: 2}
	for _, tc := range []struct {
		name string
		edit func(*CohortSpec)
	}{
		{"no subjects", func(s *CohortSpec) { s.Subjects = 0 }},
		{"one region", func(s *CohortSpec) { s.Regions = 1 }},
		{"no states", func(s *CohortSpec) { s.States = 0 }},
		{"stickiness 1", func(s *CohortSpec) { s.Stickiness = 1 }},
		{"negative noise", func(s *CohortSpec) { s.Noise = -1 }},
		{"NaN TR", func(s *CohortSpec) { s.TR = math.NaN() }},
		{"negative group effect", func(s *CohortSpec) { s.GroupEffect = -0.1 }},
		{"autocorrelation 1", func(s *CohortSpec) { s.Autocorr = 1 }},
		{"negative autocorrelation", func(s *CohortSpec) { s.Autocorr = -0.2 }},
	} {
		t.Run(tc.name, func(t *testing.T) {
			s := ok
			tc.edit(&s)
			if _, err := SimulateCohort(s); err == nil || !strings.HasPrefix(err.Error(), "compute: ") {
				t.Errorf("SimulateCohort err = %v", err)
			}
			if _, err := StateCorrelation(s, 0); err == nil {
				t.Error("StateCorrelation accepted the spec")
			}
		})
	}
	if _, err := StateCorrelation(ok, 2); err == nil {
		t.Error("state outside [0, States) accepted")
	}
}

// lag1 is the lag-1 sample autocorrelation of x (the usual estimator,
// sum (x_t - m)(x_{t+1} - m) / sum (x_t - m)^2).
func lag1(x []float64) float64 {
	m := stat.Mean(x, nil)
	var num, den float64
	for t := range x {
		d := x[t] - m
		den += d * d
		if t+1 < len(x) {
			num += d * (x[t+1] - m)
		}
	}
	return num / den
}

// With one latent state each region is y = (L z)_j + Noise e with z a
// unit-variance AR(1) vector and e white, so the lag-1 autocorrelation is
// phi / (1 + Noise^2) (AR(1): rho(1) = phi, Box, Jenkins & Reinsel, Time
// Series Analysis, ch. 3, from memory; white noise adds variance and no
// covariance). The estimator's standard error for an AR(1) is about
// sqrt((1 - phi^2) / T) (Bartlett's formula, from memory); 5 SE bounds the
// error. White gives 0 within the white-noise SE 1/sqrt(T).
func TestSimulateCohortAutocorrelation(t *testing.T) {
	const T = 20000
	for _, tc := range []struct {
		spec CohortSpec
		phi  float64
	}{
		{CohortSpec{Subjects: 1, Regions: 4, Timepoints: T, States: 1, Noise: 0.5, Seed: 3}, DefaultAutocorr},
		{CohortSpec{Subjects: 1, Regions: 4, Timepoints: T, States: 1, Noise: 0.5, Autocorr: 0.8, Seed: 4}, 0.8},
		{CohortSpec{Subjects: 1, Regions: 4, Timepoints: T, States: 1, Noise: 0.5, Autocorr: 0.8, White: true, Seed: 5}, 0},
	} {
		subs, err := SimulateCohort(tc.spec)
		if err != nil {
			t.Fatal(err)
		}
		want := tc.phi / (1 + 0.25)
		se := math.Sqrt((1 - want*want) / T)
		for j := 0; j < tc.spec.Regions; j++ {
			x := make([]float64, T)
			for i := range x {
				x[i] = subs[0].Series.At(i, j)
			}
			if got := lag1(x); math.Abs(got-want) > 5*se {
				t.Errorf("phi %v region %d: lag-1 autocorrelation %.4f, want %.4f +- %.4f", tc.phi, j, got, want, 5*se)
			}
		}
	}
}

// Null kind (c): one latent state is a stationary process. The truth never
// changes and the first and second halves of a long series have the same
// mean and variance (within 5 SE; the mean's SE for an AR(1) with
// lag-1 autocorrelation r is sd sqrt((1 + r) / ((1 - r) n)), from memory).
func TestSimulateCohortOneStateStationary(t *testing.T) {
	const T = 20000
	spec := CohortSpec{Subjects: 2, Regions: 3, Timepoints: T, States: 1, Stickiness: 0.5, Seed: 8}
	subs, err := SimulateCohort(spec)
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range subs {
		for _, k := range s.Truth {
			if k != 0 {
				t.Fatalf("%s: one-state truth holds state %d", s.ID, k)
			}
		}
		for j := 0; j < spec.Regions; j++ {
			var h [2][]float64
			for i := 0; i < T; i++ {
				h[i*2/T] = append(h[i*2/T], s.Series.At(i, j))
			}
			m0, v0 := stat.MeanVariance(h[0], nil)
			m1, v1 := stat.MeanVariance(h[1], nil)
			r := DefaultAutocorr / 1.25
			seMean := math.Sqrt(v0 * (1 + r) / ((1 - r) * T / 2))
			if math.Abs(m0-m1) > 5*math.Sqrt2*seMean {
				t.Errorf("%s region %d: half means %.4f and %.4f", s.ID, j, m0, m1)
			}
			// Variance 1 + Noise^2 = 1.25 in each half; 10 % is over 5 SE
			// at n = 10,000 even with the autocorrelation.
			for _, v := range []float64{v0, v1} {
				if math.Abs(v-1.25) > 0.125 {
					t.Errorf("%s region %d: half variance %.4f, want 1.25", s.ID, j, v)
				}
			}
		}
	}
}

// Null kind (b): GroupEffect changes dwell times only. The state networks
// are identical between the groups: a cohort with and without the effect
// has the same StateCorrelation, and within each state the pooled sample
// correlation of group A and group B agree within the Fisher SE bound of
// TestSimulateCohortStateCorrelation (inflated for the autocorrelation).
func TestSimulateCohortGroupEffectKeepsNetworks(t *testing.T) {
	spec := CohortSpec{Subjects: 4, Regions: 5, Timepoints: 6000, States: 2, Stickiness: 0.95, GroupEffect: 0.04, Seed: 9}
	noEffect := spec
	noEffect.GroupEffect = 0
	for k := 0; k < 2; k++ {
		a, _ := StateCorrelation(spec, k)
		b, _ := StateCorrelation(noEffect, k)
		if !reflect.DeepEqual(a, b) {
			t.Fatalf("state %d: the group effect changed the state network", k)
		}
	}
	subs, err := SimulateCohort(spec)
	if err != nil {
		t.Fatal(err)
	}
	p := spec.Regions
	for k := 0; k < 2; k++ {
		want, _ := StateCorrelation(spec, k)
		for _, g := range []string{"A", "B"} {
			cols := make([][]float64, p)
			for _, s := range subs {
				if s.Group != g {
					continue
				}
				for t0, st := range s.Truth {
					if st == k {
						for j := 0; j < p; j++ {
							cols[j] = append(cols[j], s.Series.At(t0, j))
						}
					}
				}
			}
			n := float64(len(cols[0]))
			for i := 0; i < p; i++ {
				for j := i + 1; j < p; j++ {
					r := want[i*p+j]
					got := stat.Correlation(cols[i], cols[j], nil)
					se := (1 - r*r) / math.Sqrt(n) * math.Sqrt((1+0.25)/(1-0.25)) // AR(1) inflation (1+phi^2)/(1-phi^2), from memory
					if math.Abs(got-r) > 6*se {
						t.Errorf("group %s state %d (%d,%d): r %.3f, true %.3f", g, k, i, j, got, r)
					}
				}
			}
		}
	}
}
