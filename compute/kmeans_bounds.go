package compute

import (
	"math"
	"slices"
)

// Lloyd iterations for the squared Euclidean distance with Elkan's bounds
// (C. Elkan, "Using the triangle inequality to accelerate k-means", ICML
// 2003). Every row keeps an upper bound u_i on its distance (not squared) to
// its own centre a and a lower bound l_ic on its distance to every centre c.
// When the centres move by delta_c, u_i grows by delta_a and l_ic shrinks by
// delta_c (triangle inequality). Centre c cannot be nearer than a when
// u_i <= l_ic or u_i <= d(a, c)/2, and no centre can when
// u_i <= min_c d(a, c)/2; only the distances these tests cannot rule out are
// computed (u_i first made exact).
//
// The labels are those plain Lloyd iterations give: a centre is ruled out
// only when its squared distance exceeds the current nearest one's by more
// than boundMargin (xn_i + max_c ||c||^2), far above the rounding of the
// computed distances (xn + cn - 2 x.c in float64 from exact float32
// products), so the outcome cannot depend on the rounding; the centres not
// ruled out are compared on their computed distances with ties to the
// lowest index, as in assignRows.
//
// The centre sums S_c = sum of the rows in c are kept in float64 and
// updated only for rows that changed cluster (rows in index order), and the
// objective used by the tolerance rule is
// W = sum_c (sum_{i in c} ||x_i||^2 - 2 c.S_c + n_c ||c||^2), an identity
// that holds for any centre c; the WCSS returned is recomputed at the end
// from every row's distance, summed in row order.

// boundMargin is the relative safety margin of the skip test.
const boundMargin = 1e-10

// sumColBlock is the smallest column range one worker sums at a time.
const sumColBlock = 512

// skipSafe reports whether a centre at distance at least z from a row is
// certainly farther than the centre at distance at most u.
func skipSafe(u, z, scale float64) bool {
	return z > u && (z-u)*(z+u) > boundMargin*scale
}

// elkan is the state of one restart.
type elkan struct {
	f      *kmFit
	k      int
	c      Matrix32  // current centres
	cw     wide      // the same, widened to float64 for the mixed kernels
	old    []float32 // centres before the update
	cn     []float64 // ||c||^2
	sums   []float64 // k x dim: S_c
	counts []int
	sqn    []float64 // sum of ||x_i||^2 over the rows of each centre
	labels []int
	upper  []float64 // n: u_i
	lower  []float64 // n x k: l_ic
	drift  []float64 // distance each centre moved in the last update
	half   []float64 // k x k: half the distance between two centres
	near   []float64 // k: half the distance from each centre to the nearest other
	moved  [][]move  // per row block: rows that changed centre, in row order
	cnMax  float64   // the largest ||c||^2, set by update
}

// move records a row that changed centre and the centre it left.
type move struct{ row, from int }

// runBounded runs Lloyd iterations from the k centres c (modified in
// place); d[i*stride+j] is row i's squared distance to centre j, as the
// seeding computed it. See run for the contract.
func (f *kmFit) runBounded(c Matrix32, d []float64, stride, maxIter int, tol float64) KMeansResult {
	r := f.startBounded(c, d, stride, maxIter, tol)
	for !r.done {
		r.h.update()
		r.next(r.h.assignBounded())
	}
	return r.result()
}

// boundedRun is one restart of runBounded between its iterations, so that
// several can run side by side (runBoundedTogether).
type boundedRun struct {
	h       *elkan
	dist    []float64
	w       float64
	res     KMeansResult
	maxIter int
	tol     float64
	done    bool
}

