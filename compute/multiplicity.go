package compute

import (
	"fmt"
	"math"
)

// BenjaminiYekutieli returns the Benjamini-Yekutieli (2001, Theorem 1.3)
// adjusted p-values, in the input order: the BH step-up of
// BenjaminiHochberg run at level alpha / c(m), c(m) = sum_{i=1}^m 1/i,
// which controls the false discovery rate under any dependence between
// the tests (docs/methods.md §9). As adjusted p-values,
//
//	q_(i) = min(1, min over j >= i of c(m) (m/j) p_(j)) = min(1, c(m) q_BH(i)),
//
// with m the number of non-NaN p-values (the second form because c(m) >= 1
// and the BH value is capped at 1). NaN entries stay NaN and are not
// counted; ties get one adjusted value (that of their highest rank), as in
// BenjaminiHochberg. A value outside [0, 1] panics, as there.
func BenjaminiYekutieli(p []float64) []float64 {
	q := BenjaminiHochberg(p)
	c := HarmonicNumber(countFinite(p))
	for i, v := range q {
		if !math.IsNaN(v) {
			q[i] = min(1, c*v)
		}
	}
	return q
}

// HarmonicNumber returns c(m) = sum_{i=1}^m 1/i (0 for m <= 0), the
// Benjamini-Yekutieli (2001) constant. Summed from the smallest term up.
func HarmonicNumber(m int) float64 {
	var s float64
	for i := m; i >= 1; i-- {
		s += 1 / float64(i)
	}
	return s
}

func countFinite(p []float64) int {
	n := 0
	for _, v := range p {
		if !math.IsNaN(v) {
			n++
		}
	}
	return n
}

// AdjustMethod names a multiplicity adjustment.
type AdjustMethod string

// The adjustments AdjustPValues knows.
const (
	AdjustBH AdjustMethod = "bh" // Benjamini-Hochberg (1995): FDR under independence or positive dependence
	AdjustBY AdjustMethod = "by" // Benjamini-Yekutieli (2001): FDR under any dependence
)

// AdjustPValues applies method to one family of p-values (NaN = missing,
// kept NaN and not counted). Unlike BenjaminiHochberg it returns an error,
// not a panic, for a value outside [0, 1] or an unknown method, naming the
// offending element (1-based). Time O(m log m).
func AdjustPValues(p []float64, method AdjustMethod) ([]float64, error) {
	for i, v := range p {
		if !math.IsNaN(v) && (v < 0 || v > 1) {
			return nil, fmt.Errorf("compute: p-value %d is %v, not in [0, 1]", i+1, v)
		}
	}
	switch method {
	case AdjustBH:
		return BenjaminiHochberg(p), nil
	case AdjustBY:
		return BenjaminiYekutieli(p), nil
	}
	return nil, fmt.Errorf("compute: unknown adjustment %q (want %q or %q)", method, AdjustBH, AdjustBY)
}
