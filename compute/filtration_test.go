package compute

import (
	"cmp"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/graph/path"
	"gonum.org/v1/gonum/graph/simple"
	"gonum.org/v1/gonum/graph/topo"
)

// randomNetwork returns the upper triangle of a random weighted network on
// p nodes with weights in [-1, 1). levels > 0 rounds the weights to that
// many distinct values, so that many of them tie.
func randomNetwork(rng *rand.Rand, p, levels int) []float64 {
	w := make([]float64, PairCount(p))
	for k := range w {
		x := 2*rng.Float64() - 1
		if levels > 0 {
			x = math.Floor((x+1)/2*float64(levels))/float64(levels)*2 - 1
		}
		w[k] = x
	}
	return w
}

type netCase struct {
	name   string
	p      int
	weight []float64
}

func filtrationCases() []netCase {
	rng := rand.New(rand.NewPCG(11, 12))
	cases := []netCase{
		{"p=2", 2, []float64{0.3}},
		{"p=3 all tied", 3, []float64{0.5, 0.5, 0.5}},
		{"p=4 hand", 4, []float64{0.9, 0.1, 0.4, 0.8, 0.2, 0.7}},
	}
	for _, p := range []int{5, 12, 40, 100} {
		cases = append(cases, netCase{fmt.Sprintf("random p=%d", p), p, randomNetwork(rng, p, 0)})
		cases = append(cases, netCase{fmt.Sprintf("ties p=%d", p), p, randomNetwork(rng, p, 7)})
	}
	return cases
}

// thresholdGraph builds G_e (edges of weight > e) as a gonum graph.
func thresholdGraph(p int, upper []float64, e float64) (*simple.UndirectedGraph, int) {
	g := simple.NewUndirectedGraph()
	for i := range p {
		g.AddNode(simple.Node(i))
	}
	edges := 0
	for k, w := range upper {
		if w > e {
			i, j := PairOf(p, k)
			g.SetEdge(g.NewEdge(simple.Node(i), simple.Node(j)))
			edges++
		}
	}
	return g, edges
}

// testGrid returns thresholds below, between, at and above the weights.
func testGrid(upper []float64) []float64 {
	lo, hi := slices.Min(upper), slices.Max(upper)
	grid := Grid(lo-0.1, hi+0.1, 41)
	// Weights themselves (every one for small networks, 40 spread over the
	// sorted weights otherwise), to test the strict "> e".
	sorted := slices.Sorted(slices.Values(upper))
	step := max(1, len(sorted)/40)
	for k := 0; k < len(sorted); k += step {
		grid = append(grid, sorted[k])
	}
	return append(grid, hi)
}

// Extreme thresholds (docs/methods.md §5): below every weight the graph is
// complete, beta0 = 1 and beta1 = (p-1)(p-2)/2; at or above every weight it
// is empty, beta0 = p and beta1 = 0.
func TestFiltrationExtremes(t *testing.T) {
	for _, c := range filtrationCases() {
		t.Run(c.name, func(t *testing.T) {
			f, err := GraphFiltration(c.p, c.weight)
			if err != nil {
				t.Fatal(err)
			}
			lo, hi := slices.Min(c.weight), slices.Max(c.weight)
			below := math.Nextafter(lo, math.Inf(-1))
			if b0, b1 := f.Beta0(below), f.Beta1(below); b0 != 1 || b1 != (c.p-1)*(c.p-2)/2 {
				t.Errorf("below all weights: beta0=%d beta1=%d, want 1 and %d", b0, b1, (c.p-1)*(c.p-2)/2)
			}
			for _, e := range []float64{hi, hi + 1} {
				if b0, b1 := f.Beta0(e), f.Beta1(e); b0 != c.p || b1 != 0 {
					t.Errorf("e=%v (max weight %v): beta0=%d beta1=%d, want %d and 0", e, hi, b0, b1, c.p)
				}
			}
			if len(f.Beta0Events) != c.p-1 || len(f.Beta1Events) != (c.p-1)*(c.p-2)/2 || f.P != c.p {
				t.Errorf("event counts %d, %d (P=%d), want %d, %d", len(f.Beta0Events), len(f.Beta1Events), f.P, c.p-1, (c.p-1)*(c.p-2)/2)
			}
		})
	}
}

// beta0 against the number of connected components of the thresholded
// graph counted independently by gonum's graph/topo.ConnectedComponents,
// and beta1 against the Euler characteristic of a graph,
// beta1 = |E_e| - p + beta0 (docs/methods.md §5), at every grid threshold.
func TestFiltrationComponentsAndEuler(t *testing.T) {
	for _, c := range filtrationCases() {
		t.Run(c.name, func(t *testing.T) {
			f, err := GraphFiltration(c.p, c.weight)
			if err != nil {
				t.Fatal(err)
			}
			for _, e := range testGrid(c.weight) {
				g, edges := thresholdGraph(c.p, c.weight, e)
				comps := len(topo.ConnectedComponents(g))
				if b0 := f.Beta0(e); b0 != comps {
					t.Fatalf("e=%v: beta0=%d, gonum counts %d components", e, b0, comps)
				}
				if b1, want := f.Beta1(e), edges-c.p+comps; b1 != want {
					t.Fatalf("e=%v: beta1=%d, Euler |E|-p+beta0 = %d-%d+%d = %d", e, b1, edges, c.p, comps, want)
				}
			}
		})
	}
}

