package compute

import (
	"fmt"
	"math"
	"sort"
)

// TreeEdge is one edge of a maximum spanning tree: regions I < J and the
// edge's weight.
type TreeEdge struct {
	I, J   int
	Weight float64
}

// Filtration is the graph filtration of a complete weighted network on P
// nodes (docs/methods.md §5), reduced to its event sets. For a threshold e,
// the graph G_e keeps the edges of weight > e, and
//
//	beta0(e) = P - #{a in Beta0Events : a > e}   (connected components)
//	beta1(e) = #{b in Beta1Events : b > e}       (independent cycles)
//
// Beta0Events holds the p-1 maximum-spanning-tree edge weights and
// Beta1Events the (p-1)(p-2)/2 remaining edge weights, both ascending, a
// weight of -0 before one of +0 (they are equal as thresholds). The
// two multisets do not depend on which maximum spanning tree is chosen when
// weights tie, so the Betti curves are unique.
type Filtration struct {
	P           int
	Beta0Events []float64 // the p-1 maximum-spanning-tree edge weights, ascending
	Beta1Events []float64 // the (p-1)(p-2)/2 non-tree edge weights, ascending
}

// MaxSpanningTree returns a maximum spanning tree of the complete weighted
// graph on p nodes whose upper triangle is upper (PairIndex order, length
// PairCount(p)), built by Prim's algorithm in O(p^2) on the dense matrix.
//
// Tie rule: edges are ordered by weight, and between equal weights the edge
// with the lower PairIndex counts as the heavier. Under this strict order
// the maximum spanning tree is unique, so the tree returned is the one
// Kruskal's algorithm would build taking edges by descending weight, then
// ascending pair index. The edges are returned in the order Prim adds them,
// starting from node 0, each with I < J.
//
// It returns an error when p < 2, when len(upper) != PairCount(p), or when
// a weight is NaN or infinite (the error names the pair).
func MaxSpanningTree(p int, upper []float64) ([]TreeEdge, error) {
	if err := checkNetwork(p, upper); err != nil {
		return nil, err
	}
	// key[v], keyPair[v]: the best edge from the tree to v so far, and its
	// pair index; parent[v] is the tree end of that edge.
	key := make([]float64, p)
	keyPair := make([]int, p)
	parent := make([]int, p)
	inTree := make([]bool, p)
	// off[i] + j is PairIndex(p, i, j) for i < j, without PairIndex's
	// checks and division in the inner loop.
	off := make([]int, p)
	for i := range p {
		off[i] = i*(2*p-i-1)/2 - i - 1
	}
	// better reports whether edge (w1, k1) beats edge (w2, k2) under the
	// strict order described above.
	better := func(w1 float64, k1 int, w2 float64, k2 int) bool {
		return w1 > w2 || (w1 == w2 && k1 < k2)
	}
	inTree[0] = true
	best := 1
	for v := 1; v < p; v++ {
		k := off[0] + v
		key[v], keyPair[v], parent[v] = upper[k], k, 0
		if better(key[v], keyPair[v], key[best], keyPair[best]) {
			best = v
		}
	}
	tree := make([]TreeEdge, 0, p-1)
	for range p - 1 {
		// best is the vertex outside the tree with the best edge to it;
		// the order is strict, so which vertex that is does not depend on
		// the order of the search.
		u := best
		inTree[u] = true
		i, j := parent[u], u
		if i > j {
			i, j = j, i
		}
		tree = append(tree, TreeEdge{I: i, J: j, Weight: key[u]})
		// Update the edges to the vertices outside the tree through u, and
		// find the next best among them in the same pass: pairs (v, u) for
		// v < u, then (u, v) for v > u (consecutive in upper).
		best = -1
		for v := 1; v < u; v++ {
			if inTree[v] {
				continue
			}
			if k := off[v] + u; better(upper[k], k, key[v], keyPair[v]) {
				key[v], keyPair[v], parent[v] = upper[k], k, u
			}
			if best < 0 || better(key[v], keyPair[v], key[best], keyPair[best]) {
				best = v
			}
		}
		row := upper[off[u]+u+1 : off[u]+p]
		for v := u + 1; v < p; v++ {
			if inTree[v] {
				continue
			}
			if k := off[u] + v; better(row[v-u-1], k, key[v], keyPair[v]) {
				key[v], keyPair[v], parent[v] = row[v-u-1], k, u
			}
			if best < 0 || better(key[v], keyPair[v], key[best], keyPair[best]) {
				best = v
			}
		}
	}
	return tree, nil
}

