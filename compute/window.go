package compute

import (
	"errors"
	"fmt"
	"math"
	"slices"
)

// Taper selects the weights of the points inside a correlation window.
type Taper int

const (
	// TaperNone weights every point of the window equally (plain Pearson).
	TaperNone Taper = iota
	// TaperGauss weights the points by a rectangle convolved with a
	// Gaussian; see TaperWeights.
	TaperGauss
)

func (t Taper) String() string {
	switch t {
	case TaperNone:
		return "none"
	case TaperGauss:
		return "gauss"
	}
	return fmt.Sprintf("Taper(%d)", int(t))
}

// DefaultGaussSigma is the taper's Gaussian sigma, in time points, used when
// WindowOptions.GaussSigma is 0 (common practice, no source).
const DefaultGaussSigma = 3.0

// FisherClamp bounds |r| before the Fisher transform, so that a perfect
// correlation maps to atanh(1-1e-7) ~ 8.4 instead of infinity.
const FisherClamp = 1 - 1e-7

// WindowOptions sets up SlidingCorrelations.
type WindowOptions struct {
	Width, Step int // window width w >= 2 and step s >= 1, in time points
	Taper       Taper
	// GaussSigma is the taper's Gaussian sigma in time points (TaperGauss
	// only; ignored for TaperNone). 0 means DefaultGaussSigma.
	GaussSigma float64
	// FisherZ stores z = atanh(r) instead of r, with |r| first clamped to
	// FisherClamp.
	FisherZ bool
}

// Validate checks the options that do not depend on the series length.
func (o WindowOptions) Validate() error {
	switch {
	case o.Width < 2:
		return fmt.Errorf("compute: window width %d, need at least 2 time points", o.Width)
	case o.Step < 1:
		return fmt.Errorf("compute: window step %d, need at least 1 time point", o.Step)
	case o.Taper != TaperNone && o.Taper != TaperGauss:
		return fmt.Errorf("compute: unknown window taper %v", o.Taper)
	case math.IsNaN(o.GaussSigma) || math.IsInf(o.GaussSigma, 0) || o.GaussSigma < 0:
		return fmt.Errorf("compute: taper sigma %v is not a finite number >= 0", o.GaussSigma)
	}
	return nil
}

// NumWindows returns the number of windows of width w and step s in a series
// of T time points, W = floor((T-w)/s) + 1 (docs/methods.md §2). It returns 0
// when T < w, and also when w < 1 or s < 1 (no valid windows).
func NumWindows(T, w, s int) int {
	if w < 1 || s < 1 || T < w {
		return 0
	}
	return (T-w)/s + 1
}

// WindowStart returns the first time point of window i (0-based) with step
// s: i*s.
func WindowStart(i, s int) int { return i * s }

// WindowCentre returns the centre of window i in seconds, (i*s + (w-1)/2)*tr,
// for width w, step s and repetition time tr (docs/methods.md §2).
func WindowCentre(i, w, s int, tr float64) float64 {
	return (float64(i*s) + float64(w-1)/2) * tr
}

// TaperWeights returns the w weights of the tapered window: a rectangle
// convolved with a Gaussian. Time point t = 0..w-1 of the window is taken to
// cover [t, t+1); the rectangle is the indicator of [0, w); it is convolved
// with the Gaussian density of standard deviation sigma (in time points) and
// evaluated at the point's centre x = t + 1/2:
//
//	g_t = Phi(x/sigma) - Phi((x-w)/sigma)
//	    = (erf((t+1/2)/(sigma sqrt 2)) + erf((w-t-1/2)/(sigma sqrt 2))) / 2.
//
// The weights are symmetric, lie in (0, 1) and fall towards the ends (to
// about Phi(1/(2 sigma)) at the first and last point); their scale does not
// matter to a weighted correlation. sigma = 0 gives the rectangle (all 1).
// It panics if w < 1 or sigma is negative or not finite.
func TaperWeights(w int, sigma float64) []float64 {
	if w < 1 || !(sigma >= 0) || math.IsInf(sigma, 1) {
		panic(fmt.Sprintf("compute: TaperWeights needs w >= 1 and finite sigma >= 0 (w %d, sigma %v)", w, sigma))
	}
	g := make([]float64, w)
	if sigma == 0 {
		for t := range g {
			g[t] = 1
		}
		return g
	}
	h := 1 / (sigma * math.Sqrt2)
	for t := range g {
		x := float64(t) + 0.5
		g[t] = 0.5 * (math.Erf(x*h) + math.Erf((float64(w)-x)*h))
	}
	return g
}

