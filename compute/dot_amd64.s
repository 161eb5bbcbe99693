#include "textflag.h"

// Dot products of float32 vectors accumulated in float64 (AVX2 + FMA).
// Every float32 is widened to float64 (VCVTPS2PD), so each product is exact
// and only the float64 additions round, as in BLAS dsdot. n must be a
// multiple of 8; callers add the tail. Each product x.c keeps two 4-lane
// accumulators (elements 8t..8t+3 and 8t+4..8t+7), summed at the end in
// the same order by all three kernels, so ddot1, ddot2 and ddot4 return
// bit-identical values for the same pair of vectors.

// REDUCE sums the 8 lanes of accumulators a and b into the low lane of a's
// xmm half. Uses X0.
#define REDUCE(a, b, xa) \
	VADDPD b, a, a \
	VEXTRACTF128 $1, a, X0 \
	VADDPD X0, xa, xa \
	VHADDPD xa, xa, xa

// func ddot4AVX2(n int, x, c0, c1, c2, c3 *float32) (d0, d1, d2, d3 float64)
TEXT ·ddot4AVX2(SB), NOSPLIT, $0-80
	MOVQ n+0(FP), CX
	MOVQ x+8(FP), SI
	MOVQ c0+16(FP), R8
	MOVQ c1+24(FP), R9
	MOVQ c2+32(FP), R10
	MOVQ c3+40(FP), R11
	VXORPD Y8, Y8, Y8
	VXORPD Y9, Y9, Y9
	VXORPD Y10, Y10, Y10
	VXORPD Y11, Y11, Y11
	VXORPD Y12, Y12, Y12
	VXORPD Y13, Y13, Y13
	VXORPD Y14, Y14, Y14
	VXORPD Y15, Y15, Y15
	XORQ AX, AX
	CMPQ CX, $0
	JLE  done4

loop4:
	VCVTPS2PD (SI)(AX*4), Y0
	VCVTPS2PD 16(SI)(AX*4), Y1
	VCVTPS2PD (R8)(AX*4), Y2
	VCVTPS2PD 16(R8)(AX*4), Y3
	VFMADD231PD Y0, Y2, Y8
	VFMADD231PD Y1, Y3, Y9
	VCVTPS2PD (R9)(AX*4), Y4
	VCVTPS2PD 16(R9)(AX*4), Y5
	VFMADD231PD Y0, Y4, Y10
	VFMADD231PD Y1, Y5, Y11
	VCVTPS2PD (R10)(AX*4), Y2
	VCVTPS2PD 16(R10)(AX*4), Y3
	VFMADD231PD Y0, Y2, Y12
	VFMADD231PD Y1, Y3, Y13
	VCVTPS2PD (R11)(AX*4), Y4
	VCVTPS2PD 16(R11)(AX*4), Y5
	VFMADD231PD Y0, Y4, Y14
	VFMADD231PD Y1, Y5, Y15
	ADDQ $8, AX
	CMPQ AX, CX
	JLT  loop4

done4:
	REDUCE(Y8, Y9, X8)
	REDUCE(Y10, Y11, X10)
	REDUCE(Y12, Y13, X12)
	REDUCE(Y14, Y15, X14)
	VMOVSD X8, d0+48(FP)
	VMOVSD X10, d1+56(FP)
	VMOVSD X12, d2+64(FP)
	VMOVSD X14, d3+72(FP)
	VZEROUPPER
	RET

// func ddot2AVX2(n int, x, c0, c1 *float32) (d0, d1 float64)
TEXT ·ddot2AVX2(SB), NOSPLIT, $0-48
	MOVQ n+0(FP), CX
	MOVQ x+8(FP), SI
	MOVQ c0+16(FP), R8
	MOVQ c1+24(FP), R9
	VXORPD Y8, Y8, Y8
	VXORPD Y9, Y9, Y9
	VXORPD Y10, Y10, Y10
	VXORPD Y11, Y11, Y11
	XORQ AX, AX
	CMPQ CX, $0
	JLE  done2

