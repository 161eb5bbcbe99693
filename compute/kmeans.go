package compute

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"sync"
	"sync/atomic"
)

// Distance selects the dissimilarity k-means minimises (docs/methods.md §3).
type Distance int

const (
	// SquaredEuclidean is d(x, c) = sum_j (x_j - c_j)^2; the centroid
	// update is the coordinate-wise mean of the cluster (classic k-means).
	SquaredEuclidean Distance = iota
	// Manhattan is the L1 (city-block) distance d(x, c) = sum_j |x_j - c_j|; the
	// centroid update is the coordinate-wise median of the cluster (the
	// minimiser of the summed L1 distance, that is k-medians), with the
	// mean of the two middle values when a cluster has an even size.
	Manhattan
)

// String returns the option names "euclidean" (k-means on the squared
// Euclidean distance) or "manhattan".
func (d Distance) String() string {
	switch d {
	case SquaredEuclidean:
		return "euclidean"
	case Manhattan:
		return "manhattan"
	}
	return fmt.Sprintf("Distance(%d)", int(d))
}

// KMeansOptions configures KMeans. The zero value of every field except K
// selects a default, noted beside the field.
type KMeansOptions struct {
	K        int      // number of clusters, 1 <= K <= rows
	Restarts int      // independent seedings; 0 means 1
	MaxIter  int      // Lloyd iterations per restart; 0 means 100
	Tol      float64  // stop when (W_old - W_new)/W_old < Tol; 0 means 1e-6
	Distance Distance // SquaredEuclidean (the zero value) or Manhattan
	// FirstRestart numbers the restarts FirstRestart .. FirstRestart +
	// Restarts - 1 (restart r draws from rand.NewPCG(seed, r)); 0 numbers
	// them from 0. A fit with restarts 0..a-1 and one with FirstRestart a
	// and Restarts b-a, keeping the lower WCSS (ties to the first), equal
	// one fit with Restarts b: the elbow scan's fit at the picked k is
	// extended this way without repeating its restarts.
	FirstRestart int
	// Workers is the number of goroutines used for assignment, seeding and
	// the centroid update; 0 or 1 means serial. Work is split in fixed row
	// (or column) blocks and sums are taken in a fixed order, so results are
	// identical for any Workers.
	Workers int
	// Done, when not nil, is called after each restart finishes (for a
	// progress display; ElbowScan calls it after each k of each restart);
	// it must not block for long.
	Done func()
	// Stop, when not nil, is asked before each restart (and, in ElbowScan,
	// before each k of a restart); when it returns true the fit ends with
	// ErrStopped. It lets a caller honour an interrupt within one fit.
	Stop func() bool
}

// ErrStopped is returned by KMeans and ElbowScan when KMeansOptions.Stop
// asked them to end early.
var ErrStopped = errors.New("compute: k-means stopped on request")

// KMeansResult is one fitted clustering.
type KMeansResult struct {
	Centroids  Matrix32 // K x D
	Labels     []int    // 0-based cluster of each input row
	WCSS       float64  // sum over rows of d(x_i, Centroids[Labels[i]]), float64, summed in row order
	Iterations int      // Lloyd iterations run (assignment + update steps after the seeding)
	// TotalIterations is the number of Lloyd iterations summed over all
	// restarts (a measure of the work done).
	TotalIterations int
	Converged       bool // stopped by the Tol rule or unchanged labels, not by MaxIter
}

const (
	defaultMaxIter = 100
	defaultTol     = 1e-6
	rowBlock       = 64  // rows per parallel work unit
	colBlock       = 128 // columns per parallel work unit in the mean update
	medianTile     = 16  // columns gathered at once in the median update
)

// l1Dist returns sum_j |x_j - y_j| accumulated in float64.
func l1Dist(x, y []float32) float64 {
	y = y[:len(x)]
	var a0, a1, a2, a3 float64
	j := 0
	for ; j+4 <= len(x); j += 4 {
		a0 += math.Abs(float64(x[j]) - float64(y[j]))
		a1 += math.Abs(float64(x[j+1]) - float64(y[j+1]))
		a2 += math.Abs(float64(x[j+2]) - float64(y[j+2]))
		a3 += math.Abs(float64(x[j+3]) - float64(y[j+3]))
	}
	for ; j < len(x); j++ {
		a0 += math.Abs(float64(x[j]) - float64(y[j]))
	}
	return (a0 + a1) + (a2 + a3)
}

