#include "textflag.h"

// Kernels of the running-sum sliding-window correlation (window.go). Each
// performs, four elements at a time, exactly the IEEE operations of the Go
// loop it replaces, in the same order and without fused multiply-adds, so
// the results are bit-identical to the portable code.

DATA ·one64<>+0(SB)/8, $1.0
GLOBL ·one64<>(SB), RODATA, $8
DATA ·minusone64<>+0(SB)/8, $-1.0
GLOBL ·minusone64<>(SB), RODATA, $8

// func corrRowAVX2(n int, out *float32, cr, ss, qs *float64, a, b float64)
// out[m] = float32(min(max((a*cr[m] - b*ss[m]) * qs[m], -1), 1)) for m < n;
// n must be a multiple of 4.
TEXT ·corrRowAVX2(SB), NOSPLIT, $0-56
	MOVQ n+0(FP), CX
	MOVQ out+8(FP), DI
	MOVQ cr+16(FP), SI
	MOVQ ss+24(FP), R8
	MOVQ qs+32(FP), R9
	VBROADCASTSD a+40(FP), Y14
	VBROADCASTSD b+48(FP), Y15
	VBROADCASTSD ·one64<>(SB), Y12
	VBROADCASTSD ·minusone64<>(SB), Y13
	XORQ AX, AX
	CMPQ CX, $0
	JLE  donecorr

loopcorr:
	VMULPD (SI)(AX*8), Y14, Y0
	VMULPD (R8)(AX*8), Y15, Y1
	VSUBPD Y1, Y0, Y0
	VMULPD (R9)(AX*8), Y0, Y0
	VMAXPD Y13, Y0, Y0
	VMINPD Y12, Y0, Y0
	VCVTPD2PSY Y0, X0
	VMOVUPS X0, (DI)(AX*4)
	ADDQ $4, AX
	CMPQ AX, CX
	JLT  loopcorr

donecorr:
	VZEROUPPER
	RET

// func rank1DiffAVX2(n int, c, as, bs *float64, aj, bj float64)
// c[m] += aj*as[m] - bj*bs[m] for m < n; n must be a multiple of 4.
TEXT ·rank1DiffAVX2(SB), NOSPLIT, $0-48
	MOVQ n+0(FP), CX
	MOVQ c+8(FP), DI
	MOVQ as+16(FP), SI
	MOVQ bs+24(FP), R8
	VBROADCASTSD aj+32(FP), Y14
	VBROADCASTSD bj+40(FP), Y15
	XORQ AX, AX
	CMPQ CX, $0
	JLE  donerank

looprank:
	VMULPD (SI)(AX*8), Y14, Y0
	VMULPD (R8)(AX*8), Y15, Y1
	VSUBPD Y1, Y0, Y0
	VADDPD (DI)(AX*8), Y0, Y0
	VMOVUPD Y0, (DI)(AX*8)
	ADDQ $4, AX
	CMPQ AX, CX
	JLT  looprank

donerank:
	VZEROUPPER
	RET

// func varSumsAVX2(n int, r *float32, k float64, out *[8]float64)
// For m < n (a multiple of 4), lane l = m mod 4: d = float64(r[m]) - k,
// s_l += d, q_l += d*d, in order of m; out = s_0..s_3, q_0..q_3 (both
// from 0). The same operations as RowVariance's four-lane loop.
TEXT ·varSumsAVX2(SB), NOSPLIT, $0-32
	MOVQ n+0(FP), CX
	MOVQ r+8(FP), SI
	VBROADCASTSD k+16(FP), Y15
	MOVQ out+24(FP), DI
	VXORPD Y0, Y0, Y0
	VXORPD Y1, Y1, Y1
	XORQ AX, AX
	CMPQ CX, $0
	JLE  donevar

loopvar:
	VCVTPS2PD (SI)(AX*4), Y2
	VSUBPD Y15, Y2, Y2
	VADDPD Y2, Y0, Y0
	VMULPD Y2, Y2, Y3
	VADDPD Y3, Y1, Y1
	ADDQ $4, AX
	CMPQ AX, CX
	JLT  loopvar

donevar:
	VMOVUPD Y0, (DI)
	VMOVUPD Y1, 32(DI)
	VZEROUPPER
	RET