// Tuning of the rectangular running-sum path.
const (
	// windowRefreshEvery is how many windows the running sums may be carried
	// before they are recomputed from scratch, bounding accumulated rounding.
	windowRefreshEvery = 256
	// windowIllConditioned: a window in which a region's variance term
	// n*S_ii - S_i^2 is below this fraction of n*S_ii (its window mean is
	// far from the series mean compared with its spread) is recomputed by
	// the two-pass formula, because the running-sum formula would lose
	// too many digits to cancellation there.
	windowIllConditioned = 1e-6
)

// SlidingCorrelations returns the windowed correlation vectors of docs/methods.md
// §2: row i is window i, covering time points i*s .. i*s+w-1; its
// PairCount(P) columns hold r_jk for regions j < k in PairIndex order (the
// upper triangle, row-major), stored as float32 (or atanh(r) with FisherZ,
// see FisherClamp).
//
// TaperNone gives the Pearson correlation over the window,
//
//	r_jk = sum_t (x_j - m_j)(x_k - m_k) / sqrt(sum_t (x_j - m_j)^2 sum_t (x_k - m_k)^2).
//
// TaperGauss gives the weighted Pearson correlation with the weights g_t of
// TaperWeights(w, sigma): the means m_j and every sum above carry the weight
// g_t (the same quantity gonum's stat.Correlation computes with weights).
//
// Precision: each region is first centred on its series mean and scaled to
// max |x| = 1 in float64; all sums are float64. Without a taper, when 2s < w,
// consecutive windows are updated in O(P^2) per entering and leaving time
// point from running sums of x_j and x_j x_k (recomputed from scratch every
// 256 windows, and replaced by the two-pass formula in any window where a
// region's variance would lose more than about six digits to cancellation);
// otherwise, and with the taper, each window is computed directly in O(w P^2).
//
// Errors (text "compute: ..."): invalid options (see WindowOptions.Validate),
// T < w, P < 2, NaN or infinite values (*RegionError wrapping ErrNonFinite),
// and a region whose w values within some window are all equal, so that its
// correlations are undefined (*RegionError wrapping ErrZeroVariance, naming
// the first such window and region). No NaN is ever stored.
func SlidingCorrelations(y Series, opt WindowOptions) (Matrix32, error) {
	return SlidingCorrelationsInto(nil, y, opt)
}

// SlidingCorrelationsInto is SlidingCorrelations writing into buf when its
// capacity suffices (a new matrix otherwise), so that a caller computing the
// windows of many series can reuse one buffer. The result aliases buf.
func SlidingCorrelationsInto(buf []float32, y Series, opt WindowOptions) (Matrix32, error) {
	sl, W, err := prepareWindows(y, opt)
	if err != nil {
		return Matrix32{}, err
	}
	var out Matrix32
	if D := PairCount(y.P); cap(buf) >= W*D {
		out = Matrix32{Rows: W, Cols: D, Data: buf[:W*D]} // every value is written below
	} else {
		out = NewMatrix32(W, D)
	}
	if err := sl.slide(W, opt, out.Row, nil); err != nil {
		return Matrix32{}, err
	}
	return out, nil
}

