package compute

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/stat"
)

// Critical values of Pearson's r for a two-sided test at alpha = 0.05, from
// the standard table printed in statistics textbooks (values from memory,
// given there to 3 decimals): a sample whose r equals the critical value
// has p = 0.05 up to the table's rounding.
func TestCorrelationTestCriticalValues(t *testing.T) {
	for _, c := range []struct {
		df    int
		rCrit float64
	}{
		{5, 0.754}, {10, 0.576}, {20, 0.423}, {30, 0.349},
	} {
		t.Run(fmt.Sprintf("df%d", c.df), func(t *testing.T) {
			x, y := pairsWithCorrelation(c.df+2, c.rCrit)
			got, err := CorrelationTest(x, y)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(got.R-c.rCrit) > 1e-12 || got.DF != float64(c.df) {
				t.Fatalf("r = %v df = %v, constructed %v with df %d", got.R, got.DF, c.rCrit, c.df)
			}
			// Half a unit in the table's third decimal of r moves p by
			// less than 0.001 at these df (the p-values seen
			// here are 0.0498-0.0503).
			if math.Abs(got.PValue-0.05) > 0.001 {
				t.Errorf("p = %.5f at the tabled critical r, want 0.05", got.PValue)
			}
		})
	}
}

// pairsWithCorrelation returns n pairs whose sample correlation is exactly
// r (up to rounding): y = r x + sqrt(1-r^2) z with x, z centred, scaled and
// made orthogonal.
func pairsWithCorrelation(n int, r float64) (x, y []float64) {
	rng := rand.New(rand.NewPCG(uint64(n), 5))
	x, z := make([]float64, n), make([]float64, n)
	for i := range x {
		x[i], z[i] = rng.NormFloat64(), rng.NormFloat64()
	}
	standardise := func(v []float64) {
		m := stat.Mean(v, nil)
		var ss float64
		for i := range v {
			v[i] -= m
			ss += v[i] * v[i]
		}
		for i := range v {
			v[i] /= math.Sqrt(ss)
		}
	}
	standardise(x)
	standardise(z)
	var dot float64
	for i := range x {
		dot += x[i] * z[i]
	}
	for i := range z {
		z[i] -= dot * x[i]
	}
	standardise(z)
	y = make([]float64, n)
	for i := range y {
		y[i] = r*x[i] + math.Sqrt(1-r*r)*z[i]
	}
	return x, y
}

// r against gonum's stat.Correlation on random data; with x a 0/1 group
// indicator the correlation t-test is Student's pooled two-sample t-test
// (a textbook identity), coded here from its own formula.
func TestCorrelationTestGonumAndStudent(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for range 10 {
		n := 4 + rng.IntN(40)
		x, y := make([]float64, n), make([]float64, n)
		for j := range x {
			x[j] = rng.NormFloat64()
			y[j] = 0.5*x[j] + rng.NormFloat64()
		}
		got, err := CorrelationTest(x, y)
		if err != nil {
			t.Fatal(err)
		}
		if want := stat.Correlation(x, y, nil); math.Abs(got.R-want) > 1e-12 {
			t.Errorf("n=%d: r = %v, gonum %v", n, got.R, want)
		}
		// Student: groups by x[j] = 0 or 1.
		var a, b []float64
		for j := range x {
			if j%3 == 0 {
				x[j] = 1
				a = append(a, y[j])
			} else {
				x[j] = 0
				b = append(b, y[j])
			}
		}
		got, err = CorrelationTest(x, y)
		if err != nil {
			t.Fatal(err)
		}
		ma, va := stat.MeanVariance(a, nil)
		mb, vb := stat.MeanVariance(b, nil)
		na, nb := float64(len(a)), float64(len(b))
		sp := ((na-1)*va + (nb-1)*vb) / (na + nb - 2)
		student := (ma - mb) / math.Sqrt(sp*(1/na+1/nb))
		if math.Abs(got.T-student) > 1e-9*math.Max(1, math.Abs(student)) {
			t.Errorf("n=%d: t = %v, Student's pooled t %v", n, got.T, student)
		}
	}
}

func TestCorrelationTestErrors(t *testing.T) {
	for _, c := range []struct {
		name string
		x, y []float64
	}{
		{"lengths", []float64{1, 2, 3}, []float64{1, 2}},
		{"too few", []float64{1, 2}, []float64{1, 2}},
		{"constant", []float64{1, 1, 1}, []float64{1, 2, 3}},
		{"NaN", []float64{1, math.NaN(), 3}, []float64{1, 2, 3}},
	} {
		if _, err := CorrelationTest(c.x, c.y); err == nil {
			t.Errorf("%s: no error", c.name)
		}
	}
	got, err := CorrelationTest([]float64{1, 2, 3}, []float64{2, 4, 6})
	if err != nil || got.R != 1 || !math.IsInf(got.T, 1) || got.PValue != 0 {
		t.Errorf("perfect correlation: %+v, %v", got, err)
	}
}