// checkNetwork validates a network's size and weights.
func checkNetwork(p int, upper []float64) error {
	if p < 2 {
		return fmt.Errorf("compute: a network needs at least 2 nodes, got p=%d", p)
	}
	if len(upper) != PairCount(p) {
		return fmt.Errorf("compute: network on p=%d nodes needs %d upper-triangle weights, got %d",
			p, PairCount(p), len(upper))
	}
	for k, w := range upper {
		if math.IsNaN(w) || math.IsInf(w, 0) {
			i, j := PairOf(p, k)
			return fmt.Errorf("compute: edge weight of pair (%d,%d) is %v; a filtration needs finite weights", i, j, w)
		}
	}
	return nil
}

// GraphFiltration builds the filtration of the complete weighted graph on p
// nodes whose upper triangle is upper (PairIndex order, length
// PairCount(p)): the maximum spanning tree (see MaxSpanningTree for the tie
// rule) gives the p-1 beta0 events, all other edges the beta1 events.
//
// It returns an error when p < 2, when len(upper) != PairCount(p), or when
// a weight is NaN or infinite (the error names the pair i,j). A region
// without a defined correlation must be dropped or refused by the caller
// before this point.
func GraphFiltration(p int, upper []float64) (Filtration, error) {
	tree, err := MaxSpanningTree(p, upper)
	if err != nil {
		return Filtration{}, err
	}
	isTree := make([]bool, len(upper))
	b0 := make([]float64, 0, p-1)
	for _, e := range tree {
		isTree[PairIndex(p, e.I, e.J)] = true
		b0 = append(b0, e.Weight)
	}
	sortFloat64s(b0)
	b1 := make([]float64, len(upper)-(p-1))
	if len(b1) < radixMinN {
		b1 = b1[:0]
		for k, w := range upper {
			if !isTree[k] {
				b1 = append(b1, w)
			}
		}
		sortFloat64s(b1)
	} else {
		// sortFloat64s inlined: the radix sort's keys are made straight
		// from the weights and decoded straight into b1, without an
		// intermediate float64 copy. See radixsort.go on the order of -0
		// and +0.
		s := getRadixScratch(len(b1))
		i := 0
		for k, w := range upper {
			if !isTree[k] {
				s.keys[i] = floatKey(w)
				i++
			}
		}
		s.sortKeys()
		for i, key := range s.keys {
			b1[i] = keyFloat(key)
		}
		radixPool.Put(s)
	}
	return Filtration{P: p, Beta0Events: b0, Beta1Events: b1}, nil
}

// countAbove returns #{x in sorted : x > e} for an ascending slice. A NaN
// threshold compares false with everything and counts no value as above it.
func countAbove(sorted []float64, e float64) int {
	return len(sorted) - sort.Search(len(sorted), func(i int) bool { return sorted[i] > e })
}

// Beta0 returns the number of connected components of G_e, the graph that
// keeps the edges of weight > e: p - #{tree edges with weight > e}. A NaN
// threshold keeps no edge (beta0 = p).
func (f Filtration) Beta0(e float64) int { return f.P - countAbove(f.Beta0Events, e) }

// Beta1 returns the number of independent cycles of G_e:
// #{non-tree edges with weight > e}. A NaN threshold keeps no edge (0).
func (f Filtration) Beta1(e float64) int { return countAbove(f.Beta1Events, e) }

// Curves evaluates both Betti curves at every threshold of grid (in the
// grid's own order; it need not be sorted), by binary search on the sorted
// events: O(len(grid) log p^2). A nil grid gives two empty curves.
func (f Filtration) Curves(grid []float64) (beta0, beta1 []int) {
	beta0 = make([]int, len(grid))
	beta1 = make([]int, len(grid))
	for g, e := range grid {
		beta0[g] = f.Beta0(e)
		beta1[g] = f.Beta1(e)
	}
	return beta0, beta1
}

// Grid returns n evenly spaced thresholds from lo to hi inclusive:
// lo + (hi-lo)*i/(n-1), i = 0..n-1, with the last one exactly hi. lo > hi
// gives a descending grid. n < 2 is a programmer's error and panics; callers
// taking n from a user validate it first.
func Grid(lo, hi float64, n int) []float64 {
	if n < 2 {
		panic(fmt.Sprintf("compute: Grid needs n >= 2, got %d", n))
	}
	g := make([]float64, n)
	for i := range g {
		g[i] = lo + (hi-lo)*float64(i)/float64(n-1)
	}
	g[n-1] = hi
	return g
}
