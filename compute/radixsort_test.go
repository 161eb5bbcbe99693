package compute

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// checkSortedLikeStdlib sorts a copy of x with sortFloat64s and compares it
// with the standard library's slices.Sort as the oracle: position by
// position the values must be == and, except for zeros, bit-identical.
// slices.Sort leaves the order of -0 and +0 unspecified (they compare
// equal), so for zeros the test checks instead that both outputs hold the
// same number of -0 and that the radix output puts every -0 before every
// +0 (its documented order).
func checkSortedLikeStdlib(t *testing.T, name string, x []float64) {
	t.Helper()
	got := slices.Clone(x)
	sortFloat64s(got)
	want := slices.Clone(x)
	slices.Sort(want)
	if len(got) != len(want) {
		t.Fatalf("%s: length %d, want %d", name, len(got), len(want))
	}
	negZero := func(v float64) bool { return v == 0 && math.Signbit(v) }
	var gotNeg, wantNeg int
	for i := range want {
		if got[i] != want[i] || (want[i] != 0 && math.Float64bits(got[i]) != math.Float64bits(want[i])) {
			t.Fatalf("%s (n=%d): position %d is %v (bits %#x), slices.Sort gives %v (bits %#x)",
				name, len(x), i, got[i], math.Float64bits(got[i]), want[i], math.Float64bits(want[i]))
		}
		if negZero(got[i]) {
			gotNeg++
		}
		if negZero(want[i]) {
			wantNeg++
		}
		if i > 0 && negZero(got[i]) && got[i-1] == 0 && !negZero(got[i-1]) {
			t.Fatalf("%s (n=%d): -0 at %d after +0 at %d", name, len(x), i, i-1)
		}
	}
	if gotNeg != wantNeg {
		t.Fatalf("%s (n=%d): %d negative zeros, input has %d", name, len(x), gotNeg, wantNeg)
	}
}

// specialFloats are edge values of IEEE 754 binary64 (from memory of the
// format: subnormals below 2^-1022, largest finite MaxFloat64).
var specialFloats = []float64{
	0, math.Copysign(0, -1),
	math.SmallestNonzeroFloat64, -math.SmallestNonzeroFloat64,
	2 * math.SmallestNonzeroFloat64, -3 * math.SmallestNonzeroFloat64,
	0x1p-1022 - math.SmallestNonzeroFloat64, -(0x1p-1022 - math.SmallestNonzeroFloat64), // largest subnormal
	0x1p-1022, -0x1p-1022, // smallest normal
	math.MaxFloat64, -math.MaxFloat64,
	math.Nextafter(math.MaxFloat64, 0), -math.Nextafter(math.MaxFloat64, 0),
	1, -1, math.Nextafter(1, 2), math.Nextafter(-1, -2), math.Nextafter(1, 0), math.Nextafter(-1, 0),
	0.5, -0.5, 1e-300, -1e-300, 1e300, -1e300,
}

// testSizes straddle radixMinN, where sortFloat64s switches from the
// comparison sort to the radix sort.
var testSizes = []int{0, 1, 2, 3, 17, radixMinN - 1, radixMinN, radixMinN + 1, 1000, 19701, 100000}