// SlidingCorrelationsEach computes the windows of SlidingCorrelations one
// at a time, in window order, into row (a scratch of at least
// PairCount(y.P) values; nil: one is allocated) and hands each to fn with
// its index. Every row holds exactly the values SlidingCorrelations would
// store in that row. fn must not keep row: the next window overwrites it.
// A caller that needs each window once (to label it and add it to a sum)
// thus never holds all of them, and reads each while it is still in the
// processor's cache. An error from fn stops the windows and is returned;
// SlidingCorrelations' errors are returned as it returns them: those about
// the options and the values before fn is first called, a window in which
// a region is constant when that window is reached (fn has then seen the
// windows before it).
func SlidingCorrelationsEach(y Series, opt WindowOptions, row []float32, fn func(i int, row []float32) error) error {
	sl, W, err := prepareWindows(y, opt)
	if err != nil {
		return err
	}
	D := PairCount(y.P)
	if len(row) < D {
		row = make([]float32, D)
	}
	row = row[:D]
	return sl.slide(W, opt, func(int) []float32 { return row }, fn)
}

// prepareWindows checks y and opt for SlidingCorrelations and returns the
// slider and the number of windows.
func prepareWindows(y Series, opt WindowOptions) (*windowSlider, int, error) {
	if err := opt.Validate(); err != nil {
		return nil, 0, err
	}
	if len(y.Data) != y.T*y.P || y.T < 0 || y.P < 0 {
		return nil, 0, fmt.Errorf("compute: series holds %d values, want T*P = %d*%d", len(y.Data), y.T, y.P)
	}
	if y.T < opt.Width {
		return nil, 0, fmt.Errorf("compute: series has %d time points, fewer than the window width %d", y.T, opt.Width)
	}
	if err := checkSeriesValues(y); err != nil {
		return nil, 0, err
	}
	sl, err := newWindowSlider(y, opt)
	if err != nil {
		return nil, 0, err
	}
	return sl, NumWindows(y.T, opt.Width, opt.Step), nil
}

// slide computes windows 0..W-1 in order, window i into rowOf(i), calling
// each (when not nil) after every window.
func (sl *windowSlider) slide(W int, opt WindowOptions, rowOf func(i int) []float32, each func(i int, row []float32) error) error {
	direct := opt.Taper == TaperGauss || 2*opt.Step >= opt.Width
	var g []float64
	if opt.Taper == TaperGauss {
		sigma := opt.GaussSigma
		if sigma == 0 {
			sigma = DefaultGaussSigma
		}
		g = TaperWeights(opt.Width, sigma)
	}
	for i := 0; i < W; i++ {
		row := rowOf(i)
		var err error
		if direct {
			err = sl.direct(i, g, row)
		} else {
			err = sl.running(i, row)
		}
		if err != nil {
			return err
		}
		if each != nil {
			if err := each(i, row); err != nil {
				return err
			}
		}
	}
	return nil
}

// windowSlider holds one series prepared for windowed correlation.
type windowSlider struct {
	t, p, w, s int
	fisher     bool
	x          []float64 // T x p, centred and scaled, row-major like Series
	next       []int32   // T x p: first time point after t whose value differs from x[t] (or T)
	rowStart   []int     // packed upper triangle with diagonal: (j,k) at rowStart[j]+k-j
	c          []float64 // packed triangle of sums (running: raw S_jk; direct: centred C_jk)
	sum        []float64 // running sums of x_j
	have       int       // window index the running sums hold, or -1
	since      int       // windows carried since the last refresh
	mean, q    []float64 // per-region scratch
	d          []float64 // w x p scratch for centred window values
}

