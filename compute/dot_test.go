package compute

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/blas/gonum"
)

// The dot kernels against gonum's Dsdot (the BLAS reference routine for a
// float32 dot product accumulated in float64) and against the definition:
// every product of two float32 values is exact in float64, so the only
// difference allowed is the float64 rounding of the sum, bounded here by
// n * 2^-52 * sum |x_j y_j| (the standard error bound of recursive
// summation, Higham, Accuracy and Stability of Numerical Algorithms, 2002,
// eq. 4.4; from memory).
func TestDotKernels(t *testing.T) {
	var ref gonum.Implementation
	r := rand.New(rand.NewPCG(3, 3))
	for _, n := range []int{0, 1, 7, 8, 9, 15, 16, 17, 31, 33, 100, 4950} {
		for _, k := range []int{1, 2, 3, 4, 5, 7, 10} {
			t.Run(fmt.Sprintf("n=%d/k=%d", n, k), func(t *testing.T) {
				x := make([]float32, n)
				for j := range x {
					x[j] = float32(r.NormFloat64()) * 3
				}
				c := NewMatrix32(k, n)
				for j := range c.Data {
					c.Data[j] = float32(r.NormFloat64())
				}
				got := make([]float64, k)
				dotsRow(x, widen(c), got)
				// dotsIdx on the rows in reverse order, each row once.
				idx := make([]int, k)
				for m := range idx {
					idx[m] = k - 1 - m
				}
				byIdx := make([]float64, k)
				dotsIdx(x, widen(c), idx, byIdx)
				by32 := make([]float64, k)
				dotsIdx32(x, c, idx, by32)
				for q, m := range idx {
					if byIdx[q] != got[m] {
						t.Fatalf("dotsIdx row %d: %v, dotsRow %v", m, byIdx[q], got[m])
					}
					if by32[q] != got[m] {
						t.Fatalf("dotsIdx32 row %d: %v, dotsRow %v", m, by32[q], got[m])
					}
				}
				for m := range k {
					cm := c.Row(m)
					var abs float64
					for j := range x {
						abs += math.Abs(float64(x[j]) * float64(cm[j]))
					}
					bound := float64(n+1) * 0x1p-52 * abs
					want := ref.Dsdot(n, x, 1, cm, 1)
					if math.Abs(got[m]-want) > 2*bound {
						t.Fatalf("centre %d: dotsRow %v, Dsdot %v", m, got[m], want)
					}
					if d := dot32(x, cm); d != got[m] {
						t.Fatalf("centre %d: dot32 %v differs from dotsRow %v", m, d, got[m])
					}
				}
			})
		}
	}
}

// addWiden and moveWiden against their definition, element by element in
// float64: each result is one float64 addition, so they must agree exactly.
func TestWidenKernels(t *testing.T) {
	r := rand.New(rand.NewPCG(5, 5))
	for _, n := range []int{0, 1, 7, 8, 9, 17, 4950} {
		x := make([]float32, n)
		acc := make([]float64, n)
		into := make([]float64, n)
		for j := range x {
			x[j] = float32(r.NormFloat64())
			acc[j] = r.NormFloat64() * 100
			into[j] = r.NormFloat64()
		}
		wantAdd := make([]float64, n)
		wantFrom := make([]float64, n)
		wantInto := make([]float64, n)
		for j, v := range x {
			wantAdd[j] = acc[j] + float64(v)
			wantFrom[j] = acc[j] - float64(v)
			wantInto[j] = into[j] + float64(v)
		}
		from := slices.Clone(acc)
		addWiden(acc, x)
		moveWiden(from, into, x)
		if !slices.Equal(acc, wantAdd) || !slices.Equal(from, wantFrom) || !slices.Equal(into, wantInto) {
			t.Fatalf("n=%d: widening kernels differ from the definition", n)
		}
	}
}

func BenchmarkDotsRow(b *testing.B) {
	x := randomMatrix(1, 4950, 1).Data
	for _, k := range []int{1, 2, 4, 10} {
		c := widen(randomMatrix(k, 4950, 2))
		out := make([]float64, k)
		b.Run(fmt.Sprintf("k=%d", k), func(b *testing.B) {
			b.SetBytes(int64(4 * 4950 * (k + 1)))
			for b.Loop() {
				dotsRow(x, c, out)
			}
		})
	}
}