// parallelFor calls fn(worker, b) for every block b in [0, nblocks), using
// up to workers goroutines that it starts and joins. Each block is handled by
// exactly one call; callers make the work of a block independent of which
// worker runs it, so results never depend on workers.
func parallelFor(nblocks, workers int, fn func(worker, block int)) {
	if workers > nblocks {
		workers = nblocks
	}
	if workers <= 1 {
		for b := 0; b < nblocks; b++ {
			fn(0, b)
		}
		return
	}
	var next atomic.Int64
	var wg sync.WaitGroup
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func(w int) {
			defer wg.Done()
			for {
				b := int(next.Add(1) - 1)
				if b >= nblocks {
					return
				}
				fn(w, b)
			}
		}(w)
	}
	wg.Wait()
}

func blocks(n, size int) int { return (n + size - 1) / size }

func checkMatrix(name string, m Matrix32) {
	if m.Rows < 0 || m.Cols < 0 || len(m.Data) != m.Rows*m.Cols {
		panic(fmt.Sprintf("compute: %s has %d values, want %d x %d", name, len(m.Data), m.Rows, m.Cols))
	}
}

// rowNorms returns ||x_i||^2 for every row, float64-accumulated.
func rowNorms(x Matrix32, workers int) []float64 {
	xn := make([]float64, x.Rows)
	parallelFor(blocks(x.Rows, rowBlock), workers, func(_, b int) {
		for i := b * rowBlock; i < min((b+1)*rowBlock, x.Rows); i++ {
			r := x.Row(i)
			xn[i] = dot32(r, r)
		}
	})
	return xn
}

// assignRows labels rows with their nearest centroid (ties to the lowest
// index). A row whose distances are all NaN gets label -1 and distance NaN.
// xn may be nil; norms are then computed per row.
func assignRows(x Matrix32, xn []float64, c Matrix32, cn []float64, d Distance, workers int, labels []int, dist []float64) {
	bufs := make([][]float64, max(1, workers))
	for w := range bufs {
		bufs[w] = make([]float64, c.Rows)
	}
	var cw wide
	if d == SquaredEuclidean {
		cw = widen(c)
	}
	parallelFor(blocks(x.Rows, rowBlock), workers, func(w, b int) {
		dots := bufs[w]
		for i := b * rowBlock; i < min((b+1)*rowBlock, x.Rows); i++ {
			xi := x.Row(i)
			n := math.NaN() // unused for Manhattan
			if d == SquaredEuclidean {
				if xn != nil {
					n = xn[i]
				} else {
					n = dot32(xi, xi)
				}
				dotsRow(xi, cw, dots)
			}
			labels[i], dist[i] = nearest(xi, n, dots, c, cn, d)
		}
	})
}

// nearest picks the nearest of the centroids c for row xi: under
// SquaredEuclidean from its squared norm n, the centroids' squared norms cn
// and the dot products dots[k] = xi . c_k, as n + cn[k] - 2 dots[k] clamped
// at 0; under Manhattan by the L1 distance (n and dots unused). Ties go to
// the lowest index; no finite distance gives label -1 and distance NaN.
func nearest(xi []float32, n float64, dots []float64, c Matrix32, cn []float64, d Distance) (int, float64) {
	best, bd := -1, math.Inf(1)
	if d == SquaredEuclidean {
		for k, dk := range dots {
			v := n + cn[k] - 2*dk
			if v < 0 {
				v = 0
			}
			if v < bd {
				best, bd = k, v
			}
		}
	} else {
		for k := 0; k < c.Rows; k++ {
			if v := l1Dist(xi, c.Row(k)); v < bd {
				best, bd = k, v
			}
		}
	}
	if best < 0 {
		bd = math.NaN()
	}
	return best, bd
}

// Assigner labels rows one at a time exactly as Assign labels the rows of
// a matrix (the same label and the same distance, bit for bit), for a
// caller that computes its rows one by one and does not keep them
// (SlidingCorrelationsEach). It is read-only after NewAssigner, so one
// Assigner may serve several goroutines, each with its own scratch.
type Assigner struct {
	c   Matrix32
	cn  []float64
	idx []int
	d   Distance
}