// startBounded sets up runBounded's state: the first assignment from the
// seeding's distances (the same values a fresh computation gives: dot32 and
// dotsRow agree bit for bit), then the repair of empty clusters (as run
// does), then the sums from scratch.
func (f *kmFit) startBounded(c Matrix32, d []float64, stride, maxIter int, tol float64) *boundedRun {
	n, dim, k := f.x.Rows, f.x.Cols, c.Rows
	h := &elkan{f: f, k: k, c: c, cw: widen(c), old: make([]float32, k*dim), cn: rowNorms(c, 1),
		sums: make([]float64, k*dim), counts: make([]int, k), sqn: make([]float64, k),
		labels: make([]int, n), upper: make([]float64, n), lower: make([]float64, n*k),
		drift: make([]float64, k), half: make([]float64, k*k), near: make([]float64, k),
		moved: make([][]move, blocks(n, rowBlock))}
	dist := make([]float64, n)
	h.assignAll(d, stride, dist)
	if f.repair(h.labels, dist, h.c, h.cn) {
		h.resetBounds(dist)
	}
	h.cw = widen(h.c)
	h.sumsFromScratch()
	return &boundedRun{h: h, dist: dist, w: sumOrdered(dist), maxIter: maxIter, tol: tol, done: maxIter <= 0}
}

// next ends an iteration whose assignment step reported changed: empty
// clusters repaired, the objective and the stopping rules.
func (r *boundedRun) next(changed bool) {
	h := r.h
	if slices.Contains(h.counts, 0) {
		h.exactDist(r.dist)
		h.f.repair(h.labels, r.dist, h.c, h.cn)
		h.cw = widen(h.c)
		h.resetBounds(r.dist)
		h.sumsFromScratch()
		changed = true
	}
	r.res.Iterations++
	wOld := r.w
	r.w = h.objective()
	if !changed || r.w == 0 || wOld-r.w < r.tol*wOld {
		r.res.Converged = true
		r.done = true
	}
	if r.res.Iterations >= r.maxIter {
		r.done = true
	}
}

// result is the finished run: centres, labels and the WCSS from every
// row's distance, summed in row order.
func (r *boundedRun) result() KMeansResult {
	h := r.h
	h.exactDist(r.dist)
	r.res.Centroids, r.res.Labels, r.res.WCSS = h.c, h.labels, sumOrdered(r.dist)
	return r.res
}

// runBoundedTogether runs the iterations of several restarts (the k of one
// elbow-scan restart) side by side: each iteration's assignment step reads
// a few rows once for every unfinished run (assignBoundedMany) instead of
// reading the whole pool once per run, the part of the scan that memory
// bandwidth bounds. Every run does exactly the steps runBounded would, so
// each result is bit-identical to its own runBounded. stop, when not nil,
// is polled between iterations; it returning true ends the call with false.
func runBoundedTogether(runs []*boundedRun, stop func() bool) bool {
	for {
		var active []*boundedRun
		for _, r := range runs {
			if !r.done {
				active = append(active, r)
			}
		}
		if len(active) == 0 {
			return true
		}
		if stop != nil && stop() {
			return false
		}
		hs := make([]*elkan, len(active))
		for j, r := range active {
			r.h.update()
			hs[j] = r.h
		}
		changed := assignBoundedMany(hs)
		for j, r := range active {
			r.next(changed[j])
		}
	}
}

// assignAll labels every row with its nearest centre (ties to the lowest
// index) from d[i*stride+j], the squared distances, setting every bound
// exactly and own[i] to row i's squared distance to its centre.
func (h *elkan) assignAll(d []float64, stride int, own []float64) {
	k := h.k
	for i := range h.labels {
		lo := h.lower[i*k : (i+1)*k]
		best, bd := -1, math.Inf(1)
		for m, v := range d[i*stride : i*stride+k] {
			lo[m] = math.Sqrt(v)
			if v < bd {
				best, bd = m, v
			}
		}
		h.labels[i], h.upper[i], own[i] = best, math.Sqrt(bd), bd
	}
}

// dist2 is the squared distance of row i to centre c.
func (h *elkan) dist2(i, c int) float64 {
	return max(h.f.xn[i]+h.cn[c]-2*dotMixed(h.f.x.Row(i), h.cw.row(c)), 0)
}

// exactDist sets dist[i] to every row's squared distance to its centre.
func (h *elkan) exactDist(dist []float64) {
	parallelFor(blocks(len(dist), rowBlock), h.f.workers, func(_, b int) {
		for i := b * rowBlock; i < min((b+1)*rowBlock, len(dist)); i++ {
			dist[i] = h.dist2(i, h.labels[i])
		}
	})
}