// Monotonicity (docs/methods.md §5: beta0 non-decreasing, beta1
// non-increasing in e), and Curves equal the counts #{events > e} taken by
// a linear scan of the event sets, on an ascending and a shuffled grid.
func TestFiltrationCurves(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for _, c := range filtrationCases() {
		t.Run(c.name, func(t *testing.T) {
			f, err := GraphFiltration(c.p, c.weight)
			if err != nil {
				t.Fatal(err)
			}
			grid := testGrid(c.weight)
			slices.Sort(grid)
			b0, b1 := f.Curves(grid)
			for g := 1; g < len(grid); g++ {
				if b0[g] < b0[g-1] || b1[g] > b1[g-1] {
					t.Fatalf("not monotone at e=%v: beta0 %d->%d, beta1 %d->%d", grid[g], b0[g-1], b0[g], b1[g-1], b1[g])
				}
			}
			rng.Shuffle(len(grid), func(i, j int) { grid[i], grid[j] = grid[j], grid[i] })
			b0, b1 = f.Curves(grid)
			above := func(ev []float64, e float64) int {
				n := 0
				for _, x := range ev {
					if x > e {
						n++
					}
				}
				return n
			}
			for g, e := range grid {
				if want := c.p - above(f.Beta0Events, e); b0[g] != want {
					t.Fatalf("e=%v: beta0 curve %d, count %d", e, b0[g], want)
				}
				if want := above(f.Beta1Events, e); b1[g] != want {
					t.Fatalf("e=%v: beta1 curve %d, count %d", e, b1[g], want)
				}
			}
			// The two event sets partition the edge weights.
			all := append(slices.Clone(f.Beta0Events), f.Beta1Events...)
			slices.Sort(all)
			want := slices.Sorted(slices.Values(c.weight))
			if !slices.Equal(all, want) {
				t.Errorf("events are not the edge weights")
			}
			if !slices.IsSorted(f.Beta0Events) || !slices.IsSorted(f.Beta1Events) {
				t.Errorf("events not ascending")
			}
		})
	}
}

// kruskalMax is a plain Kruskal maximum spanning tree with the documented
// tie order (weight descending, then pair index ascending) and a
// union-find, written independently of the Prim code under test.
func kruskalMax(p int, upper []float64) map[[2]int]bool {
	order := make([]int, len(upper))
	for k := range order {
		order[k] = k
	}
	slices.SortFunc(order, func(x, y int) int {
		if c := cmp.Compare(upper[y], upper[x]); c != 0 {
			return c
		}
		return cmp.Compare(x, y)
	})
	parent := make([]int, p)
	for i := range parent {
		parent[i] = i
	}
	var find func(int) int
	find = func(x int) int {
		if parent[x] != x {
			parent[x] = find(parent[x])
		}
		return parent[x]
	}
	tree := map[[2]int]bool{}
	for _, k := range order {
		i, j := PairOf(p, k)
		if ri, rj := find(i), find(j); ri != rj {
			parent[ri] = rj
			tree[[2]int{i, j}] = true
		}
	}
	return tree
}

// The maximum spanning tree's total weight against gonum's
// graph/path.Kruskal (a minimum spanning tree) on the negated weights, and
// its edge set against an independent Kruskal with the documented tie rule.
func TestMaxSpanningTree(t *testing.T) {
	for _, c := range filtrationCases() {
		t.Run(c.name, func(t *testing.T) {
			tree, err := MaxSpanningTree(c.p, c.weight)
			if err != nil {
				t.Fatal(err)
			}
			if len(tree) != c.p-1 {
				t.Fatalf("%d tree edges, want %d", len(tree), c.p-1)
			}
			g := simple.NewWeightedUndirectedGraph(0, math.Inf(1))
			for i := range c.p {
				g.AddNode(simple.Node(i))
			}
			for k, w := range c.weight {
				i, j := PairOf(c.p, k)
				g.SetWeightedEdge(g.NewWeightedEdge(simple.Node(i), simple.Node(j), -w))
			}
			dst := simple.NewWeightedUndirectedGraph(0, math.Inf(1))
			want := -path.Kruskal(dst, g)
			var got float64
			edges := map[[2]int]bool{}
			for _, e := range tree {
				got += e.Weight
				if e.I >= e.J || e.Weight != c.weight[PairIndex(c.p, e.I, e.J)] {
					t.Fatalf("bad tree edge %+v", e)
				}
				edges[[2]int{e.I, e.J}] = true
			}
			if math.Abs(got-want) > 1e-9*max(1, math.Abs(want)) {
				t.Errorf("tree weight %v, gonum Kruskal on negated weights %v", got, want)
			}
			ref := kruskalMax(c.p, c.weight)
			if len(ref) != len(edges) {
				t.Fatalf("tree has %d distinct edges, Kruskal %d", len(edges), len(ref))
			}
			for e := range ref {
				if !edges[e] {
					t.Errorf("Kruskal (same tie rule) has edge %v, Prim does not", e)
				}
			}
		})
	}
}

