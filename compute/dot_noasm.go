//go:build !amd64

package compute

const useAVX2 = false

func ddot4AVX2(n int, x, c0, c1, c2, c3 *float32) (d0, d1, d2, d3 float64) {
	panic("compute: no AVX2 kernel on this architecture")
}

func ddot2AVX2(n int, x, c0, c1 *float32) (d0, d1 float64) {
	panic("compute: no AVX2 kernel on this architecture")
}

func ddot1AVX2(n int, x, c *float32) float64 {
	panic("compute: no AVX2 kernel on this architecture")
}

func addWidenAVX2(n int, acc *float64, x *float32) {
	panic("compute: no AVX2 kernel on this architecture")
}

func moveWidenAVX2(n int, from, into *float64, x *float32) {
	panic("compute: no AVX2 kernel on this architecture")
}

func corrRowAVX2(n int, out *float32, cr, ss, qs *float64, a, b float64) {
	panic("compute: no AVX2 kernel on this architecture")
}

func rank1DiffAVX2(n int, c, as, bs *float64, aj, bj float64) {
	panic("compute: no AVX2 kernel on this architecture")
}

func ddot4mAVX2(n int, x *float32, c0, c1, c2, c3 *float64) (d0, d1, d2, d3 float64) {
	panic("compute: no AVX2 kernel on this architecture")
}

func ddot2mAVX2(n int, x *float32, c0, c1 *float64) (d0, d1 float64) {
	panic("compute: no AVX2 kernel on this architecture")
}

func ddot1mAVX2(n int, x *float32, c *float64) float64 {
	panic("compute: no AVX2 kernel on this architecture")
}

func varSumsAVX2(n int, r *float32, k float64, out *[8]float64) {
	panic("compute: no AVX2 kernel on this architecture")
}