func TestSortFloat64sLikeStdlib(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	gens := []struct {
		name string
		gen  func(i int) float64
	}{
		{"uniform [-1,1)", func(int) float64 { return 2*rng.Float64() - 1 }},
		{"correlations of one sign", func(int) float64 { return 0.2 + 0.6*rng.Float64() }},
		{"negative only", func(int) float64 { return -rng.ExpFloat64() }},
		{"normal wide range", func(int) float64 { return rng.NormFloat64() * math.Pow(10, float64(rng.IntN(600)-300)) }},
		{"many ties", func(int) float64 { return float64(rng.IntN(5)-2) / 4 }},
		{"all equal", func(int) float64 { return 0.37 }},
		{"all -0", func(int) float64 { return math.Copysign(0, -1) }},
		{"mixed zeros", func(int) float64 { return math.Copysign(0, float64(rng.IntN(2)*2-1)) }},
		{"zeros and neighbours", func(int) float64 {
			return []float64{0, math.Copysign(0, -1), math.SmallestNonzeroFloat64, -math.SmallestNonzeroFloat64}[rng.IntN(4)]
		}},
		{"subnormals", func(int) float64 {
			return float64(rng.IntN(1<<20)-(1<<19)) * math.SmallestNonzeroFloat64
		}},
		{"specials", func(int) float64 { return specialFloats[rng.IntN(len(specialFloats))] }},
		{"random bits", func(int) float64 {
			for {
				if v := math.Float64frombits(rng.Uint64()); !math.IsNaN(v) {
					return v
				}
			}
		}},
		{"ascending", func(i int) float64 { return float64(i) - 500 }},
		{"descending", func(i int) float64 { return 500 - float64(i) }},
		{"±Inf and ±MaxFloat64", func(int) float64 {
			return []float64{math.Inf(1), math.Inf(-1), math.MaxFloat64, -math.MaxFloat64}[rng.IntN(4)]
		}},
	}
	for _, g := range gens {
		for _, n := range testSizes {
			x := make([]float64, n)
			for i := range x {
				x[i] = g.gen(i)
			}
			checkSortedLikeStdlib(t, g.name, x)
		}
	}
}

// TestSortFloat64sRandomized: many short random slices drawn from the
// special values, small integers and uniform values, lengths across
// radixMinN; slices.Sort is the oracle.
func TestSortFloat64sRandomized(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	rounds := 400
	if testing.Short() {
		rounds = 50
	}
	for r := range rounds {
		n := rng.IntN(3 * radixMinN)
		x := make([]float64, n)
		for i := range x {
			switch rng.IntN(3) {
			case 0:
				x[i] = specialFloats[rng.IntN(len(specialFloats))]
			case 1:
				x[i] = float64(rng.IntN(7) - 3)
			default:
				x[i] = rng.NormFloat64()
			}
		}
		checkSortedLikeStdlib(t, fmt.Sprintf("round %d", r), x)
	}
}

// FuzzSortFloat64s: the bytes are read as float64 values (NaN dropped) and
// repeated past radixMinN so the radix path runs; slices.Sort is the
// oracle. The default test run executes only the seed corpus.
func FuzzSortFloat64s(f *testing.F) {
	f.Add([]byte{})
	f.Add([]byte{0, 0, 0, 0, 0, 0, 0, 0x80, 0, 0, 0, 0, 0, 0, 0, 0})                         // -0, +0
	f.Add([]byte{1, 0, 0, 0, 0, 0, 0, 0x80, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xef, 0x7f}) // -min subnormal, MaxFloat64
	f.Fuzz(func(t *testing.T, data []byte) {
		var x []float64
		for len(data) >= 8 {
			var b uint64
			for i := range 8 {
				b |= uint64(data[i]) << (8 * i)
			}
			data = data[8:]
			if v := math.Float64frombits(b); !math.IsNaN(v) {
				x = append(x, v)
			}
		}
		if len(x) == 0 {
			return
		}
		long := x
		for len(long) <= radixMinN {
			long = append(long, x...)
		}
		checkSortedLikeStdlib(t, "fuzz", x)
		checkSortedLikeStdlib(t, "fuzz repeated", long)
	})
}

// The key map preserves order and is inverted by keyFloat: checked on all
// ordered pairs of the special values against Go's < and ==, and on random
// bit patterns.
func TestFloatKeyOrder(t *testing.T) {
	for _, a := range specialFloats {
		if back := keyFloat(floatKey(a)); math.Float64bits(back) != math.Float64bits(a) {
			t.Errorf("keyFloat(floatKey(%v)) = %v", a, back)
		}
		for _, b := range specialFloats {
			ka, kb := floatKey(a), floatKey(b)
			if a < b && ka >= kb || a > b && ka <= kb {
				t.Errorf("%v vs %v: keys %#x, %#x out of order", a, b, ka, kb)
			}
			if a == b && ka != kb && !(a == 0) {
				t.Errorf("%v == %v but keys %#x, %#x differ", a, b, ka, kb)
			}
		}
	}
	if floatKey(math.Copysign(0, -1)) >= floatKey(0) {
		t.Error("floatKey(-0) should sort before floatKey(+0)")
	}
	rng := rand.New(rand.NewPCG(7, 8))
	for range 10000 {
		k := rng.Uint64()
		if v := keyFloat(k); !math.IsNaN(v) && floatKey(v) != k {
			t.Fatalf("floatKey(keyFloat(%#x)) = %#x", k, floatKey(v))
		}
	}
}