// resetBounds makes the bounds exact for the own centre (from dist) and
// forces a full check of every row at the next assignment (after a repair
// moved a centre onto a row).
func (h *elkan) resetBounds(dist []float64) {
	for i, d := range dist {
		h.upper[i] = math.Sqrt(d)
	}
	clear(h.lower)
}

// colRanges splits dim columns into ranges of at least sumColBlock columns,
// about two per worker. Sums per column run over the rows in index order
// whatever the split, so the split does not change any value.
func (h *elkan) colRanges() int {
	dim := h.f.x.Cols
	nb := max(1, 2*h.f.workers)
	return max(1, min(nb, dim/sumColBlock))
}

// sumsFromScratch recomputes S_c, n_c and the sums of squared norms.
func (h *elkan) sumsFromScratch() {
	x, dim := h.f.x, h.f.x.Cols
	clear(h.sums)
	clear(h.counts)
	clear(h.sqn)
	for i, l := range h.labels {
		h.counts[l]++
		h.sqn[l] += h.f.xn[i]
	}
	nb := h.colRanges()
	parallelFor(nb, h.f.workers, func(_, b int) {
		j0, j1 := b*dim/nb, (b+1)*dim/nb
		for i, l := range h.labels {
			addWiden(h.sums[l*dim+j0:l*dim+j1], x.Data[i*dim+j0:i*dim+j1])
		}
	})
}

// update moves every non-empty centre to the mean of its rows, S_c / n_c,
// and sets the drifts, the norms and the half distances between centres.
func (h *elkan) update() {
	dim, k := h.f.x.Cols, h.k
	copy(h.old, h.c.Data)
	parallelFor(k, h.f.workers, func(_, l int) {
		if h.counts[l] == 0 {
			h.drift[l] = 0
			return
		}
		inv := float64(h.counts[l])
		dst, s, old := h.c.Data[l*dim:(l+1)*dim], h.sums[l*dim:(l+1)*dim], h.old[l*dim:(l+1)*dim]
		dw := h.cw.row(l)
		var d float64
		for j := range dst {
			v := float32(s[j] / inv)
			dst[j], dw[j] = v, float64(v)
			e := float64(v) - float64(old[j])
			d += e * e
		}
		h.drift[l] = math.Sqrt(d)
		h.cn[l] = dot32(dst, dst)
	})
	h.cnMax = slices.Max(h.cn)
	for a := range h.near {
		h.near[a] = math.Inf(1)
	}
	for a := 0; a < k; a++ {
		h.half[a*k+a] = 0
		for b := a + 1; b < k; b++ {
			v := h.cn[a] + h.cn[b] - 2*dot32(h.c.Row(a), h.c.Row(b))
			d := math.Sqrt(max(v, 0)) / 2
			h.half[a*k+b], h.half[b*k+a] = d, d
			h.near[a] = min(h.near[a], d)
			h.near[b] = min(h.near[b], d)
		}
	}
}

// assignBounded is one bounded assignment step; it moves the rows that
// change centre in the sums and reports whether any did.
func (h *elkan) assignBounded() bool { return assignBoundedMany([]*elkan{h})[0] }

// groupRows is how many rows assignBoundedMany takes through every run
// before the next rows: a few windows of 200-400 regions stay in a core's
// cache while every run's centres stream past them.
const groupRows = 4

// assignBoundedMany is one bounded assignment step of each of hs (runs on
// the same rows): within each block of rows, groupRows rows at a time go
// through every run in turn, each run's rows in index order, so every run
// does what its own assignBounded would.
func assignBoundedMany(hs []*elkan) []bool {
	f := hs[0].f
	x := f.x
	kmax := 0
	for _, h := range hs {
		kmax = max(kmax, h.k)
	}
	bufs := make([]scratch, max(1, f.workers))
	for w := range bufs {
		bufs[w] = scratch{make([]int, 0, kmax), make([]float64, kmax)}
	}
	group := rowBlock
	if len(hs) > 1 {
		group = groupRows
	}
	parallelFor(len(hs[0].moved), f.workers, func(wk, b int) {
		for _, h := range hs {
			h.moved[b] = h.moved[b][:0]
		}
		end := min((b+1)*rowBlock, x.Rows)
		for g := b * rowBlock; g < end; g += group {
			for _, h := range hs {
				for i := g; i < min(g+group, end); i++ {
					h.assignRow(i, &bufs[wk], b)
				}
			}
		}
	})
	changed := make([]bool, len(hs))
	for j, h := range hs {
		var moved []move
		for _, mv := range h.moved {
			moved = append(moved, mv...)
		}
		if len(moved) > 0 {
			h.moveRows(moved)
			changed[j] = true
		}
	}
	return changed
}