// NewAssigner prepares the labelling of rows of centroids.Cols values with
// the nearest of centroids under d. It panics when Assign would: no
// centroids or an unknown distance.
func NewAssigner(centroids Matrix32, d Distance) *Assigner {
	checkMatrix("centroids", centroids)
	if centroids.Rows < 1 {
		panic("compute: Assign: no centroids")
	}
	if d != SquaredEuclidean && d != Manhattan {
		panic(fmt.Sprintf("compute: Assign: unknown distance %d", int(d)))
	}
	a := &Assigner{c: centroids, cn: make([]float64, centroids.Rows), idx: make([]int, centroids.Rows), d: d}
	if d == SquaredEuclidean {
		a.cn = rowNorms(centroids, 1)
	}
	for k := range a.idx {
		a.idx[k] = k
	}
	return a
}

// Scratch returns a scratch slice for Nearest (one per goroutine).
func (a *Assigner) Scratch() []float64 { return make([]float64, a.c.Rows) }

// Nearest returns the label and distance Assign gives row xi, using dots
// (from Scratch) as scratch. It panics if len(xi) differs from the
// centroids' columns.
func (a *Assigner) Nearest(xi []float32, dots []float64) (int, float64) {
	if len(xi) != a.c.Cols {
		panic(fmt.Sprintf("compute: Assign: x has %d columns, centroids %d", len(xi), a.c.Cols))
	}
	n := math.NaN()
	if a.d == SquaredEuclidean {
		n = dot32(xi, xi)
		// The float32 centres, widened in the kernel: bit-identical to
		// Assign's float64 copy (TestDotKernels), half the bytes.
		dotsIdx32(xi, a.c, a.idx, dots)
	}
	return nearest(xi, n, dots, a.c, a.cn, a.d)
}

// Assign labels each row of x with its nearest centroid under d, ties going
// to the lowest centroid index, and returns the distance to that centroid
// (squared Euclidean computed as ||x||^2 + ||c||^2 - 2 x.c in float64 from
// float32 products, clamped at 0; or L1). Workers goroutines share fixed row
// blocks, so the output is identical for any workers (0 or 1 = serial).
// x must hold only finite values (KMeans checks this; callers of Assign on
// other data should too): a row containing NaN gets label -1 and distance NaN.
// It panics if the column counts differ, centroids is empty or d is unknown.
func Assign(x Matrix32, centroids Matrix32, d Distance, workers int) (labels []int, dist []float64) {
	checkMatrix("x", x)
	checkMatrix("centroids", centroids)
	if x.Cols != centroids.Cols {
		panic(fmt.Sprintf("compute: Assign: x has %d columns, centroids %d", x.Cols, centroids.Cols))
	}
	if centroids.Rows < 1 {
		panic("compute: Assign: no centroids")
	}
	if d != SquaredEuclidean && d != Manhattan {
		panic(fmt.Sprintf("compute: Assign: unknown distance %d", int(d)))
	}
	cn := make([]float64, centroids.Rows)
	if d == SquaredEuclidean {
		cn = rowNorms(centroids, 1)
	}
	labels = make([]int, x.Rows)
	dist = make([]float64, x.Rows)
	assignRows(x, nil, centroids, cn, d, workers, labels, dist)
	return labels, dist
}

// kmFit holds the data shared by the restarts of one KMeans call.
type kmFit struct {
	x       Matrix32
	xn      []float64 // squared row norms (SquaredEuclidean only)
	d       Distance
	workers int
	plain   bool // SquaredEuclidean by plain Lloyd iterations (tests compare it with runBounded)
}

