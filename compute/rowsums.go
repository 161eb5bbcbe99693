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
	rs := NewRowSums(k, m.Cols)
	for row, l := range labels {
		rs.Add(m.Row(row), l)
	}
	return rs.Sums, rs.Counts
}

// RowSums is SumRowsByLabel one row at a time, for rows that are not kept
// (SlidingCorrelationsEach): adding the rows of m in row order gives
// exactly SumRowsByLabel's sums and counts.
type RowSums struct {
	Sums   [][]float64 // per label, nil until a row with that label is added
	Counts []int
	cols   int
}

// NewRowSums returns empty sums for labels [0, k) of rows of cols values.
func NewRowSums(k, cols int) *RowSums {
	return &RowSums{Sums: make([][]float64, k), Counts: make([]int, k), cols: cols}
}

// Add adds row to the sum of label l. It panics if l is outside [0, k) or
// the row's length is not cols.
func (s *RowSums) Add(row []float32, l int) {
	if l < 0 || l >= len(s.Sums) {
		panic(fmt.Sprintf("compute: label %d outside [0, %d)", l, len(s.Sums)))
	}
	if len(row) != s.cols {
		panic(fmt.Sprintf("compute: row of %d values, want %d", len(row), s.cols))
	}
	if s.Sums[l] == nil {
		s.Sums[l] = make([]float64, s.cols)
	}
	addWiden(s.Sums[l], row)
	s.Counts[l]++
}