func newWindowSlider(y Series, opt WindowOptions) (*windowSlider, error) {
	T, p := y.T, y.P
	sl := &windowSlider{t: T, p: p, w: opt.Width, s: opt.Step, fisher: opt.FisherZ,
		x: make([]float64, T*p), next: make([]int32, T*p), rowStart: make([]int, p+1),
		sum: make([]float64, p), have: -1, mean: make([]float64, p), q: make([]float64, p),
		d: make([]float64, opt.Width*p)}
	for j := 0; j < p; j++ {
		if err := scaleRegion(y, j, opt.Width, func(t int, v float64) { sl.x[t*p+j] = v }); err != nil {
			return nil, err
		}
	}
	for j := 0; j < p; j++ {
		sl.next[(T-1)*p+j] = int32(T)
	}
	for t := T - 2; t >= 0; t-- {
		cur, nxt := sl.x[t*p:(t+1)*p], sl.x[(t+1)*p:(t+2)*p]
		nc, nn := sl.next[t*p:(t+1)*p], sl.next[(t+1)*p:(t+2)*p]
		for j := range cur {
			if cur[j] != nxt[j] {
				nc[j] = int32(t + 1)
			} else {
				nc[j] = nn[j]
			}
		}
	}
	for j := 0; j < p; j++ {
		sl.rowStart[j+1] = sl.rowStart[j] + p - j
	}
	sl.c = make([]float64, sl.rowStart[p])
	return sl, nil
}

// scaleRegion centres region j of y on its mean and divides it by its
// largest deviation, handing each value to set (the window slider's
// working copy, and RegionWindowProblems, which must see exactly the same
// values to agree with it on which windows are constant).
func scaleRegion(y Series, j, width int, set func(t int, v float64)) error {
	T, p := y.T, y.P
	var m float64
	for t := 0; t < T; t++ {
		m += y.Data[t*p+j]
	}
	m /= float64(T)
	var mx float64
	for t := 0; t < T; t++ {
		mx = math.Max(mx, math.Abs(y.Data[t*p+j]-m))
	}
	if math.IsInf(m, 0) || math.IsInf(mx, 0) || math.IsNaN(mx) {
		return &RegionError{Region: j, Time: -1, Window: -1,
			Err: fmt.Errorf("%w: values too large to average", ErrNonFinite)}
	}
	if mx == 0 {
		return &RegionError{Region: j, Time: -1, Window: 0, Start: 0, Width: width,
			Err: fmt.Errorf("%w (constant over the whole series)", ErrZeroVariance)}
	}
	inv := 1 / mx
	for t := 0; t < T; t++ {
		set(t, (y.Data[t*p+j]-m)*inv)
	}
	return nil
}

// RegionWindowProblems finds every region of y whose correlations would be
// undefined in SlidingCorrelations after Preprocess with pre: a region
// with no variance left after preprocessing (Preprocess's error), or one
// whose preprocessed values are all equal within some window (the first
// such window is reported). Regions constant over the whole raw series are
// skipped (ConstantRegions; callers apply their own policy to them). Each
// problem is a *RegionError wrapping ErrZeroVariance with Region indexing
// y's columns. Validation calls it so that a series refused here is the
// series the computation would stop at, and no other.
func RegionWindowProblems(y Series, pre PreprocessOptions, win WindowOptions) []*RegionError {
	if y.T < 2 || len(y.Data) != y.T*y.P || win.Width < 2 || win.Step < 1 {
		return nil
	}
	whole := map[int]bool{}
	for _, j := range ConstantRegions(y) {
		whole[j] = true
	}
	var keep []int
	for j := 0; j < y.P; j++ {
		if !whole[j] {
			keep = append(keep, j)
		}
	}
	var out []*RegionError
	var z Series
	for {
		if len(keep) < 2 {
			return out
		}
		sub := NewSeries(y.T, len(keep))
		for t := 0; t < y.T; t++ {
			for c, j := range keep {
				sub.Data[t*len(keep)+c] = y.Data[t*y.P+j]
			}
		}
		var err error
		z, err = Preprocess(sub, pre)
		if err == nil {
			break
		}
		var re *RegionError
		if !errors.As(err, &re) || !errors.Is(err, ErrZeroVariance) || re.Region < 0 || re.Region >= len(keep) {
			return out // not a window problem (non-finite values, options): reported elsewhere
		}
		re.Region = keep[re.Region]
		out = append(out, re)
		keep = append(keep[:slices.Index(keep, re.Region)], keep[slices.Index(keep, re.Region)+1:]...)
	}
	nw := NumWindows(y.T, win.Width, win.Step)
	col := make([]float64, y.T)
	for c, j := range keep {
		if err := scaleRegion(z, c, win.Width, func(t int, v float64) { col[t] = v }); err != nil {
			var re *RegionError
			if errors.As(err, &re) && errors.Is(err, ErrZeroVariance) {
				re.Region = j
				out = append(out, re)
			}
			continue
		}
		// Runs of equal values; a window lies inside a run of length >= width.
		for s := 0; s < y.T; {
			e := s + 1
			for e < y.T && col[e] == col[s] {
				e++
			}
			if e-s >= win.Width {
				i := (s + win.Step - 1) / win.Step // first window starting at or after s
				if a := i * win.Step; i < nw && a+win.Width <= e {
					out = append(out, &RegionError{Region: j, Time: -1, Window: i, Start: a, Width: win.Width,
						Err: fmt.Errorf("%w: all %d values in the window are equal", ErrZeroVariance, win.Width)})
					break
				}
			}
			s = e
		}
	}
	slices.SortFunc(out, func(a, b *RegionError) int { return a.Region - b.Region })
	return out
}

