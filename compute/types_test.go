package compute

import "testing"

// The pair order is the row-major upper triangle (docs/methods.md §2).
func TestPairIndexRoundTrip(t *testing.T) {
	for _, p := range []int{2, 3, 7, 100, 200} {
		k := 0
		for i := 0; i < p; i++ {
			for j := i + 1; j < p; j++ {
				if got := PairIndex(p, i, j); got != k {
					t.Fatalf("p=%d PairIndex(%d,%d)=%d, want %d", p, i, j, got, k)
				}
				if gi, gj := PairOf(p, k); gi != i || gj != j {
					t.Fatalf("p=%d PairOf(%d)=(%d,%d), want (%d,%d)", p, k, gi, gj, i, j)
				}
				k++
			}
		}
		if k != PairCount(p) {
			t.Fatalf("p=%d: %d pairs, PairCount says %d", p, k, PairCount(p))
		}
	}
}