loop2:
	VCVTPS2PD (SI)(AX*4), Y0
	VCVTPS2PD 16(SI)(AX*4), Y1
	VCVTPS2PD (R8)(AX*4), Y2
	VCVTPS2PD 16(R8)(AX*4), Y3
	VFMADD231PD Y0, Y2, Y8
	VFMADD231PD Y1, Y3, Y9
	VCVTPS2PD (R9)(AX*4), Y4
	VCVTPS2PD 16(R9)(AX*4), Y5
	VFMADD231PD Y0, Y4, Y10
	VFMADD231PD Y1, Y5, Y11
	ADDQ $8, AX
	CMPQ AX, CX
	JLT  loop2

done2:
	REDUCE(Y8, Y9, X8)
	REDUCE(Y10, Y11, X10)
	VMOVSD X8, d0+32(FP)
	VMOVSD X10, d1+40(FP)
	VZEROUPPER
	RET

// func ddot1AVX2(n int, x, c *float32) float64
TEXT ·ddot1AVX2(SB), NOSPLIT, $0-32
	MOVQ n+0(FP), CX
	MOVQ x+8(FP), SI
	MOVQ c+16(FP), R8
	VXORPD Y8, Y8, Y8
	VXORPD Y9, Y9, Y9
	XORQ AX, AX
	CMPQ CX, $0
	JLE  done1

loop1:
	VCVTPS2PD (SI)(AX*4), Y0
	VCVTPS2PD 16(SI)(AX*4), Y1
	VCVTPS2PD (R8)(AX*4), Y2
	VCVTPS2PD 16(R8)(AX*4), Y3
	VFMADD231PD Y0, Y2, Y8
	VFMADD231PD Y1, Y3, Y9
	ADDQ $8, AX
	CMPQ AX, CX
	JLT  loop1

done1:
	REDUCE(Y8, Y9, X8)
	VMOVSD X8, ret+24(FP)
	VZEROUPPER
	RET

// func addWidenAVX2(n int, acc *float64, x *float32)
// acc[j] += float64(x[j]) for j < n; n must be a multiple of 8.
TEXT ·addWidenAVX2(SB), NOSPLIT, $0-24
	MOVQ n+0(FP), CX
	MOVQ acc+8(FP), DI
	MOVQ x+16(FP), SI
	XORQ AX, AX
	CMPQ CX, $0
	JLE  doneadd

loopadd:
	VCVTPS2PD (SI)(AX*4), Y0
	VCVTPS2PD 16(SI)(AX*4), Y1
	VADDPD (DI)(AX*8), Y0, Y0
	VADDPD 32(DI)(AX*8), Y1, Y1
	VMOVUPD Y0, (DI)(AX*8)
	VMOVUPD Y1, 32(DI)(AX*8)
	ADDQ $8, AX
	CMPQ AX, CX
	JLT  loopadd

doneadd:
	VZEROUPPER
	RET

// func moveWidenAVX2(n int, from, into *float64, x *float32)
// from[j] -= float64(x[j]) and into[j] += float64(x[j]) for j < n; n must
// be a multiple of 8.
TEXT ·moveWidenAVX2(SB), NOSPLIT, $0-32
	MOVQ n+0(FP), CX
	MOVQ from+8(FP), DI
	MOVQ into+16(FP), DX
	MOVQ x+24(FP), SI
	XORQ AX, AX
	CMPQ CX, $0
	JLE  donemove

loopmove:
	VCVTPS2PD (SI)(AX*4), Y0
	VCVTPS2PD 16(SI)(AX*4), Y1
	VMOVUPD (DI)(AX*8), Y2
	VMOVUPD 32(DI)(AX*8), Y3
	VSUBPD Y0, Y2, Y2
	VSUBPD Y1, Y3, Y3
	VMOVUPD Y2, (DI)(AX*8)
	VMOVUPD Y3, 32(DI)(AX*8)
	VADDPD (DX)(AX*8), Y0, Y0
	VADDPD 32(DX)(AX*8), Y1, Y1
	VMOVUPD Y0, (DX)(AX*8)
	VMOVUPD Y1, 32(DX)(AX*8)
	ADDQ $8, AX
	CMPQ AX, CX
	JLT  loopmove

donemove:
	VZEROUPPER
	RET

// The same three products with the centres already widened to float64
// (x.c with x float32, c float64 holding float32 values): the products and
// the order of the additions are those of ddot1/2/4AVX2, so the results are
// bit-identical, with half the conversions.

