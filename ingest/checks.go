package ingest

import (
	"fmt"
	"math"
)

// MaxTR is the largest repetition time accepted, in seconds: a day between
// volumes is not an fMRI series but a unit mistake (milliseconds written as
// seconds, or a corrupt header). Durations are TR multiples, so an absurd TR
// would give absurd or infinite dwell times.
const MaxTR = 86400

// CheckTR reports why tr cannot be a repetition time in seconds, or nil.
// Every TR the tool reads (--tr, a sidecar's RepetitionTime, a NIfTI
// header's pixdim[4], simulate --tr) goes through this one function, so a
// plausibility range joins it in one place. The message names no source;
// the caller adds the option or the file.
func CheckTR(tr float64) error {
	switch {
	case math.IsNaN(tr) || math.IsInf(tr, 0):
		return fmt.Errorf("%v is not a finite number of seconds", tr)
	case tr <= 0:
		return fmt.Errorf("%v is not a positive number of seconds", tr)
	case tr > MaxTR:
		return fmt.Errorf("%g seconds is more than a day between volumes; the repetition time is in seconds (for example 0.8 or 2.5, not milliseconds)", tr)
	}
	return nil
}

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