// checkWindow reports the first region that is constant in window i.
func (sl *windowSlider) checkWindow(i int) error {
	a := i * sl.s
	for j, n := range sl.next[a*sl.p : (a+1)*sl.p] {
		if int(n) >= a+sl.w {
			return &RegionError{Region: j, Time: -1, Window: i, Start: a, Width: sl.w,
				Err: fmt.Errorf("%w: all %d values in the window are equal", ErrZeroVariance, sl.w)}
		}
	}
	return nil
}

// direct computes window i by the two-pass formula with weights g (nil: all 1).
func (sl *windowSlider) direct(i int, g []float64, row []float32) error {
	if err := sl.checkWindow(i); err != nil {
		return err
	}
	p, w := sl.p, sl.w
	a := i * sl.s
	xs := sl.x[a*p : (a+w)*p]
	mean := sl.mean
	clear(mean)
	var gsum float64
	for t := 0; t < w; t++ {
		gt := 1.0
		if g != nil {
			gt = g[t]
		}
		gsum += gt
		for j, v := range xs[t*p : (t+1)*p] {
			mean[j] += gt * v
		}
	}
	for j := range mean {
		mean[j] /= gsum
	}
	d := sl.d
	for t := 0; t < w; t++ {
		dt, xt := d[t*p:(t+1)*p], xs[t*p:(t+1)*p]
		for j := range dt {
			dt[j] = xt[j] - mean[j]
		}
	}
	c := sl.c
	clear(c)
	for t := 0; t < w; t++ {
		dt := d[t*p : (t+1)*p]
		if g == nil {
			packedRank1(c, sl.rowStart, dt, dt)
		} else {
			packedRank1Scaled(c, sl.rowStart, g[t], dt)
		}
	}
	for j := 0; j < p; j++ {
		v := c[sl.rowStart[j]]
		if !(v > 0) {
			return &RegionError{Region: j, Time: -1, Window: i, Start: a, Width: w,
				Err: fmt.Errorf("%w within the window", ErrZeroVariance)}
		}
		sl.q[j] = 1 / math.Sqrt(v)
	}
	k := 0
	for j := 0; j < p-1; j++ {
		qj := sl.q[j]
		cr := c[sl.rowStart[j]+1 : sl.rowStart[j+1]]
		qs := sl.q[j+1:]
		qs = qs[:len(cr)]
		out := row[k : k+len(cr)]
		out = out[:len(cr)]
		if sl.fisher {
			for m, v := range cr {
				out[m] = fisherZ32(v * qj * qs[m])
			}
		} else {
			for m, v := range cr {
				r := v * qj * qs[m]
				if r > 1 {
					r = 1
				} else if r < -1 {
					r = -1
				}
				out[m] = float32(r)
			}
		}
		k += len(cr)
	}
	return nil
}