// func ddot4mAVX2(n int, x *float32, c0, c1, c2, c3 *float64) (d0, d1, d2, d3 float64)
TEXT ·ddot4mAVX2(SB), NOSPLIT, $0-80
	MOVQ n+0(FP), CX
	MOVQ x+8(FP), SI
	MOVQ c0+16(FP), R8
	MOVQ c1+24(FP), R9
	MOVQ c2+32(FP), R10
	MOVQ c3+40(FP), R11
	VXORPD Y8, Y8, Y8
	VXORPD Y9, Y9, Y9
	VXORPD Y10, Y10, Y10
	VXORPD Y11, Y11, Y11
	VXORPD Y12, Y12, Y12
	VXORPD Y13, Y13, Y13
	VXORPD Y14, Y14, Y14
	VXORPD Y15, Y15, Y15
	XORQ AX, AX
	CMPQ CX, $0
	JLE  done4m

loop4m:
	VCVTPS2PD (SI)(AX*4), Y0
	VCVTPS2PD 16(SI)(AX*4), Y1
	VFMADD231PD (R8)(AX*8), Y0, Y8
	VFMADD231PD 32(R8)(AX*8), Y1, Y9
	VFMADD231PD (R9)(AX*8), Y0, Y10
	VFMADD231PD 32(R9)(AX*8), Y1, Y11
	VFMADD231PD (R10)(AX*8), Y0, Y12
	VFMADD231PD 32(R10)(AX*8), Y1, Y13
	VFMADD231PD (R11)(AX*8), Y0, Y14
	VFMADD231PD 32(R11)(AX*8), Y1, Y15
	ADDQ $8, AX
	CMPQ AX, CX
	JLT  loop4m

done4m:
	REDUCE(Y8, Y9, X8)
	REDUCE(Y10, Y11, X10)
	REDUCE(Y12, Y13, X12)
	REDUCE(Y14, Y15, X14)
	VMOVSD X8, d0+48(FP)
	VMOVSD X10, d1+56(FP)
	VMOVSD X12, d2+64(FP)
	VMOVSD X14, d3+72(FP)
	VZEROUPPER
	RET

// func ddot2mAVX2(n int, x *float32, c0, c1 *float64) (d0, d1 float64)
TEXT ·ddot2mAVX2(SB), NOSPLIT, $0-48
	MOVQ n+0(FP), CX
	MOVQ x+8(FP), SI
	MOVQ c0+16(FP), R8
	MOVQ c1+24(FP), R9
	VXORPD Y8, Y8, Y8
	VXORPD Y9, Y9, Y9
	VXORPD Y10, Y10, Y10
	VXORPD Y11, Y11, Y11
	XORQ AX, AX
	CMPQ CX, $0
	JLE  done2m

loop2m:
	VCVTPS2PD (SI)(AX*4), Y0
	VCVTPS2PD 16(SI)(AX*4), Y1
	VFMADD231PD (R8)(AX*8), Y0, Y8
	VFMADD231PD 32(R8)(AX*8), Y1, Y9
	VFMADD231PD (R9)(AX*8), Y0, Y10
	VFMADD231PD 32(R9)(AX*8), Y1, Y11
	ADDQ $8, AX
	CMPQ AX, CX
	JLT  loop2m

done2m:
	REDUCE(Y8, Y9, X8)
	REDUCE(Y10, Y11, X10)
	VMOVSD X8, d0+32(FP)
	VMOVSD X10, d1+40(FP)
	VZEROUPPER
	RET

// func ddot1mAVX2(n int, x *float32, c *float64) float64
TEXT ·ddot1mAVX2(SB), NOSPLIT, $0-32
	MOVQ n+0(FP), CX
	MOVQ x+8(FP), SI
	MOVQ c+16(FP), R8
	VXORPD Y8, Y8, Y8
	VXORPD Y9, Y9, Y9
	XORQ AX, AX
	CMPQ CX, $0
	JLE  done1m

loop1m:
	VCVTPS2PD (SI)(AX*4), Y0
	VCVTPS2PD 16(SI)(AX*4), Y1
	VFMADD231PD (R8)(AX*8), Y0, Y8
	VFMADD231PD 32(R8)(AX*8), Y1, Y9
	ADDQ $8, AX
	CMPQ AX, CX
	JLT  loop1m

done1m:
	REDUCE(Y8, Y9, X8)
	VMOVSD X8, ret+24(FP)
	VZEROUPPER
	RET
