package ingest

import (
	"fmt"
	"math"
)

// MaxValue bounds the magnitude of a series value. Products and sums of
// squares of values near the float64 limit (1.8e308) overflow to infinity
// and the correlations become undefined; 1e100 leaves every product of two
// values and every sum of squares over 10^100 time points finite, while no
// measured signal comes near it.
const MaxValue = 1e100

// checkValue reports why v cannot be a series value, or nil.
func checkValue(v float64) error {
	switch {
	case math.IsNaN(v) || math.IsInf(v, 0):
		return fmt.Errorf("%w: %v; interpolate or drop the time point before ingest", ErrNonNumeric, v)
	case math.Abs(v) > MaxValue:
		return fmt.Errorf("%w: %g is larger in magnitude than %g, where products of values overflow; rescale the series (for example to percent signal change)", ErrNonNumeric, v, MaxValue)
	}
	return nil
}