// running computes window i from running sums, moving them from window i-1
// (or recomputing them) as needed.
func (sl *windowSlider) running(i int, row []float32) error {
	if err := sl.checkWindow(i); err != nil {
		return err
	}
	p, w := sl.p, sl.w
	a := i * sl.s
	if sl.have < 0 || sl.have != i-1 || sl.since >= windowRefreshEvery {
		clear(sl.c)
		clear(sl.sum)
		for t := a; t < a+w; t++ {
			xt := sl.x[t*p : (t+1)*p]
			packedRank1(sl.c, sl.rowStart, xt, xt)
			for j, v := range xt {
				sl.sum[j] += v
			}
		}
		sl.since = 0
	} else {
		prev := a - sl.s
		for u := 0; u < sl.s; u++ {
			in := sl.x[(prev+w+u)*p : (prev+w+u+1)*p]
			out := sl.x[(prev+u)*p : (prev+u+1)*p]
			packedRank1Diff(sl.c, sl.rowStart, in, out)
			for j := range in {
				sl.sum[j] += in[j] - out[j]
			}
		}
		sl.since++
	}
	sl.have = i

	n := float64(w)
	c, sum := sl.c, sl.sum
	for j := 0; j < p; j++ {
		nss := n * c[sl.rowStart[j]]
		v := nss - sum[j]*sum[j]
		if !(v > windowIllConditioned*nss) {
			// Too much cancellation (or none left): use the two-pass
			// formula for this window; the running sums stay as they are.
			err := sl.direct(i, nil, row)
			// direct overwrote the shared triangle; rebuild the sums
			// from scratch at the next window.
			sl.have = -1
			return err
		}
		sl.q[j] = 1 / math.Sqrt(v)
	}
	// r_jk = (n S_jk - S_j S_k) q_j q_k = (A v - B S_k) q_k with A = n q_j,
	// B = S_j q_j.
	k := 0
	for j := 0; j < p-1; j++ {
		A, B := n*sl.q[j], sum[j]*sl.q[j]
		cr := c[sl.rowStart[j]+1 : sl.rowStart[j+1]]
		qs := sl.q[j+1:]
		qs = qs[:len(cr)]
		ss := sum[j+1:]
		ss = ss[:len(cr)]
		out := row[k : k+len(cr)]
		out = out[:len(cr)]
		if sl.fisher {
			for m, v := range cr {
				out[m] = fisherZ32((A*v - B*ss[m]) * qs[m])
			}
		} else {
			m0 := 0
			if useAVX2 && len(cr) >= 4 {
				m0 = len(cr) &^ 3
				corrRowAVX2(m0, &out[0], &cr[0], &ss[0], &qs[0], A, B)
			}
			for m := m0; m < len(cr); m++ {
				r := (A*cr[m] - B*ss[m]) * qs[m]
				if r > 1 {
					r = 1
				} else if r < -1 {
					r = -1
				}
				out[m] = float32(r)
			}
		}
		k += len(cr)
	}
	return nil
}

// fisherZ32 returns atanh(r) as float32 after clamping r to
// [-FisherClamp, FisherClamp].
func fisherZ32(r float64) float32 {
	if r > FisherClamp {
		r = FisherClamp
	} else if r < -FisherClamp {
		r = -FisherClamp
	}
	return float32(math.Atanh(r))
}

// packedRank1 adds a b^T to the packed upper triangle c (with diagonal).
func packedRank1(c []float64, rowStart []int, a, b []float64) {
	p := len(a)
	for j := 0; j < p; j++ {
		aj := a[j]
		cr := c[rowStart[j]:rowStart[j+1]]
		bs := b[j:]
		bs = bs[:len(cr)]
		for m, v := range bs {
			cr[m] += aj * v
		}
	}
}