// seed chooses k centres by k-means++ (Arthur and Vassilvitskii, 2007): the
// first uniformly at random, each next one row i with probability
// w_i / sum w, where w_i is the distance from row i to its nearest chosen
// centre: the squared Euclidean distance D(x)^2 for SquaredEuclidean, the L1
// distance D(x)^1 for Manhattan (the D^l weighting of the same paper). If
// every weight is 0 (fewer distinct rows than k), a row is drawn uniformly.
// Cost O(n k D). It returns the centres and the chosen row indices.
//
// When dist is not nil (n x k, row-major) it receives every row's distance
// to every chosen centre, dist[i*k+j] = d(x_i, c_j), as computed on the
// way.
func (f *kmFit) seed(k int, r *rand.Rand, dist []float64) (Matrix32, []int) {
	n, dim := f.x.Rows, f.x.Cols
	c := NewMatrix32(k, dim)
	idx := make([]int, k)
	w := make([]float64, n)
	for j := 0; j < k; j++ {
		var pick int
		if j == 0 {
			pick = r.IntN(n)
		} else {
			total := 0.0
			for _, v := range w {
				total += v
			}
			if total > 0 && !math.IsInf(total, 1) {
				u := r.Float64() * total
				pick = -1
				cum := 0.0
				last := -1
				for i, v := range w {
					if v <= 0 {
						continue
					}
					last = i
					cum += v
					if cum > u {
						pick = i
						break
					}
				}
				if pick < 0 { // rounding left u at the very top
					pick = last
				}
			} else {
				pick = r.IntN(n)
			}
		}
		idx[j] = pick
		cj := c.Row(j)
		copy(cj, f.x.Row(pick))
		var cn float64
		var cw []float64
		if f.d == SquaredEuclidean {
			cn = f.xn[pick]
			cw = widen(Matrix32{Rows: 1, Cols: dim, Data: cj}).Data
		}
		first := j == 0
		parallelFor(blocks(n, rowBlock), f.workers, func(_, b int) {
			for i := b * rowBlock; i < min((b+1)*rowBlock, n); i++ {
				var xn float64
				if f.d == SquaredEuclidean {
					xn = f.xn[i]
				}
				var v float64
				if f.d == SquaredEuclidean {
					// ||x||^2 + ||c||^2 - 2 x.c clamped at 0, as in assignRows,
					// with the centre widened once.
					v = max(xn+cn-2*dotMixed(f.x.Row(i), cw), 0)
				} else {
					v = l1Dist(f.x.Row(i), cj)
				}
				if dist != nil {
					dist[i*k+j] = v
				}
				if first || v < w[i] {
					w[i] = v
				}
			}
		})
	}
	return c, idx
}

// update sets every non-empty cluster's centroid to the mean
// (SquaredEuclidean) or coordinate-wise median (Manhattan) of its rows.
// Clusters without rows keep their centroid (repair prevents that case).
func (f *kmFit) update(labels []int, c Matrix32) {
	n, dim, k := f.x.Rows, f.x.Cols, c.Rows
	counts := make([]int, k)
	for _, l := range labels {
		counts[l]++
	}
	if f.d == SquaredEuclidean {
		nb := blocks(dim, colBlock)
		workers := max(1, f.workers)
		sums := make([][]float64, workers)
		for w := range sums {
			sums[w] = make([]float64, k*colBlock)
		}
		parallelFor(nb, f.workers, func(w, b int) {
			j0, j1 := b*colBlock, min((b+1)*colBlock, dim)
			bw := j1 - j0
			s := sums[w]
			clear(s)
			for i := 0; i < n; i++ {
				acc := s[labels[i]*colBlock : labels[i]*colBlock+bw]
				row := f.x.Data[i*dim+j0 : i*dim+j1]
				for jj, v := range row {
					acc[jj] += float64(v)
				}
			}
			for l := 0; l < k; l++ {
				if counts[l] == 0 {
					continue
				}
				inv := float64(counts[l])
				dst := c.Data[l*dim+j0 : l*dim+j1]
				for jj := range dst {
					dst[jj] = float32(s[l*colBlock+jj] / inv)
				}
			}
		})
		return
	}
	// Manhattan: coordinate-wise median per cluster.
	members := make([][]int, k)
	for l := range members {
		members[l] = make([]int, 0, counts[l])
	}
	for i, l := range labels {
		members[l] = append(members[l], i)
	}
	maxCount := slices.Max(counts)
	workers := max(1, f.workers)
	tiles := make([][]float32, workers)
	bufs := make([][]float32, workers)
	for w := range tiles {
		tiles[w] = make([]float32, maxCount*medianTile)
		bufs[w] = make([]float32, maxCount)
	}
	parallelFor(blocks(dim, medianTile), f.workers, func(w, b int) {
		j0, j1 := b*medianTile, min((b+1)*medianTile, dim)
		bw := j1 - j0
		tile, buf := tiles[w], bufs[w]
		for l := 0; l < k; l++ {
			m := members[l]
			if len(m) == 0 {
				continue
			}
			for r, i := range m {
				copy(tile[r*bw:(r+1)*bw], f.x.Data[i*dim+j0:i*dim+j1])
			}
			for jj := 0; jj < bw; jj++ {
				v := buf[:len(m)]
				for r := range v {
					v[r] = tile[r*bw+jj]
				}
				c.Data[l*dim+j0+jj] = float32(median32(v))
			}
		}
	})
}

