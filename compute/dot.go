package compute

// Dot-product kernels of k-means and Assign: float32 vectors, every product
// formed exactly in float64 (a product of two float32 values always fits)
// and accumulated in float64, as BLAS dsdot does. The sum runs in eight
// lanes (lane l takes the elements j = l mod 8 of the first n - n mod 8),
// the lanes are combined as ((a0+a4) + (a2+a6)) + ((a1+a5) + (a3+a7)), and
// the last n mod 8 products are added in order. On amd64 with AVX2 and FMA
// the kernels of dot_amd64.s do exactly this with vector instructions (one
// row against up to four centres at a time, so the row is read once for
// four products); elsewhere the portable loops below do it, so every path
// gives bit-identical values. k-means relies on that: distances from the
// seeding are reused in the first assignment.

// wide holds rows of float32 values widened to float64 (exactly), for the
// mixed kernels: the centres of k-means, widened once per update, so the
// inner loops convert only the data row.
type wide struct {
	Rows, Cols int
	Data       []float64
}

// widen returns m's values as float64.
func widen(m Matrix32) wide {
	w := wide{Rows: m.Rows, Cols: m.Cols, Data: make([]float64, len(m.Data))}
	for i, v := range m.Data {
		w.Data[i] = float64(v)
	}
	return w
}

func (w wide) row(i int) []float64 { return w.Data[i*w.Cols : (i+1)*w.Cols] }

// lanes combines the eight lane sums in the kernels' order.
func lanes(a *[8]float64) float64 {
	v0, v1, v2, v3 := a[0]+a[4], a[1]+a[5], a[2]+a[6], a[3]+a[7]
	return (v0 + v2) + (v1 + v3)
}

// dot32 returns sum_j x_j y_j. It panics if the lengths differ.
func dot32(x, y []float32) float64 {
	if len(x) != len(y) {
		panic("compute: slice length mismatch")
	}
	n8 := len(x) &^ 7
	var s float64
	if useAVX2 && n8 > 0 {
		s = ddot1AVX2(n8, &x[0], &y[0])
	} else {
		var a [8]float64
		for j := 0; j < n8; j += 8 {
			xs, ys := x[j:j+8], y[j:j+8]
			for l := range a {
				a[l] += float64(xs[l]) * float64(ys[l])
			}
		}
		s = lanes(&a)
	}
	for j := n8; j < len(x); j++ {
		s += float64(x[j]) * float64(y[j])
	}
	return s
}

// dotMixed returns sum_j x_j c_j for c holding float32 values widened to
// float64: bit-identical to dot32 on the float32 values.
func dotMixed(x []float32, c []float64) float64 {
	if len(x) != len(c) {
		panic("compute: slice length mismatch")
	}
	n8 := len(x) &^ 7
	var s float64
	if useAVX2 && n8 > 0 {
		s = ddot1mAVX2(n8, &x[0], &c[0])
	} else {
		var a [8]float64
		for j := 0; j < n8; j += 8 {
			xs, cs := x[j:j+8], c[j:j+8]
			for l := range a {
				a[l] += float64(xs[l]) * cs[l]
			}
		}
		s = lanes(&a)
	}
	for j := n8; j < len(x); j++ {
		s += float64(x[j]) * c[j]
	}
	return s
}

// dotsRow sets out[m] = x . c_m for every row m of c (out has c.Rows
// values), bit-identical to dotMixed on each row.
func dotsRow(x []float32, c wide, out []float64) {
	if len(out) != c.Rows {
		panic("compute: slice length mismatch")
	}
	dotsRows(x, c, len(out), func(t int) int { return t }, out)
}

// dotsIdx sets out[t] = x . c_{idx[t]} for every t, bit-identical to
// dotMixed on each row.
func dotsIdx(x []float32, c wide, idx []int, out []float64) {
	if len(out) != len(idx) {
		panic("compute: slice length mismatch")
	}
	dotsRows(x, c, len(idx), func(t int) int { return idx[t] }, out)
}

