package compute

import "fmt"

// Series is one subject's region-averaged time series: T time points by P
// regions, stored row-major, so Data[t*P+j] is region j at time point t.
type Series struct {
	T, P int
	Data []float64
}

// NewSeries returns a zero T x p series.
func NewSeries(t, p int) Series {
	return Series{T: t, P: p, Data: make([]float64, t*p)}
}

// At returns region j at time point t.
func (s Series) At(t, j int) float64 { return s.Data[t*s.P+j] }

// Column returns a copy of region j's series.
func (s Series) Column(j int) []float64 {
	c := make([]float64, s.T)
	for t := range c {
		c[t] = s.Data[t*s.P+j]
	}
	return c
}

// Matrix32 is a dense row-major float32 matrix: Rows vectors of length Cols.
// Window correlation vectors and state centroids are stored this way.
type Matrix32 struct {
	Rows, Cols int
	Data       []float32
}

// NewMatrix32 returns a zero rows x cols matrix.
func NewMatrix32(rows, cols int) Matrix32 {
	return Matrix32{Rows: rows, Cols: cols, Data: make([]float32, rows*cols)}
}

// Row returns row i as a slice sharing the matrix's storage.
func (m Matrix32) Row(i int) []float32 { return m.Data[i*m.Cols : (i+1)*m.Cols] }

// PairCount returns p(p-1)/2, the number of region pairs i < j.
func PairCount(p int) int { return p * (p - 1) / 2 }

// PairIndex returns the position of pair (i, j), i < j < p, in the upper
// triangle stored row-major: (0,1), (0,2), ..., (0,p-1), (1,2), ...
func PairIndex(p, i, j int) int {
	if i >= j || j >= p || i < 0 {
		panic(fmt.Sprintf("compute: pair (%d,%d) is not i<j<%d", i, j, p))
	}
	return i*(2*p-i-1)/2 + (j - i - 1)
}

// PairOf is the inverse of PairIndex.
func PairOf(p, k int) (i, j int) {
	for i = 0; i < p-1; i++ {
		row := p - i - 1
		if k < row {
			return i, i + 1 + k
		}
		k -= row
	}
	panic(fmt.Sprintf("compute: pair index %d out of range for p=%d", k, p))
}