// sortKeys (11-bit digits), and sortKeysBits at other digit widths (the
// benchmark's alternatives), against slices.Sort of the same uint64 keys,
// including keys sharing their top digits (skipped passes) and keys
// differing only in the top bit.
func TestRadixSortKeysDigitWidths(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 10))
	gens := map[string]func() uint64{
		"random":        rng.Uint64,
		"low 20 bits":   func() uint64 { return rng.Uint64() & (1<<20 - 1) },
		"top bit only":  func() uint64 { return rng.Uint64() & (1 << 63) },
		"shared top 40": func() uint64 { return 0xabcdef1234<<24 | rng.Uint64()&(1<<24-1) },
		"few values":    func() uint64 { return uint64(rng.IntN(3)) << 62 },
		"constant":      func() uint64 { return 42 },
	}
	for _, bits := range []int{0, -8, 1, 4, 8, 11, 13, 16} { // 0: sortKeys, -8: sortKeys8
		for name, gen := range gens {
			for _, n := range []int{1, 2, 300, 5000} {
				s := &radixScratch{keys: make([]uint64, n), tmp: make([]uint64, n)}
				for i := range s.keys {
					s.keys[i] = gen()
				}
				want := slices.Clone(s.keys)
				slices.Sort(want)
				switch bits {
				case 0:
					s.sortKeys()
				case -8:
					s.sortKeys8()
				default:
					s.sortKeysBits(bits)
				}
				if !slices.Equal(s.keys, want) {
					t.Fatalf("bits=%d %s n=%d: radix order differs from slices.Sort", bits, name, n)
				}
			}
		}
	}
}

// graphFiltrationSlicesSort is GraphFiltration as it was before the radix
// sort (slices.Sort of both event sets) and the fused Prim: the baseline of the benchmarks and
// the reference of TestGraphFiltrationRadixUnchanged.
func graphFiltrationSlicesSort(p int, upper []float64) (Filtration, error) {
	tree, err := maxSpanningTreePrim(p, upper)
	if err != nil {
		return Filtration{}, err
	}
	isTree := make([]bool, len(upper))
	b0 := make([]float64, 0, p-1)
	for _, e := range tree {
		isTree[PairIndex(p, e.I, e.J)] = true
		b0 = append(b0, e.Weight)
	}
	b1 := make([]float64, 0, len(upper)-(p-1))
	for k, w := range upper {
		if !isTree[k] {
			b1 = append(b1, w)
		}
	}
	slices.Sort(b0)
	slices.Sort(b1)
	return Filtration{P: p, Beta0Events: b0, Beta1Events: b1}, nil
}

// maxSpanningTreePrim is MaxSpanningTree as it was before its update and
// search loops were fused (a separate search of the best vertex, PairIndex
// for every pair): the reference of TestMaxSpanningTreeUnchanged and the
// baseline of BenchmarkMaxSpanningTree.
func maxSpanningTreePrim(p int, upper []float64) ([]TreeEdge, error) {
	if err := checkNetwork(p, upper); err != nil {
		return nil, err
	}
	// key[v], keyPair[v]: the best edge from the tree to v so far, and its
	// pair index; parent[v] is the tree end of that edge.
	key := make([]float64, p)
	keyPair := make([]int, p)
	parent := make([]int, p)
	inTree := make([]bool, p)
	// better reports whether edge (w1, k1) beats edge (w2, k2) under the
	// strict order described above.
	better := func(w1 float64, k1 int, w2 float64, k2 int) bool {
		return w1 > w2 || (w1 == w2 && k1 < k2)
	}
	inTree[0] = true
	for v := 1; v < p; v++ {
		k := PairIndex(p, 0, v)
		key[v], keyPair[v], parent[v] = upper[k], k, 0
	}
	tree := make([]TreeEdge, 0, p-1)
	for range p - 1 {
		best := -1
		for v := 1; v < p; v++ {
			if inTree[v] {
				continue
			}
			if best < 0 || better(key[v], keyPair[v], key[best], keyPair[best]) {
				best = v
			}
		}
		inTree[best] = true
		i, j := parent[best], best
		if i > j {
			i, j = j, i
		}
		tree = append(tree, TreeEdge{I: i, J: j, Weight: key[best]})
		for v := 1; v < p; v++ {
			if inTree[v] {
				continue
			}
			a, b := best, v
			if a > b {
				a, b = b, a
			}
			k := PairIndex(p, a, b)
			if better(upper[k], k, key[v], keyPair[v]) {
				key[v], keyPair[v], parent[v] = upper[k], k, best
			}
		}
	}
	return tree, nil
}