// median32 returns the median of v (mean of the two middle values for an
// even length), reordering v. v must be non-empty.
func median32(v []float32) float64 {
	h := len(v) / 2
	upper := selectKth(v, h)
	if len(v)%2 == 1 {
		return float64(upper)
	}
	lower := slices.Max(v[:h]) // selectKth leaves v[:h] <= v[h]
	return (float64(lower) + float64(upper)) / 2
}

// selectKth reorders a so that a[k] is its k-th smallest element (0-based),
// every a[i] <= a[k] for i < k and a[i] >= a[k] for i > k (Hoare's
// quickselect with a median-of-three pivot; deterministic).
func selectKth(a []float32, k int) float32 {
	lo, hi := 0, len(a)-1
	for lo < hi {
		mid := lo + (hi-lo)/2
		if a[mid] < a[lo] {
			a[mid], a[lo] = a[lo], a[mid]
		}
		if a[hi] < a[lo] {
			a[hi], a[lo] = a[lo], a[hi]
		}
		if a[hi] < a[mid] {
			a[hi], a[mid] = a[mid], a[hi]
		}
		pivot := a[mid]
		i, j := lo, hi
		for i <= j {
			for a[i] < pivot {
				i++
			}
			for a[j] > pivot {
				j--
			}
			if i <= j {
				a[i], a[j] = a[j], a[i]
				i++
				j--
			}
		}
		switch {
		case k <= j:
			hi = j
		case k >= i:
			lo = i
		default:
			return a[k]
		}
	}
	return a[k]
}

// repair gives every empty cluster one row: in cluster order, the row
// farthest from its own centroid among clusters holding more than one row
// (ties to the lowest row index) becomes the empty cluster's only member and
// its centroid. It reports whether anything moved. Needs K <= rows.
func (f *kmFit) repair(labels []int, dist []float64, c Matrix32, cn []float64) bool {
	k := c.Rows
	counts := make([]int, k)
	for _, l := range labels {
		counts[l]++
	}
	moved := false
	for l := 0; l < k; l++ {
		if counts[l] > 0 {
			continue
		}
		best, bd := -1, math.Inf(-1)
		for i, li := range labels {
			if counts[li] > 1 && dist[i] > bd {
				best, bd = i, dist[i]
			}
		}
		counts[labels[best]]--
		labels[best], dist[best] = l, 0
		counts[l] = 1
		copy(c.Row(l), f.x.Row(best))
		if f.d == SquaredEuclidean {
			cn[l] = f.xn[best]
		}
		moved = true
	}
	return moved
}

func centroidNorms(d Distance, c Matrix32) []float64 {
	if d == SquaredEuclidean {
		return rowNorms(c, 1)
	}
	return make([]float64, c.Rows)
}

func sumOrdered(v []float64) float64 {
	s := 0.0
	for _, x := range v {
		s += x
	}
	return s
}

// run is one restart: seeding, then Lloyd iterations.
func (f *kmFit) run(k, maxIter int, tol float64, r *rand.Rand) KMeansResult {
	var d []float64
	if f.bounded() {
		d = make([]float64, f.x.Rows*k)
	}
	c, _ := f.seed(k, r, d)
	return f.lloyd(c, d, k, maxIter, tol)
}

// bounded reports whether Lloyd iterations use Elkan's bounds.
func (f *kmFit) bounded() bool { return f.d == SquaredEuclidean && !f.plain }

// lloyd runs Lloyd iterations from the centres c (modified in place). For
// the bounded path, d[i*stride+j] holds row i's distance to centre j from
// the seeding.
func (f *kmFit) lloyd(c Matrix32, d []float64, stride, maxIter int, tol float64) KMeansResult {
	if f.bounded() {
		return f.runBounded(c, d, stride, maxIter, tol)
	}
	n := f.x.Rows
	cn := centroidNorms(f.d, c)
	labels := make([]int, n)
	dist := make([]float64, n)
	assignRows(f.x, f.xn, c, cn, f.d, f.workers, labels, dist)
	f.repair(labels, dist, c, cn)
	w := sumOrdered(dist)
	prev := make([]int, n)
	res := KMeansResult{}
	for res.Iterations < maxIter {
		copy(prev, labels)
		f.update(labels, c)
		cn = centroidNorms(f.d, c)
		assignRows(f.x, f.xn, c, cn, f.d, f.workers, labels, dist)
		f.repair(labels, dist, c, cn)
		res.Iterations++
		wOld := w
		w = sumOrdered(dist)
		if slices.Equal(prev, labels) || w == 0 || wOld-w < tol*wOld {
			res.Converged = true
			break
		}
	}
	res.Centroids, res.Labels, res.WCSS = c, labels, w
	return res
}

