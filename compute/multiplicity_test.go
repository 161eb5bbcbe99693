package compute

import (
	"math"
	"math/rand/v2"
	"testing"
)

// bruteStepUp is the adjusted p-value straight from its definition, O(m^2)
// and without sorting: for p_i, the smallest c*m*p_k/#{l : p_l <= p_k} over
// the p_k >= p_i, capped at 1 (Benjamini and Hochberg 1995 with c = 1,
// Benjamini and Yekutieli 2001 with c = sum 1/i; R's p.adjust methods "BH"
// and "BY" state the same formulas). NaN is missing.
func bruteStepUp(p []float64, by bool) []float64 {
	m := countFinite(p)
	c := 1.0
	if by {
		for i := 1; i <= m; i++ {
			c += 1 / float64(i)
		}
		c -= 1
	}
	q := make([]float64, len(p))
	for i, pi := range p {
		if math.IsNaN(pi) {
			q[i] = math.NaN()
			continue
		}
		best := 1.0
		for _, pk := range p {
			if math.IsNaN(pk) || pk < pi {
				continue
			}
			rank := 0
			for _, pl := range p {
				if !math.IsNaN(pl) && pl <= pk {
					rank++
				}
			}
			best = min(best, c*float64(m)*pk/float64(rank))
		}
		q[i] = best
	}
	return q
}

// Random families with ties and NaNs against the definition.
func TestAdjustAgainstDefinition(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	for trial := range 200 {
		m := 1 + rng.IntN(40)
		p := make([]float64, m)
		for i := range p {
			switch rng.IntN(5) {
			case 0:
				p[i] = math.NaN()
			case 1:
				p[i] = math.Round(rng.Float64()*8) / 100 // ties
			default:
				p[i] = rng.Float64() * rng.Float64()
			}
		}
		for _, method := range []AdjustMethod{AdjustBH, AdjustBY} {
			got, err := AdjustPValues(p, method)
			if err != nil {
				t.Fatal(err)
			}
			want := bruteStepUp(p, method == AdjustBY)
			for i := range p {
				if math.IsNaN(want[i]) != math.IsNaN(got[i]) || math.Abs(got[i]-want[i]) > 1e-15 {
					t.Errorf("trial %d %s p[%d]=%v: got %v, definition %v", trial, method, i, p[i], got[i], want[i])
				}
			}
		}
	}
}

// The worked example of Benjamini and Hochberg (1995, section 4; the 15
// p-values from memory): at FDR 0.05 the step-up rejects the four smallest.
// Benjamini-Yekutieli on the same family: c(15) = 3.3182, the thresholds
// 0.05 i / (15 c) are 0.001005 i, so p_(3) = 0.0019 <= 0.003015 and no
// p_(i) with i >= 4 is below its threshold (0.0095 > 0.00402, ...): three
// rejections (hand computation from the 2001 paper's Theorem 1.3).
func TestAdjustWorkedExample(t *testing.T) {
	p := []float64{0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.000}
	for _, c := range []struct {
		method AdjustMethod
		want   int
	}{{AdjustBH, 4}, {AdjustBY, 3}} {
		q, err := AdjustPValues(p, c.method)
		if err != nil {
			t.Fatal(err)
		}
		n := 0
		for _, v := range q {
			if v <= 0.05 {
				n++
			}
		}
		if n != c.want {
			t.Errorf("%s: %d rejections at 0.05 (q = %v), want %d", c.method, n, q, c.want)
		}
	}
	if c := HarmonicNumber(15); math.Abs(c-3.318228993228993) > 1e-15 {
		t.Errorf("c(15) = %.16g, want 3.318228993228993 (= 1195757/360360, the exact sum)", c)
	}
}

func TestAdjustErrors(t *testing.T) {
	if _, err := AdjustPValues([]float64{0.1, 1.5}, AdjustBH); err == nil {
		t.Error("p = 1.5: no error")
	}
	if _, err := AdjustPValues([]float64{0.1}, "holm"); err == nil {
		t.Error("unknown method: no error")
	}
	if q, err := AdjustPValues(nil, AdjustBY); err != nil || len(q) != 0 {
		t.Errorf("empty family: %v, %v", q, err)
	}
}

// Issue 11 item 6: 10,000 p-values in well under a second.
func BenchmarkAdjustBH10000(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 2))
	p := make([]float64, 10_000)
	for i := range p {
		p[i] = rng.Float64()
	}
	for b.Loop() {
		if _, err := AdjustPValues(p, AdjustBH); err != nil {
			b.Fatal(err)
		}
	}
}