func TestGraphFiltrationErrors(t *testing.T) {
	nanAt := make([]float64, PairCount(5))
	nanAt[PairIndex(5, 2, 4)] = math.NaN()
	infAt := make([]float64, PairCount(5))
	infAt[PairIndex(5, 0, 3)] = math.Inf(-1)
	for _, c := range []struct {
		name   string
		p      int
		upper  []float64
		substr string
	}{
		{"p=1", 1, nil, "at least 2 nodes"},
		{"p=0", 0, nil, "at least 2 nodes"},
		{"short", 4, make([]float64, 5), "needs 6"},
		{"long", 4, make([]float64, 7), "needs 6"},
		{"NaN", 5, nanAt, "pair (2,4)"},
		{"Inf", 5, infAt, "pair (0,3)"},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := GraphFiltration(c.p, c.upper)
			if err == nil || !strings.HasPrefix(err.Error(), "compute: ") || !strings.Contains(err.Error(), c.substr) {
				t.Errorf("err = %v, want a compute: error mentioning %q", err, c.substr)
			}
		})
	}
}

// Grid: n evenly spaced points, endpoints exact (the definition in the doc
// comment, lo + (hi-lo) i/(n-1), worked by hand).
func TestGrid(t *testing.T) {
	for _, c := range []struct {
		lo, hi float64
		n      int
		want   []float64
	}{
		{0, 1, 5, []float64{0, 0.25, 0.5, 0.75, 1}},
		{-1, 1, 2, []float64{-1, 1}},
		{1, -1, 3, []float64{1, 0, -1}},
		{0.1, 0.7, 4, []float64{0.1, 0.3, 0.5, 0.7}},
	} {
		t.Run(fmt.Sprint(c.lo, c.hi, c.n), func(t *testing.T) {
			got := Grid(c.lo, c.hi, c.n)
			if len(got) != len(c.want) || got[0] != c.lo || got[len(got)-1] != c.hi {
				t.Fatalf("Grid = %v, want %v with exact endpoints", got, c.want)
			}
			for i := range got {
				if math.Abs(got[i]-c.want[i]) > 1e-15 {
					t.Errorf("Grid = %v, want %v", got, c.want)
				}
			}
		})
	}
	defer func() {
		if recover() == nil {
			t.Errorf("Grid(0, 1, 1) did not panic")
		}
	}()
	Grid(0, 1, 1)
}

// A four-region network worked by hand. Edges by weight: (0,1) 0.9,
// (1,2) 0.8, (2,3) 0.7, (1,3) 0.4, (0,3) 0.2, (0,2) 0.1. The maximum
// spanning tree is the path 0-1-2-3 (0.9, 0.8, 0.7); the other three edges
// each close a cycle.
func ExampleGraphFiltration() {
	upper := []float64{
		0.9, 0.1, 0.2, // (0,1) (0,2) (0,3)
		0.8, 0.4, // (1,2) (1,3)
		0.7, // (2,3)
	}
	f, err := GraphFiltration(4, upper)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println("beta0 events:", f.Beta0Events)
	fmt.Println("beta1 events:", f.Beta1Events)
	grid := Grid(0, 1, 6)
	b0, b1 := f.Curves(grid)
	fmt.Println("grid: ", grid)
	fmt.Println("beta0:", b0)
	fmt.Println("beta1:", b1)
	// Output:
	// beta0 events: [0.7 0.8 0.9]
	// beta1 events: [0.1 0.2 0.4]
	// grid:  [0 0.2 0.4 0.6 0.8 1]
	// beta0: [1 1 1 1 3 4]
	// beta1: [3 1 0 0 0 0]
}

func BenchmarkGraphFiltration100(b *testing.B) {
	upper := randomNetwork(rand.New(rand.NewPCG(1, 1)), 100, 0)
	for b.Loop() {
		if _, err := GraphFiltration(100, upper); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkBettiCurves100: the whole per-network cost, filtration plus
// both curves on a 100-point grid.
func BenchmarkBettiCurves100(b *testing.B) {
	upper := randomNetwork(rand.New(rand.NewPCG(1, 1)), 100, 0)
	grid := Grid(-1, 1, 100)
	for b.Loop() {
		f, err := GraphFiltration(100, upper)
		if err != nil {
			b.Fatal(err)
		}
		f.Curves(grid)
	}
}