// KMeans clusters the rows of x into opt.K groups (docs/methods.md §3).
//
// Each restart r = 0..Restarts-1 (offset by FirstRestart) draws from its own generator,
// rand.New(rand.NewPCG(seed, r)), seeds K centres by k-means++ (Arthur and
// Vassilvitskii, 2007; D^2 weighting, D^1 for Manhattan), then runs Lloyd
// iterations: assign every row to its nearest centre (ties to the lowest
// index), move each centre to its cluster's mean (SquaredEuclidean) or
// coordinate-wise median (Manhattan). The objective is
// W = sum_i d(x_i, c_{label i}), float64, summed in row order. Iteration
// stops when the labels no longer change, when W = 0, when
// (W_old - W_new)/W_old < Tol, or after MaxIter steps (Converged false).
// The restart with the lowest W is returned (ties: the lowest r).
// SquaredEuclidean iterations skip the distances that Elkan's bounds
// settle (kmeans_bounds.go) and give the labels of plain Lloyd iterations.
//
// Empty clusters: after every assignment, each empty cluster (in index
// order) takes the row farthest from its own centre among clusters with more
// than one row (ties to the lowest row); that row becomes the new centre.
// So every cluster of the result is non-empty.
//
// The returned Labels are the assignment of the rows to the returned
// Centroids (up to repaired rows), and WCSS is their objective; when the Tol
// rule stopped the fit, the centroids are those of the last update, not
// recomputed from the final labels.
//
// Errors: empty x, K < 1, K > rows, negative Restarts/MaxIter/Tol/Workers,
// an unknown Distance, and any non-finite (NaN or Inf) value in x.
func KMeans(x Matrix32, opt KMeansOptions, seed uint64) (KMeansResult, error) {
	f, err := newFit(x, opt)
	if err != nil {
		return KMeansResult{}, err
	}
	restarts, maxIter, tol := f.settings(opt)
	var best KMeansResult
	total := 0
	for r := 0; r < restarts; r++ {
		if opt.Stop != nil && opt.Stop() {
			return KMeansResult{}, ErrStopped
		}
		res := f.run(opt.K, maxIter, tol, rand.New(rand.NewPCG(seed, uint64(opt.FirstRestart+r))))
		total += res.Iterations
		if r == 0 || res.WCSS < best.WCSS {
			best = res
		}
		if opt.Done != nil {
			opt.Done()
		}
	}
	best.TotalIterations = total
	return best, nil
}

// newFit checks the input and options of KMeans and prepares the shared
// data.
func newFit(x Matrix32, opt KMeansOptions) (*kmFit, error) {
	checkMatrix("x", x)
	if x.Rows < 1 || x.Cols < 1 {
		return nil, errors.New("compute: k-means needs a non-empty input")
	}
	if opt.K < 1 {
		return nil, fmt.Errorf("compute: k-means needs K >= 1, got %d", opt.K)
	}
	if opt.K > x.Rows {
		return nil, fmt.Errorf("compute: k-means K = %d exceeds the %d rows", opt.K, x.Rows)
	}
	if opt.Restarts < 0 || opt.MaxIter < 0 || opt.Workers < 0 || opt.FirstRestart < 0 {
		return nil, fmt.Errorf("compute: k-means options must not be negative (restarts %d, first restart %d, max iterations %d, workers %d)", opt.Restarts, opt.FirstRestart, opt.MaxIter, opt.Workers)
	}
	if opt.Tol < 0 || math.IsNaN(opt.Tol) {
		return nil, fmt.Errorf("compute: k-means tolerance %v must be >= 0", opt.Tol)
	}
	if opt.Distance != SquaredEuclidean && opt.Distance != Manhattan {
		return nil, fmt.Errorf("compute: unknown k-means distance %d", int(opt.Distance))
	}
	// A row holding NaN or an infinity has a NaN or infinite squared norm
	// (a sum of squared float32 values cannot overflow float64).
	xn := rowNorms(x, opt.Workers)
	for i, v := range xn {
		if !math.IsNaN(v) && !math.IsInf(v, 0) {
			continue
		}
		for j, v := range x.Row(i) {
			if math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
				return nil, fmt.Errorf("compute: k-means input row %d column %d is %v", i, j, v)
			}
		}
	}
	f := &kmFit{x: x, d: opt.Distance, workers: opt.Workers}
	if f.d == SquaredEuclidean {
		f.xn = xn
	}
	return f, nil
}

