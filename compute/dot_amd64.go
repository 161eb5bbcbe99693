package compute

import "golang.org/x/sys/cpu"

// useAVX2 selects the AVX2 + FMA kernels of dot_amd64.s; without them the
// portable kernels of dot.go run.
var useAVX2 = cpu.X86.HasAVX2 && cpu.X86.HasFMA

//go:noescape
func ddot4AVX2(n int, x, c0, c1, c2, c3 *float32) (d0, d1, d2, d3 float64)

//go:noescape
func ddot2AVX2(n int, x, c0, c1 *float32) (d0, d1 float64)

//go:noescape
func ddot1AVX2(n int, x, c *float32) float64

//go:noescape
func addWidenAVX2(n int, acc *float64, x *float32)

//go:noescape
func moveWidenAVX2(n int, from, into *float64, x *float32)

//go:noescape
func corrRowAVX2(n int, out *float32, cr, ss, qs *float64, a, b float64)

//go:noescape
func rank1DiffAVX2(n int, c, as, bs *float64, aj, bj float64)

//go:noescape
func ddot4mAVX2(n int, x *float32, c0, c1, c2, c3 *float64) (d0, d1, d2, d3 float64)

//go:noescape
func ddot2mAVX2(n int, x *float32, c0, c1 *float64) (d0, d1 float64)

//go:noescape
func ddot1mAVX2(n int, x *float32, c *float64) float64

//go:noescape
func varSumsAVX2(n int, r *float32, k float64, out *[8]float64)
