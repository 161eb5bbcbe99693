package compute

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// TestPrincipalScoresMatchGonumSVD checks the Gram-matrix route to the
// principal component scores against gonum's thin SVD of the centred data
// (reference library): the scores U S agree column by column up to sign,
// and the basis V agrees with the SVD's right singular vectors.
func TestPrincipalScoresMatchGonumSVD(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 4))
	n, d := 12, 40
	x := NewMatrix32(n, d)
	for i := range x.Data {
		x.Data[i] = float32(r.NormFloat64())
	}
	scores, mean, basis, err := principalScores(x, true)
	if err != nil {
		t.Fatal(err)
	}
	if scores.RawMatrix().Cols != n-1 {
		t.Fatalf("rank %d, want n-1 = %d (centred data)", scores.RawMatrix().Cols, n-1)
	}
	xc := mat.NewDense(n, d, nil)
	for i := 0; i < n; i++ {
		for j := 0; j < d; j++ {
			xc.Set(i, j, float64(x.Data[i*d+j])-mean[j])
		}
	}
	var svd mat.SVD
	if !svd.Factorize(xc, mat.SVDThin) {
		t.Fatal("gonum SVD failed")
	}
	var u, v mat.Dense
	svd.UTo(&u)
	svd.VTo(&v)
	s := svd.Values(nil)
	for c := 0; c < n-1; c++ {
		sign := 1.0
		if u.At(0, c)*scores.At(0, c) < 0 {
			sign = -1
		}
		for i := 0; i < n; i++ {
			want := u.At(i, c) * s[c]
			if got := sign * scores.At(i, c); math.Abs(got-want) > 1e-4*s[0] {
				t.Fatalf("component %d row %d: score %v, SVD %v", c, i, got, want)
			}
		}
		for j := 0; j < d; j++ {
			if got, want := sign*basis.At(j, c), v.At(j, c); math.Abs(got-want) > 1e-4 {
				t.Fatalf("component %d coordinate %d: basis %v, SVD %v", c, j, got, want)
			}
		}
	}
}

// TestGapPickRule checks the selection rule of Tibshirani, Walther and
// Hastie (2001), step 3: the smallest k with Gap(k) >= Gap(k+1) - s(k+1),
// on values worked by hand.
func TestGapPickRule(t *testing.T) {
	ks := []int{1, 2, 3, 4}
	cases := []struct {
		gap, se []float64
		want    int
	}{
		// Gap rises then flattens: 1: 0.1 >= 0.5-0.05? no; 2: 0.5 >= 0.52-0.05 = 0.47 yes.
		{[]float64{0.1, 0.5, 0.52, 0.53}, []float64{0.05, 0.05, 0.05, 0.05}, 2},
		// Gap falls from the start: k = 1 (no evidence of more than one cluster).
		{[]float64{0.3, 0.2, 0.1, 0.0}, []float64{0.02, 0.02, 0.02, 0.02}, 1},
		// Within one s.e.: 0.40 >= 0.45 - 0.06 = 0.39, so k = 1.
		{[]float64{0.40, 0.45, 0.46, 0.47}, []float64{0.06, 0.06, 0.06, 0.06}, 1},
		// Always rising by more than s: the last k.
		{[]float64{0.1, 0.3, 0.5, 0.7}, []float64{0.01, 0.01, 0.01, 0.01}, 4},
		// NaN never qualifies.
		{[]float64{math.NaN(), 0.3, 0.3, 0.2}, []float64{0.01, 0.01, 0.01, 0.01}, 2},
	}
	for i, c := range cases {
		if got := GapPick(ks, c.gap, c.se); got != c.want {
			t.Errorf("case %d: GapPick = %d, want %d", i, got, c.want)
		}
	}
	if GapPick(nil, nil, nil) != 0 {
		t.Error("empty input should give 0")
	}
}