// settings returns the restarts, iteration cap and tolerance with the
// defaults of KMeansOptions filled in.
func (f *kmFit) settings(opt KMeansOptions) (restarts, maxIter int, tol float64) {
	restarts, maxIter, tol = max(opt.Restarts, 1), opt.MaxIter, opt.Tol
	if maxIter == 0 {
		maxIter = defaultMaxIter
	}
	if tol == 0 {
		tol = defaultTol
	}
	return restarts, maxIter, tol
}

// ElbowPoint is W(k), the within-cluster sum of distances of the best fit
// with k clusters.
type ElbowPoint struct {
	K    int
	WCSS float64
}

// Elbow is a scanned W(k) curve and the two picks of docs/methods.md §3,
// plus, when the caller sets them, the rule that chose k (docs/methods.md
// §3.x) and the gap statistic.
type Elbow struct {
	Points      []ElbowPoint
	ChordK      int // ChordElbow of the curve
	SecondDiffK int // SecondDifferenceElbow of the curve
	// Rule names the rule whose pick was used ("gap", "chord",
	// "second-diff"); "" when the caller did not choose (ElbowScan leaves it
	// empty).
	Rule string `json:",omitempty"`
	// Gap is the gap statistic over the same k, when it was computed.
	Gap *Gap `json:",omitempty"`
	// Strength is the prediction strength over the same k, when it was
	// computed.
	Strength *Strength `json:",omitempty"`
	// OtherStrength is the prediction strength with the other halving
	// (by window when Strength is by subject, and the reverse), when a
	// caller asked for both; it is not stored.
	OtherStrength *Strength `json:"-"`
}

// ElbowScan fits KMeans for k = kmin..kmax with opt (opt.K is ignored) and
// the same seed for every k, and returns the W(k) curve, both elbow picks,
// and every fit (fits[k-kmin]). Errors: kmin < 1, kmax < kmin, and any error
// of KMeans (kmax > rows among them).
//
// The fits are exactly those of KMeans called for each k, but each restart
// seeds once: k-means++ chooses its centres one after another from one
// generator, so the first k of the kmax centres of restart r are the k
// centres KMeans would draw for restart r, and the distances computed while
// seeding serve every k.
func ElbowScan(x Matrix32, kmin, kmax int, opt KMeansOptions, seed uint64) (Elbow, []KMeansResult, error) {
	if kmin < 1 || kmax < kmin {
		return Elbow{}, nil, fmt.Errorf("compute: elbow scan needs 1 <= kmin <= kmax, got %d..%d", kmin, kmax)
	}
	o := opt
	o.K = kmax
	f, err := newFit(x, o)
	if err != nil {
		return Elbow{}, nil, fmt.Errorf("compute: elbow scan at k = %d: %w", kmax, err)
	}
	restarts, maxIter, tol := f.settings(opt)
	n, dim := x.Rows, x.Cols
	fits := make([]KMeansResult, kmax-kmin+1)
	totals := make([]int, len(fits))
	var d []float64
	if f.bounded() {
		d = make([]float64, n*kmax)
	}
	for r := 0; r < restarts; r++ {
		seeds, _ := f.seed(kmax, rand.New(rand.NewPCG(seed, uint64(opt.FirstRestart+r))), d)
		if f.bounded() {
			// Every k of this restart side by side: each iteration reads
			// the rows once for all of them (runBoundedTogether); each fit
			// is the one lloyd gives.
			runs := make([]*boundedRun, 0, kmax-kmin+1)
			for k := kmin; k <= kmax; k++ {
				c := NewMatrix32(k, dim)
				copy(c.Data, seeds.Data[:k*dim])
				runs = append(runs, f.startBounded(c, d, kmax, maxIter, tol))
			}
			if !runBoundedTogether(runs, opt.Stop) {
				return Elbow{}, nil, ErrStopped
			}
			for j, run := range runs {
				res := run.result()
				totals[j] += res.Iterations
				if r == 0 || res.WCSS < fits[j].WCSS {
					fits[j] = res
				}
				if opt.Done != nil {
					opt.Done()
				}
			}
			continue
		}
		for k := kmin; k <= kmax; k++ {
			if opt.Stop != nil && opt.Stop() {
				return Elbow{}, nil, ErrStopped
			}
			c := NewMatrix32(k, dim)
			copy(c.Data, seeds.Data[:k*dim])
			res := f.lloyd(c, d, kmax, maxIter, tol)
			totals[k-kmin] += res.Iterations
			if r == 0 || res.WCSS < fits[k-kmin].WCSS {
				fits[k-kmin] = res
			}
			if opt.Done != nil {
				opt.Done()
			}
		}
	}
	ks := make([]int, 0, len(fits))
	ws := make([]float64, 0, len(fits))
	var e Elbow
	for i := range fits {
		fits[i].TotalIterations = totals[i]
		k := kmin + i
		ks = append(ks, k)
		ws = append(ws, fits[i].WCSS)
		e.Points = append(e.Points, ElbowPoint{K: k, WCSS: fits[i].WCSS})
	}
	e.ChordK = ChordElbow(ks, ws)
	e.SecondDiffK = SecondDifferenceElbow(ks, ws)
	return e, fits, nil
}

