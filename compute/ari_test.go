package compute

import (
	"math"
	"math/rand/v2"
	"testing"
)

// pairCountARI is an independent O(n^2) reference: it counts item pairs
// directly, n11 together in both, n10 together in a only, n01 in b only,
// n00 apart in both, and uses the pair-counting form of the ARI,
// 2 (n00 n11 - n01 n10) / ((n00 + n01)(n01 + n11) + (n00 + n10)(n10 + n11))
// (algebraically equal to Hubert and Arabie's 1985 formula; from memory, as
// in Steinley 2004).
func pairCountARI(a, b []int) float64 {
	var n11, n10, n01, n00 float64
	for i := range a {
		for j := i + 1; j < len(a); j++ {
			sa, sb := a[i] == a[j], b[i] == b[j]
			switch {
			case sa && sb:
				n11++
			case sa:
				n10++
			case sb:
				n01++
			default:
				n00++
			}
		}
	}
	return 2 * (n00*n11 - n01*n10) / ((n00+n01)*(n01+n11) + (n00+n10)*(n10+n11))
}

func TestAdjustedRandIndex(t *testing.T) {
	// Worked example, Hubert and Arabie (1985) formula by hand:
	//   a = 0 0 0 1 1 1, b = 0 0 1 1 2 2; contingency table
	//          b=0 b=1 b=2 | a_i
	//     a=0   2   1   0  |  3
	//     a=1   0   1   2  |  3
	//     b_j   2   2   2  |  n = 6
	//   index    = C(2,2) + C(2,2) = 2
	//   sum C(a_i) = 3 + 3 = 6, sum C(b_j) = 1 + 1 + 1 = 3, C(6,2) = 15
	//   expected = 6 * 3 / 15 = 1.2, maximum = (6 + 3) / 2 = 4.5
	//   ARI = (2 - 1.2) / (4.5 - 1.2) = 0.8 / 3.3 = 0.242424...
	a := []int{0, 0, 0, 1, 1, 1}
	b := []int{0, 0, 1, 1, 2, 2}
	const want = 0.8 / 3.3
	for _, tc := range []struct {
		name string
		a, b []int
		want float64
	}{
		{"worked example", a, b, want},
		{"swapped arguments", b, a, want},
		{"relabelled", []int{7, 7, 7, -3, -3, -3}, []int{5, 5, 9, 9, 0, 0}, want},
		{"identical", b, b, 1},
		{"identical up to labels", a, []int{4, 4, 4, 2, 2, 2}, 1},
		{"both one cluster", []int{1, 1, 1}, []int{0, 0, 0}, 1},
		{"both singletons", []int{0, 1, 2}, []int{2, 0, 1}, 1},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if got := AdjustedRandIndex(tc.a, tc.b); math.Abs(got-tc.want) > 1e-12 {
				t.Errorf("ARI = %v, want %v", got, tc.want)
			}
		})
	}
	t.Run("pair counting", func(t *testing.T) {
		r := rand.New(rand.NewPCG(3, 3))
		checked := 0
		for trial := 0; trial < 50; trial++ {
			n := 2 + r.IntN(120)
			ka, kb := 1+r.IntN(6), 2+r.IntN(6)
			x, y := make([]int, n), make([]int, n)
			for i := range x {
				x[i] = r.IntN(ka)
				y[i] = r.IntN(kb)
				if r.IntN(3) == 0 { // make them related
					y[i] = x[i]
				}
			}
			want := pairCountARI(x, y)
			if math.IsNaN(want) {
				continue // the pair form is 0/0 only in the identical cases tested above
			}
			if got := AdjustedRandIndex(x, y); math.Abs(got-want) > 1e-12 {
				t.Fatalf("trial %d: ARI = %v, pair counting %v", trial, got, want)
			}
			checked++
		}
		if checked < 45 {
			t.Fatalf("only %d of 50 trials compared", checked)
		}
	})
}