// MaxSpanningTree returns the same edges in the same order as the version
// before its loops were fused, on networks with and without ties (whose
// order among equal weights is the tie rule's).
func TestMaxSpanningTreeUnchanged(t *testing.T) {
	rng := rand.New(rand.NewPCG(15, 16))
	for _, p := range []int{2, 3, 4, 7, 30, 101, 200} {
		for _, levels := range []int{0, 2, 3, 7, 50} {
			w := randomNetwork(rng, p, levels)
			got, err := MaxSpanningTree(p, w)
			if err != nil {
				t.Fatal(err)
			}
			want, err := maxSpanningTreePrim(p, w)
			if err != nil {
				t.Fatal(err)
			}
			if !slices.Equal(got, want) {
				t.Fatalf("p=%d levels=%d: tree differs from the unfused Prim", p, levels)
			}
		}
	}
	// All weights equal: the tie rule alone decides.
	w := make([]float64, PairCount(40))
	got, _ := MaxSpanningTree(40, w)
	want, _ := maxSpanningTreePrim(40, w)
	if !slices.Equal(got, want) {
		t.Fatal("all-tied p=40: tree differs from the unfused Prim")
	}
}

// BenchmarkMaxSpanningTree: the fused Prim against the version before, in
// the same run.
func BenchmarkMaxSpanningTree(b *testing.B) {
	for _, p := range []int{100, 200, 400} {
		w := benchNetwork(p)
		for _, impl := range []struct {
			name string
			f    func(int, []float64) ([]TreeEdge, error)
		}{{"before", maxSpanningTreePrim}, {"fused", MaxSpanningTree}} {
			b.Run(fmt.Sprintf("p=%d/%s", p, impl.name), func(b *testing.B) {
				for b.Loop() {
					if _, err := impl.f(p, w); err != nil {
						b.Fatal(err)
					}
				}
			})
		}
	}
}

// GraphFiltration gives bit-identical events to the slices.Sort version on
// networks without zero weights, and == events (the same values, -0 before
// +0) on networks with both signed zeros.
func TestGraphFiltrationRadixUnchanged(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 14))
	type tc struct {
		name string
		p    int
		w    []float64
	}
	var cases []tc
	// p = 47 is the smallest network whose 1,035 beta1 events reach
	// radixMinN = 1024 (p = 46 has 990).
	for _, p := range []int{2, 3, 10, 46, 47, 48, 100, 200} {
		cases = append(cases, tc{fmt.Sprintf("uniform p=%d", p), p, randomNetwork(rng, p, 0)})
		cases = append(cases, tc{fmt.Sprintf("ties p=%d", p), p, randomNetwork(rng, p, 7)})
		z := randomNetwork(rng, p, 4) // levels 4: -1, -0.5, 0, 0.5
		for k := range z {
			if z[k] == 0 && rng.IntN(2) == 0 {
				z[k] = math.Copysign(0, -1)
			}
		}
		cases = append(cases, tc{fmt.Sprintf("signed zeros p=%d", p), p, z})
	}
	for _, c := range cases {
		got, err := GraphFiltration(c.p, c.w)
		if err != nil {
			t.Fatal(err)
		}
		want, err := graphFiltrationSlicesSort(c.p, c.w)
		if err != nil {
			t.Fatal(err)
		}
		for _, ev := range []struct {
			name      string
			got, want []float64
		}{{"beta0", got.Beta0Events, want.Beta0Events}, {"beta1", got.Beta1Events, want.Beta1Events}} {
			if len(ev.got) != len(ev.want) {
				t.Fatalf("%s %s: %d events, want %d", c.name, ev.name, len(ev.got), len(ev.want))
			}
			for i := range ev.want {
				g, w := ev.got[i], ev.want[i]
				if g != w || (w != 0 && math.Float64bits(g) != math.Float64bits(w)) {
					t.Fatalf("%s %s event %d: %v, slices.Sort version %v", c.name, ev.name, i, g, w)
				}
				if i > 0 && g == 0 && math.Signbit(g) && !math.Signbit(ev.got[i-1]) && ev.got[i-1] == 0 {
					t.Fatalf("%s %s: -0 after +0 at %d", c.name, ev.name, i)
				}
			}
		}
	}
}