// packedRank1Scaled adds g d d^T to the packed upper triangle c.
func packedRank1Scaled(c []float64, rowStart []int, g float64, d []float64) {
	p := len(d)
	for j := 0; j < p; j++ {
		aj := g * d[j]
		cr := c[rowStart[j]:rowStart[j+1]]
		ds := d[j:]
		ds = ds[:len(cr)]
		for m, v := range ds {
			cr[m] += aj * v
		}
	}
}

// packedRank1Diff adds a a^T - b b^T to the packed upper triangle c.
func packedRank1Diff(c []float64, rowStart []int, a, b []float64) {
	p := len(a)
	for j := 0; j < p; j++ {
		aj, bj := a[j], b[j]
		cr := c[rowStart[j]:rowStart[j+1]]
		as := a[j:]
		as = as[:len(cr)]
		bs := b[j:]
		bs = bs[:len(cr)]
		m0 := 0
		if useAVX2 && len(cr) >= 4 {
			m0 = len(cr) &^ 3
			rank1DiffAVX2(m0, &cr[0], &as[0], &bs[0], aj, bj)
		}
		for m := m0; m < len(cr); m++ {
			cr[m] += aj*as[m] - bj*bs[m]
		}
	}
}

// WindowVariance returns, for each row of win, the population variance of
// its values, (1/n) sum (v - mean)^2 with n = win.Cols, computed in float64
// in one pass from the sums of d = v - v_0 and d^2 (v_0 the row's first
// value: shifting by a value of the row keeps the cancellation of the
// one-pass formula small), as (sum d^2 - (sum d)^2 / n) / n. A row of no
// values has variance 0.
func WindowVariance(win Matrix32) []float64 {
	out := make([]float64, win.Rows)
	if win.Cols == 0 {
		return out
	}
	for i := range out {
		out[i] = RowVariance(win.Row(i))
	}
	return out
}

// RowVariance is WindowVariance of one row r (bit-identical): the
// population variance of its values, 0 for no values.
func RowVariance(r []float32) float64 {
	if len(r) == 0 {
		return 0
	}
	n := float64(len(r))
	k := float64(r[0])
	var s0, s1, s2, s3, q0, q1, q2, q3 float64
	j := 0
	if useAVX2 && len(r) >= 4 {
		j = len(r) &^ 3
		var lanes [8]float64
		varSumsAVX2(j, &r[0], k, &lanes)
		s0, s1, s2, s3 = lanes[0], lanes[1], lanes[2], lanes[3]
		q0, q1, q2, q3 = lanes[4], lanes[5], lanes[6], lanes[7]
	}
	for ; j+4 <= len(r); j += 4 {
		d0, d1, d2, d3 := float64(r[j])-k, float64(r[j+1])-k, float64(r[j+2])-k, float64(r[j+3])-k
		s0, s1, s2, s3 = s0+d0, s1+d1, s2+d2, s3+d3
		q0, q1, q2, q3 = q0+d0*d0, q1+d1*d1, q2+d2*d2, q3+d3*d3
	}
	for ; j < len(r); j++ {
		d := float64(r[j]) - k
		s0 += d
		q0 += d * d
	}
	sum, sq := (s0+s1)+(s2+s3), (q0+q1)+(q2+q3)
	return max(sq-sum*sum/n, 0) / n
}

// LocalMaxima returns, in increasing order, the indices i at which v has a
// local maximum: v[i] > v[i-1] and v[i] >= v[i+1]. At the ends the missing
// neighbour counts as -Inf, so index 0 qualifies when v[0] >= v[1] and the
// last index when it exceeds its left neighbour; a single value is a
// maximum. On a plateau only its first point qualifies. A NaN is never a
// maximum and never lets a neighbour be one. Used to pick the variance-peak windows
// (docs/methods.md §3). It returns nil for an empty v.
func LocalMaxima(v []float64) []int {
	var out []int
	n := len(v)
	for i, x := range v {
		left := i == 0 || x > v[i-1]
		right := i == n-1 || x >= v[i+1]
		if left && right && !math.IsNaN(x) { // comparisons with a NaN neighbour are false
			out = append(out, i)
		}
	}
	return out
}