// ChordElbow returns the k of the point farthest from the chord joining the
// first and last points of the normalised curve (docs/methods.md §3): both
// axes are scaled to [0,1] by min-max, x = (k - k_min)/(k_max - k_min) and
// y = (W - W_min)/(W_max - W_min), and the perpendicular distance of (x, y)
// to the line through the first and last points is maximised; ties go to the
// smaller k. With fewer than three points, or a flat curve, it returns
// ks[0]. It returns 0 for empty input and panics if the lengths differ.
// NaN values never win.
func ChordElbow(ks []int, wcss []float64) int {
	if len(ks) != len(wcss) {
		panic("compute: slice length mismatch")
	}
	if len(ks) == 0 {
		return 0
	}
	n := len(ks)
	kmin, kmax := slices.Min(ks), slices.Max(ks)
	wmin, wmax := math.Inf(1), math.Inf(-1)
	for _, w := range wcss {
		if !math.IsNaN(w) {
			wmin, wmax = math.Min(wmin, w), math.Max(wmax, w)
		}
	}
	if n < 3 || kmax == kmin || !(wmax > wmin) {
		return ks[0]
	}
	nx := func(i int) float64 { return float64(ks[i]-kmin) / float64(kmax-kmin) }
	ny := func(i int) float64 { return (wcss[i] - wmin) / (wmax - wmin) }
	x0, y0, x1, y1 := nx(0), ny(0), nx(n-1), ny(n-1)
	dx, dy := x1-x0, y1-y0
	length := math.Hypot(dx, dy)
	best, bd := ks[0], -1.0
	for i := 0; i < n; i++ {
		d := math.Abs(dy*(nx(i)-x0)-dx*(ny(i)-y0)) / length
		if d > bd || (d == bd && ks[i] < best) {
			best, bd = ks[i], d
		}
	}
	return best
}

// SecondDifferenceElbow returns the interior k_i with the largest second
// difference of W: W(k_{i-1}) - 2 W(k_i) + W(k_{i+1}) for unit-spaced ks,
// in general the second divided difference
// 2 [ (W_{i+1}-W_i)/h_2 - (W_i-W_{i-1})/h_1 ] / (h_1 + h_2), h_1 = k_i - k_{i-1},
// h_2 = k_{i+1} - k_i. ks must be strictly increasing (panics otherwise, or
// if the lengths differ). Ties go to the smaller k. With fewer than three
// points it returns ks[0]; 0 for empty input. NaN values never win.
func SecondDifferenceElbow(ks []int, wcss []float64) int {
	if len(ks) != len(wcss) {
		panic("compute: slice length mismatch")
	}
	if len(ks) == 0 {
		return 0
	}
	for i := 1; i < len(ks); i++ {
		if ks[i] <= ks[i-1] {
			panic("compute: SecondDifferenceElbow needs strictly increasing ks")
		}
	}
	if len(ks) < 3 {
		return ks[0]
	}
	best, bd := ks[0], math.Inf(-1)
	for i := 1; i+1 < len(ks); i++ {
		h1, h2 := float64(ks[i]-ks[i-1]), float64(ks[i+1]-ks[i])
		d := 2 * ((wcss[i+1]-wcss[i])/h2 - (wcss[i]-wcss[i-1])/h1) / (h1 + h2)
		if d > bd {
			best, bd = ks[i], d
		}
	}
	return best
}