// benchNetwork: a network of correlation-like weights, mostly positive
// (mean 0.3, sd 0.2, clipped to (-1, 1)), the typical input at ingest.
func benchNetwork(p int) []float64 {
	rng := rand.New(rand.NewPCG(1, 2))
	w := make([]float64, PairCount(p))
	for k := range w {
		w[k] = math.Max(-0.99, math.Min(0.99, 0.3+0.2*rng.NormFloat64()))
	}
	return w
}

// BenchmarkGraphFiltrationSort: GraphFiltration against the slices.Sort
// baseline in the same run, at p = 100, 200, 400, on uniform [-1, 1) and
// correlation-like weights.
func BenchmarkGraphFiltrationSort(b *testing.B) {
	for _, p := range []int{100, 200, 400} {
		for _, data := range []struct {
			name string
			w    []float64
		}{{"uniform", randomNetwork(rand.New(rand.NewPCG(1, 1)), p, 0)}, {"corr", benchNetwork(p)}} {
			for _, impl := range []struct {
				name string
				f    func(int, []float64) (Filtration, error)
			}{{"slicesSort", graphFiltrationSlicesSort}, {"radix", GraphFiltration}} {
				b.Run(fmt.Sprintf("p=%d/%s/%s", p, data.name, impl.name), func(b *testing.B) {
					for b.Loop() {
						if _, err := impl.f(p, data.w); err != nil {
							b.Fatal(err)
						}
					}
				})
			}
		}
	}
}

// BenchmarkRadixDigits: the sort alone on n = 19,701 beta1-sized inputs
// (p = 200): sortKeys (11-bit digits, fixed) against slices.Sort,
// sortKeys8 (8-bit digits, fixed) and sortKeysBits at digit widths 8, 11,
// 13 and 16.
func BenchmarkRadixDigits(b *testing.B) {
	for _, data := range []struct {
		name string
		w    []float64
	}{{"uniform", randomNetwork(rand.New(rand.NewPCG(1, 1)), 200, 0)}, {"corr", benchNetwork(200)}} {
		x := data.w[:19701]
		buf := make([]float64, len(x))
		b.Run(data.name+"/slicesSort", func(b *testing.B) {
			for b.Loop() {
				copy(buf, x)
				slices.Sort(buf)
			}
		})
		b.Run(data.name+"/sortKeys", func(b *testing.B) {
			s := &radixScratch{keys: make([]uint64, len(x)), tmp: make([]uint64, len(x))}
			for b.Loop() {
				for i, v := range x {
					s.keys[i] = floatKey(v)
				}
				s.sortKeys()
				for i, k := range s.keys {
					buf[i] = keyFloat(k)
				}
			}
		})
		b.Run(data.name+"/sortKeys8", func(b *testing.B) {
			s := &radixScratch{keys: make([]uint64, len(x)), tmp: make([]uint64, len(x))}
			for b.Loop() {
				for i, v := range x {
					s.keys[i] = floatKey(v)
				}
				s.sortKeys8()
				for i, k := range s.keys {
					buf[i] = keyFloat(k)
				}
			}
		})
		for _, bits := range []int{8, 11, 13, 16} {
			b.Run(fmt.Sprintf("%s/bits=%d", data.name, bits), func(b *testing.B) {
				s := &radixScratch{keys: make([]uint64, len(x)), tmp: make([]uint64, len(x))}
				for b.Loop() {
					for i, v := range x {
						s.keys[i] = floatKey(v)
					}
					s.sortKeysBits(bits)
					for i, k := range s.keys {
						buf[i] = keyFloat(k)
					}
				}
			})
		}
	}
}

