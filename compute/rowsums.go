package compute

import "fmt"

// SumRowsByLabel returns, for each label l in [0, k), the float64 sum of the
// rows of m labelled l (sums[l], nil when no row is) and their number. Each
// row is added in row order, every value widened to float64 before the
// addition. It panics if len(labels) != m.Rows or a label is outside
// [0, k).
func SumRowsByLabel(m Matrix32, labels []int, k int) (sums [][]float64, counts []int) {
	if len(labels) != m.Rows {
		panic(fmt.Sprintf("compute: %d labels for %d rows", len(labels), m.Rows))
	}
	sums = make([][]float64, k)
	counts = make([]int, k)
	for row, l := range labels {
		if l < 0 || l >= k {
			panic(fmt.Sprintf("compute: label %d outside [0, %d)", l, k))
		}
		if sums[l] == nil {
			sums[l] = make([]float64, m.Cols)
		}
		addWiden(sums[l], m.Row(row))
		counts[l]++
	}
	return sums, counts
}