// scratch is one worker's buffers for assignRow.
type scratch struct {
	idx  []int
	dots []float64
}

// assignRow is the bounded assignment of row i (of row block b): the
// bounds are loosened by the last drifts and tested; the distances they
// cannot settle are computed; a row that changes centre is recorded in
// h.moved[b].
func (h *elkan) assignRow(i int, buf *scratch, b int) {
	x, k := h.f.x, h.k
	a := h.labels[i]
	lo := h.lower[i*k : (i+1)*k]
	for c, d := range h.drift {
		lo[c] = max(lo[c]-d, 0)
	}
	u := h.upper[i] + h.drift[a]
	sc := h.f.xn[i] + h.cnMax
	if skipSafe(u, h.near[a], sc) {
		h.upper[i] = u
		return
	}
	// Centres the loose bound cannot rule out; if any, make u
	// exact and test again; compute the survivors together.
	cand := buf.idx[:0]
	for c := range k {
		if c != a && !skipSafe(u, max(lo[c], h.half[a*k+c]), sc) {
			cand = append(cand, c)
		}
	}
	if len(cand) == 0 {
		h.upper[i] = u
		return
	}
	xn := h.f.xn[i]
	bd := max(xn+h.cn[a]-2*dot32(x.Row(i), h.c.Row(a)), 0) // dist2 from the float32 centre, the same value
	u = math.Sqrt(bd)
	lo[a] = u
	keep := cand[:0]
	for _, c := range cand {
		if !skipSafe(u, max(lo[c], h.half[a*k+c]), sc) {
			keep = append(keep, c)
		}
	}
	best := a
	if len(keep) > 0 {
		dots := buf.dots[:len(keep)]
		dotsIdx32(x.Row(i), h.c, keep, dots)
		for t, c := range keep {
			dc := max(xn+h.cn[c]-2*dots[t], 0)
			lo[c] = math.Sqrt(dc)
			if dc < bd || (dc == bd && c < best) {
				best, bd, u = c, dc, lo[c]
			}
		}
	}
	h.upper[i] = u
	if best != a {
		h.labels[i] = best
		h.moved[b] = append(h.moved[b], move{i, a})
	}
}

// moveRows takes the moved rows out of their old centre's sums and into
// their new one's, rows in index order.
func (h *elkan) moveRows(moved []move) {
	x, dim := h.f.x, h.f.x.Cols
	for _, m := range moved {
		to := h.labels[m.row]
		h.counts[m.from]--
		h.counts[to]++
		h.sqn[m.from] -= h.f.xn[m.row]
		h.sqn[to] += h.f.xn[m.row]
	}
	nb := h.colRanges()
	if len(moved) < 64 {
		nb = 1
	}
	parallelFor(nb, h.f.workers, func(_, b int) {
		j0, j1 := b*dim/nb, (b+1)*dim/nb
		for _, m := range moved {
			to := h.labels[m.row]
			moveWiden(h.sums[m.from*dim+j0:m.from*dim+j1], h.sums[to*dim+j0:to*dim+j1], x.Data[m.row*dim+j0:m.row*dim+j1])
		}
	})
}

// objective is W = sum_c (sum_{i in c} ||x_i||^2 - 2 c.S_c + n_c ||c||^2),
// the within-cluster sum of squares of the current labels about the
// current centres.
func (h *elkan) objective() float64 {
	dim := h.f.x.Cols
	w := 0.0
	for l := 0; l < h.k; l++ {
		if h.counts[l] == 0 {
			continue
		}
		c, s := h.c.Row(l), h.sums[l*dim:(l+1)*dim]
		var cs float64
		for j, v := range c {
			cs += float64(v) * s[j]
		}
		w += h.sqn[l] - 2*cs + float64(h.counts[l])*h.cn[l]
	}
	return max(w, 0)
}