// BenchmarkRadixSmall: where the radix sort overtakes slices.Sort, to set
// radixMinN.
func BenchmarkRadixSmall(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 3))
	for _, n := range []int{256, 512, 1024, 2048, 4096} {
		x := make([]float64, n)
		for i := range x {
			x[i] = 0.3 + 0.2*rng.NormFloat64()
		}
		buf := make([]float64, n)
		b.Run(fmt.Sprintf("n=%d/slicesSort", n), func(b *testing.B) {
			for b.Loop() {
				copy(buf, x)
				slices.Sort(buf)
			}
		})
		b.Run(fmt.Sprintf("n=%d/radix", n), func(b *testing.B) {
			s := &radixScratch{keys: make([]uint64, n), tmp: make([]uint64, n)}
			for b.Loop() {
				for i, v := range x {
					s.keys[i] = floatKey(v)
				}
				s.sortKeys()
				for i, k := range s.keys {
					buf[i] = keyFloat(k)
				}
			}
		})
	}
}

// sortKeysBits is the radix sort of sortKeys with the digit width a
// parameter (1 <= bits <= 16), for BenchmarkRadixDigits to compare widths;
// it leaves the result in s.keys. The histograms of all digits are counted in
// one pass over the keys; a digit that is the same for every key (one
// bucket holding all of them, as the top digit of correlations of one sign)
// is skipped.
func (s *radixScratch) sortKeysBits(bits int) {
	n := len(s.keys)
	if n < 2 {
		return
	}
	passes := (64 + bits - 1) / bits
	size := 1 << bits
	mask := uint64(size - 1)
	hist := make([]uint32, passes*size)
	for _, k := range s.keys {
		for d := range passes {
			hist[d*size+int((k>>(d*bits))&mask)]++
		}
	}
	src, dst := s.keys, s.tmp
	for d := range passes {
		c := hist[d*size : (d+1)*size]
		shift := uint(d * bits)
		if c[(src[0]>>shift)&mask] == uint32(n) {
			continue
		}
		// Exclusive prefix sums: c[b] becomes the first output slot of
		// bucket b.
		var sum uint32
		for b, v := range c {
			c[b] = sum
			sum += v
		}
		dst = dst[:n]
		for _, k := range src {
			b := (k >> shift) & mask
			dst[c[b]] = k
			c[b]++
		}
		src, dst = dst, src
	}
	if &src[0] != &s.keys[0] {
		copy(s.keys, src)
	}
}

// sortKeys8 is sortKeys with 8 fixed digits of 8 bits, for
// BenchmarkRadixDigits to compare with sortKeys's 6 digits of 11 bits on
// equal terms (both widths constant).
func (s *radixScratch) sortKeys8() {
	n := len(s.keys)
	if n < 2 {
		return
	}
	var h [8][256]uint32
	for _, k := range s.keys {
		h[0][uint8(k)]++
		h[1][uint8(k>>8)]++
		h[2][uint8(k>>16)]++
		h[3][uint8(k>>24)]++
		h[4][uint8(k>>32)]++
		h[5][uint8(k>>40)]++
		h[6][uint8(k>>48)]++
		h[7][uint8(k>>56)]++
	}
	src, dst := s.keys, s.tmp[:n]
	for d := range 8 {
		c := &h[d]
		shift := uint(8 * d)
		if c[uint8(src[0]>>shift)] == uint32(n) {
			continue
		}
		var sum uint32
		for b, v := range c {
			c[b] = sum
			sum += v
		}
		for _, k := range src {
			b := uint8(k >> shift)
			dst[c[b]] = k
			c[b]++
		}
		src, dst = dst, src
	}
	if &src[0] != &s.keys[0] {
		copy(s.keys, src)
	}
}