// TestGapStatisticDefinitions checks GapStatistic against its definition:
// log W(1) is the log of the total sum of squares about the mean (computed
// here directly), Gap = RefLogW - LogW, s(k) = sd sqrt(1 + 1/B), and the
// reference box: for uniform scores of widths w_j, E W*(1) = (n - 1)
// sum_j w_j^2 / 12 (variance of a uniform distribution, w^2/12), so the
// mean of log W*(1) over the references is close to its log.
func TestGapStatisticDefinitions(t *testing.T) {
	r := rand.New(rand.NewPCG(5, 6))
	n, d := 150, 6
	x := NewMatrix32(n, d)
	for i := range x.Data {
		x.Data[i] = float32(r.NormFloat64() * float64(1+i%d))
	}
	g, err := GapStatistic(x, 1, 4, GapOptions{References: 40}, 7)
	if err != nil {
		t.Fatal(err)
	}
	if g.Rows != n || g.Components != d || g.References != 40 || len(g.Points) != 4 {
		t.Fatalf("rows %d components %d references %d points %d", g.Rows, g.Components, g.References, len(g.Points))
	}
	mean := make([]float64, d)
	for i := 0; i < n; i++ {
		for j, v := range x.Row(i) {
			mean[j] += float64(v) / float64(n)
		}
	}
	tss := 0.0
	for i := 0; i < n; i++ {
		for j, v := range x.Row(i) {
			tss += (float64(v) - mean[j]) * (float64(v) - mean[j])
		}
	}
	if p := g.Points[0]; math.Abs(p.LogW-math.Log(tss)) > 1e-5 {
		t.Errorf("log W(1) = %v, log of the total sum of squares = %v", p.LogW, math.Log(tss))
	}
	for _, p := range g.Points {
		if math.Abs(p.Gap-(p.RefLogW-p.LogW)) > 1e-12 || !(p.SE > 0) {
			t.Errorf("k=%d: gap %v, ref %v, log W %v, se %v", p.K, p.Gap, p.RefLogW, p.LogW, p.SE)
		}
	}
	scores, _, _, err := principalScores(x, false)
	if err != nil {
		t.Fatal(err)
	}
	want := 0.0
	for j := 0; j < d; j++ {
		lo, hi := math.Inf(1), math.Inf(-1)
		for i := 0; i < n; i++ {
			lo, hi = math.Min(lo, scores.At(i, j)), math.Max(hi, scores.At(i, j))
		}
		want += (hi - lo) * (hi - lo) / 12
	}
	want = math.Log(float64(n-1) * want)
	if got := g.Points[0].RefLogW; math.Abs(got-want) > 0.05 {
		t.Errorf("mean log W*(1) = %v, log((n-1) sum w^2/12) = %v", got, want)
	}
}

// TestGapStatisticPicksKnownClusters reproduces two of the settings of
// Tibshirani, Walther and Hastie (2001, section 6): a null model (uniform
// on the unit hypercube in 10 dimensions, 200 points) where the gap
// statistic should say one cluster, and three well-separated spherical
// clusters where it should say three. (The paper reports its success rate
// over 50 simulations; here one seed each, with a margin of separation
// that makes the answer unambiguous.) It also checks the L1 path.
func TestGapStatisticPicksKnownClusters(t *testing.T) {
	r := rand.New(rand.NewPCG(11, 12))
	null := NewMatrix32(200, 10)
	for i := range null.Data {
		null.Data[i] = float32(r.Float64())
	}
	g, err := GapStatistic(null, 1, 6, GapOptions{}, 1)
	if err != nil {
		t.Fatal(err)
	}
	if g.K != 1 {
		t.Errorf("uniform null: gap picks %d, want 1 (%+v)", g.K, g.Points)
	}
	three := NewMatrix32(150, 2)
	centres := [][2]float64{{0, 0}, {0, 5}, {5, -3}}
	for i := 0; i < 150; i++ {
		c := centres[i%3]
		three.Data[2*i] = float32(c[0] + r.NormFloat64()*0.5)
		three.Data[2*i+1] = float32(c[1] + r.NormFloat64()*0.5)
	}
	for _, dist := range []Distance{SquaredEuclidean, Manhattan} {
		g, err := GapStatistic(three, 1, 6, GapOptions{Distance: dist}, 1)
		if err != nil {
			t.Fatal(err)
		}
		if g.K != 3 {
			t.Errorf("%v, three clusters: gap picks %d, want 3 (%+v)", dist, g.K, g.Points)
		}
	}
}

// TestGapStatisticSubsampleAndWorkers checks that the subsample has the
// requested size, that the result does not depend on Workers, and that bad
// ranges are refused.
func TestGapStatisticSubsampleAndWorkers(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	x := NewMatrix32(300, 20)
	for i := range x.Data {
		x.Data[i] = float32(r.NormFloat64())
	}
	a, err := GapStatistic(x, 1, 3, GapOptions{Sample: 100, References: 3}, 9)
	if err != nil {
		t.Fatal(err)
	}
	b, err := GapStatistic(x, 1, 3, GapOptions{Sample: 100, References: 3, Workers: 3}, 9)
	if err != nil {
		t.Fatal(err)
	}
	if a.Rows != 100 || a.Components != 20 {
		t.Errorf("rows %d components %d, want 100 and 20", a.Rows, a.Components)
	}
	for i := range a.Points {
		if a.Points[i] != b.Points[i] {
			t.Errorf("workers changed k=%d: %+v vs %+v", a.Points[i].K, a.Points[i], b.Points[i])
		}
	}
	if _, err := GapStatistic(x, 0, 3, GapOptions{}, 1); err == nil {
		t.Error("kmin 0 accepted")
	}
	if _, err := GapStatistic(x, 1, 200, GapOptions{Sample: 100}, 1); err == nil {
		t.Error("kmax above the sample size accepted")
	}
}
