package compute

import (
	"fmt"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
)

// CoreTimepoints returns, for every state 0..k-1, the core time points of a
// series of T time points whose windows (width w, step s, window i covering
// i*s .. i*s+w-1) carry labels: the time points t covered by at least one
// window and whose every covering window has that state's label, in
// ascending order (docs/methods.md §7). A run of L consecutive windows of
// one state (step 1) has L - w + 1 core time points, lying at least about
// w/2 time points inside the estimated switches on either side, so they
// come from a stretch of one state rather than from windows straddling a
// switch. Errors: k < 1, w < 2, s < 1, a label outside [0, k), or a number
// of labels other than NumWindows(T, w, s).
func CoreTimepoints(labels []int, k, T, w, s int) ([][]int, error) {
	if k < 1 || w < 2 || s < 1 {
		return nil, fmt.Errorf("compute: core time points need k >= 1, width >= 2, step >= 1 (got %d, %d, %d)", k, w, s)
	}
	if n := NumWindows(T, w, s); len(labels) != n {
		return nil, fmt.Errorf("compute: %d labels for %d windows of %d time points", len(labels), n, T)
	}
	out := make([][]int, k)
	for _, l := range labels {
		if l < 0 || l >= k {
			return nil, fmt.Errorf("compute: label %d outside [0, %d)", l, k)
		}
	}
	for t := 0; t < T; t++ {
		// Windows covering t: i*s <= t <= i*s + w - 1.
		lo := 0
		if t-w+1 > 0 {
			lo = (t - w + 1 + s - 1) / s
		}
		hi := min(t/s, len(labels)-1)
		if lo > hi {
			continue // not covered (the tail after the last window)
		}
		l := labels[lo]
		pure := true
		for i := lo + 1; i <= hi; i++ {
			if labels[i] != l {
				pure = false
				break
			}
		}
		if pure {
			out[l] = append(out[l], t)
		}
	}
	return out, nil
}

// CorrelationOfRows returns the Pearson correlations between the columns
// (regions) of y over the time points rows, as the upper triangle in
// PairIndex order (the layout of a window vector), computed with gonum's
// stat.CorrelationMatrix. Errors: fewer than 2 rows, a row outside [0, T),
// or a region constant over the rows (its correlation is undefined).
func CorrelationOfRows(y Series, rows []int) ([]float64, error) {
	if len(rows) < 2 {
		return nil, fmt.Errorf("compute: a correlation needs 2 time points, got %d", len(rows))
	}
	x := mat.NewDense(len(rows), y.P, nil)
	for r, t := range rows {
		if t < 0 || t >= y.T {
			return nil, fmt.Errorf("compute: time point %d outside [0, %d)", t, y.T)
		}
		x.SetRow(r, y.Data[t*y.P:(t+1)*y.P])
	}
	var c mat.SymDense
	stat.CorrelationMatrix(&c, x, nil)
	out := make([]float64, 0, PairCount(y.P))
	for i := 0; i < y.P; i++ {
		for j := i + 1; j < y.P; j++ {
			v := c.At(i, j)
			if v != v {
				return nil, fmt.Errorf("compute: region %d or %d is constant over the %d time points", i+1, j+1, len(rows))
			}
			out = append(out, v)
		}
	}
	return out, nil
}
