package compute

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// CorrelationResult is Pearson's correlation with its t-test.
type CorrelationResult struct {
	R, T, DF, PValue float64
	N                int // pairs used
}

// CorrelationTest tests for a linear association between paired samples x
// and y with Pearson's correlation
//
//	r = sum (x_i - mean x)(y_i - mean y) / sqrt(sum (x_i - mean x)^2 sum (y_i - mean y)^2)
//
// and, under bivariate normality with no association,
//
//	t = r sqrt((n-2) / (1 - r^2)),  df = n - 2,
//
// with the two-sided p-value 2 P(T_df >= |t|) from the Student t
// distribution of gonum's stat/distuv. |r| = 1 gives t = ±Inf and p = 0.
// It returns an error when the lengths differ, n < 3, a value is NaN or
// infinite, or x or y is constant (r undefined).
func CorrelationTest(x, y []float64) (CorrelationResult, error) {
	if len(x) != len(y) {
		return CorrelationResult{}, fmt.Errorf("compute: correlation needs paired samples, got lengths %d and %d", len(x), len(y))
	}
	n := len(x)
	if n < 3 {
		return CorrelationResult{}, fmt.Errorf("compute: correlation test needs at least 3 pairs, got %d", n)
	}
	if err := checkFinite("x", x); err != nil {
		return CorrelationResult{}, err
	}
	if err := checkFinite("y", y); err != nil {
		return CorrelationResult{}, err
	}
	mx, _ := meanVar(x)
	my, _ := meanVar(y)
	var sxx, syy, sxy float64
	for i := range x {
		dx, dy := x[i]-mx, y[i]-my
		sxx += dx * dx
		syy += dy * dy
		sxy += dx * dy
	}
	if sxx == 0 || syy == 0 {
		return CorrelationResult{}, errors.New("compute: correlation of a constant sample is undefined")
	}
	r := max(-1, min(1, sxy/math.Sqrt(sxx*syy)))
	df := float64(n - 2)
	res := CorrelationResult{R: r, DF: df, N: n}
	if math.Abs(r) == 1 {
		res.T = math.Copysign(math.Inf(1), r)
		return res, nil
	}
	res.T = r * math.Sqrt(df/(1-r*r))
	res.PValue = min(1, 2*distuv.StudentsT{Mu: 0, Sigma: 1, Nu: df}.Survival(math.Abs(res.T)))
	return res, nil
}