func dotsRows(x []float32, c wide, n int, row func(t int) int, out []float64) {
	d := len(x)
	if d != c.Cols {
		panic("compute: slice length mismatch")
	}
	d8 := d &^ 7
	if !useAVX2 || d8 == 0 {
		for t := range n {
			out[t] = dotMixed(x, c.row(row(t)))
		}
		return
	}
	t := 0
	for ; t+4 <= n; t += 4 {
		c0, c1, c2, c3 := c.row(row(t)), c.row(row(t+1)), c.row(row(t+2)), c.row(row(t+3))
		d0, d1, d2, d3 := ddot4mAVX2(d8, &x[0], &c0[0], &c1[0], &c2[0], &c3[0])
		for j := d8; j < d; j++ {
			v := float64(x[j])
			d0 += v * c0[j]
			d1 += v * c1[j]
			d2 += v * c2[j]
			d3 += v * c3[j]
		}
		out[t], out[t+1], out[t+2], out[t+3] = d0, d1, d2, d3
	}
	if t+2 <= n {
		c0, c1 := c.row(row(t)), c.row(row(t+1))
		d0, d1 := ddot2mAVX2(d8, &x[0], &c0[0], &c1[0])
		for j := d8; j < d; j++ {
			v := float64(x[j])
			d0 += v * c0[j]
			d1 += v * c1[j]
		}
		out[t], out[t+1] = d0, d1
		t += 2
	}
	if t < n {
		out[t] = dotMixed(x, c.row(row(t)))
	}
}

// dotsIdx32 sets out[t] = x . c.Row(idx[t]) like dotsIdx, from the float32
// centres themselves (each widened in the kernel): bit-identical to dotsIdx
// on widen(c), with half the bytes of centres read. When the row is in
// cache and the centres are not (k-means on windows of 200 and more
// regions), those bytes are the cost.
func dotsIdx32(x []float32, c Matrix32, idx []int, out []float64) {
	d, n := len(x), len(idx)
	if d != c.Cols || len(out) != n {
		panic("compute: slice length mismatch")
	}
	d8 := d &^ 7
	if !useAVX2 || d8 == 0 {
		for t, m := range idx {
			out[t] = dot32(x, c.Row(m))
		}
		return
	}
	t := 0
	for ; t+4 <= n; t += 4 {
		c0, c1, c2, c3 := c.Row(idx[t]), c.Row(idx[t+1]), c.Row(idx[t+2]), c.Row(idx[t+3])
		d0, d1, d2, d3 := ddot4AVX2(d8, &x[0], &c0[0], &c1[0], &c2[0], &c3[0])
		for j := d8; j < d; j++ {
			v := float64(x[j])
			d0 += v * float64(c0[j])
			d1 += v * float64(c1[j])
			d2 += v * float64(c2[j])
			d3 += v * float64(c3[j])
		}
		out[t], out[t+1], out[t+2], out[t+3] = d0, d1, d2, d3
	}
	if t+2 <= n {
		c0, c1 := c.Row(idx[t]), c.Row(idx[t+1])
		d0, d1 := ddot2AVX2(d8, &x[0], &c0[0], &c1[0])
		for j := d8; j < d; j++ {
			v := float64(x[j])
			d0 += v * float64(c0[j])
			d1 += v * float64(c1[j])
		}
		out[t], out[t+1] = d0, d1
		t += 2
	}
	if t < n {
		out[t] = dot32(x, c.Row(idx[t]))
	}
}

// addWiden sets acc[j] += float64(x[j]) for every j (the same values in
// either path: each addition is one float64 rounding). It panics if the
// lengths differ.
func addWiden(acc []float64, x []float32) {
	if len(acc) != len(x) {
		panic("compute: slice length mismatch")
	}
	n8 := 0
	if useAVX2 && len(x) >= 8 {
		n8 = len(x) &^ 7
		addWidenAVX2(n8, &acc[0], &x[0])
	}
	for j := n8; j < len(x); j++ {
		acc[j] += float64(x[j])
	}
}

// moveWiden sets from[j] -= float64(x[j]) and into[j] += float64(x[j]) for
// every j. It panics if the lengths differ.
func moveWiden(from, into []float64, x []float32) {
	if len(from) != len(x) || len(into) != len(x) {
		panic("compute: slice length mismatch")
	}
	n8 := 0
	if useAVX2 && len(x) >= 8 {
		n8 = len(x) &^ 7
		moveWidenAVX2(n8, &from[0], &into[0], &x[0])
	}
	for j := n8; j < len(x); j++ {
		v := float64(x[j])
		from[j] -= v
		into[j] += v
	}
}
