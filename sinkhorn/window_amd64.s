#include "textflag.h"

// func dotPassAVX(out *float64, stride int, w *float64, off, lo *int32, x *float64, n int, m64 *int64)
// For o in [0, n): out[o*stride] = sum_j w[off[o]+j] * x[lo[o]+j], j < off[o+1]-off[o];
// m64 points to tailMask64.
//
// Each output prefetches the weights 4 KiB ahead: the windows of a
// solve's 16 streams do not fit the caches, and the hardware's own
// prefetch left the sums waiting on memory (measured, 8 x 256^2 at epsilon
// 1, single-precision windows, alternating processes: 6.6-7.8 -> 6.3-6.5 s,
// CPU -7%; 16 sets of 256^2 windows: 5.7-6.2 -> 3.5-4.6 ns per output, with
// 1, 2, 8 and 16 KiB ahead in between).
TEXT ·dotPassAVX(SB), NOSPLIT, $0-64
	MOVQ m64+56(FP), R15
	MOVQ out+0(FP), DI
	MOVQ stride+8(FP), R8
	SHLQ $3, R8
	MOVQ w+16(FP), SI
	MOVQ off+24(FP), R9
	MOVQ lo+32(FP), R10
	MOVQ x+40(FP), R11
	MOVQ n+48(FP), CX
	TESTQ CX, CX
	JLE donep
loopo:
	MOVLQSX (R9), AX
	MOVLQSX 4(R9), BX
	SUBQ AX, BX
	LEAQ (SI)(AX*8), R12
	PREFETCHT0 4096(R12)
	MOVLQSX (R10), DX
	LEAQ (R11)(DX*8), R13
	VXORPD Y0, Y0, Y0
	VXORPD Y1, Y1, Y1
loop8:
	CMPQ BX, $8
	JL tail4
	VMOVUPD (R12), Y2
	VMOVUPD 32(R12), Y3
	VFMADD231PD (R13), Y2, Y0
	VFMADD231PD 32(R13), Y3, Y1
	ADDQ $64, R12
	ADDQ $64, R13
	SUBQ $8, BX
	JMP loop8
tail4:
	VADDPD Y1, Y0, Y0
	CMPQ BX, $4
	JL hsum
	VMOVUPD (R12), Y2
	VFMADD231PD (R13), Y2, Y0
	ADDQ $32, R12
	ADDQ $32, R13
	SUBQ $4, BX
hsum:
	// The last one to three terms by masked loads (see dotPass32AVX).
	TESTQ BX, BX
	JE hsum2
	MOVQ BX, DX
	SHLQ $5, DX
	VMOVDQU (R15)(DX*1), Y6
	VMASKMOVPD (R12), Y6, Y2
	VMASKMOVPD (R13), Y6, Y3
	VFMADD231PD Y3, Y2, Y0
hsum2:
	VEXTRACTF128 $1, Y0, X1
	VADDPD X1, X0, X0
	VHADDPD X0, X0, X0
	VMOVSD X0, (DI)
	ADDQ R8, DI
	ADDQ $4, R9
	ADDQ $4, R10
	DECQ CX
	JNZ loopo
donep:
	VZEROUPPER
	RET

// func dotPass32AVX(out *float64, stride int, w *float32, off, lo *int32, x *float64, n int, m32 *int32, m64 *int64)
// As dotPassAVX with single-precision weights, widened to double as they
// load; the sums stay in double.
TEXT ·dotPass32AVX(SB), NOSPLIT, $0-72
	MOVQ out+0(FP), DI
	MOVQ stride+8(FP), R8
	SHLQ $3, R8
	MOVQ w+16(FP), SI
	MOVQ off+24(FP), R9
	MOVQ lo+32(FP), R10
	MOVQ x+40(FP), R11
	MOVQ n+48(FP), CX
	MOVQ m32+56(FP), R14
	MOVQ m64+64(FP), R15
	TESTQ CX, CX
	JLE done32
loop32o:
	MOVLQSX (R9), AX
	MOVLQSX 4(R9), BX
	SUBQ AX, BX
	LEAQ (SI)(AX*4), R12
	PREFETCHT0 4096(R12)
	MOVLQSX (R10), DX
	LEAQ (R11)(DX*8), R13
	VXORPD Y0, Y0, Y0
	VXORPD Y1, Y1, Y1
loop32_8:
	CMPQ BX, $8
	JL tail32_4
	VCVTPS2PD (R12), Y2
	VCVTPS2PD 16(R12), Y3
	VFMADD231PD (R13), Y2, Y0
	VFMADD231PD 32(R13), Y3, Y1
	ADDQ $32, R12
	ADDQ $64, R13
	SUBQ $8, BX
	JMP loop32_8
tail32_4:
	VADDPD Y1, Y0, Y0
	CMPQ BX, $4
	JL tail32_m
	VCVTPS2PD (R12), Y2
	VFMADD231PD (R13), Y2, Y0
	ADDQ $16, R12
	ADDQ $32, R13
	SUBQ $4, BX
tail32_m:
	// The last one to three terms by masked loads, which neither read
	// nor fault past the window: no serial scalar tail.
	TESTQ BX, BX
	JE hsum32
	MOVQ BX, DX
	SHLQ $4, DX
	VMOVDQU (R14)(DX*1), X5
	VMASKMOVPS (R12), X5, X2
	VCVTPS2PD X2, Y2
	SHLQ $1, DX
	VMOVDQU (R15)(DX*1), Y6
	VMASKMOVPD (R13), Y6, Y3
	VFMADD231PD Y3, Y2, Y0
hsum32:
	VEXTRACTF128 $1, Y0, X1
	VADDPD X1, X0, X0
	VHADDPD X0, X0, X0
	VMOVSD X0, (DI)
	ADDQ R8, DI
	ADDQ $4, R9
	ADDQ $4, R10
	DECQ CX
	JNZ loop32o
done32:
	VZEROUPPER
	RET

// func hornerAVX(out, x *float64, j0, aoff *int32, a *float32, nrm *float64, nb int, hp *float64) int
// For nb blocks of four outputs (horner.go): out[4b + d] = nrm[4b + d] *
// sum_e a[aoff[b] + e] x[j0[b] + e] rho_d^e, four terms at a time against
// the table of powers hp (16 per four terms: rho_d^e for each d), two
// groups of four per step into two sets of sums (the sums' chains of
// multiply-adds would otherwise set the pace), the four outputs' sums
// folded into one vector at the end. aoff[b+1] - aoff[b] is a multiple of
// 4. It stops before the first block with j0 < 0 (per-output windows) and
// returns the number of blocks it wrote.
TEXT ·hornerAVX(SB), NOSPLIT, $0-72
	MOVQ out+0(FP), DI
	MOVQ x+8(FP), SI
	MOVQ j0+16(FP), R8
	MOVQ aoff+24(FP), R9
	MOVQ a+32(FP), R10
	MOVQ nrm+40(FP), R11
	MOVQ nb+48(FP), CX
	MOVQ hp+56(FP), DX
hblock:
	MOVLQSX (R8), AX
	TESTQ AX, AX
	JS hstop
	LEAQ (SI)(AX*8), BX   // x + j0
	MOVLQSX (R9), AX
	MOVLQSX 4(R9), R12
	SUBQ AX, R12          // terms
	LEAQ (R10)(AX*4), R13 // a + aoff
	MOVQ DX, AX           // powers
	VXORPD Y0, Y0, Y0
	VXORPD Y1, Y1, Y1
	VXORPD Y2, Y2, Y2
	VXORPD Y3, Y3, Y3
	VXORPD Y4, Y4, Y4
	VXORPD Y5, Y5, Y5
	VXORPD Y6, Y6, Y6
	VXORPD Y7, Y7, Y7
	CMPQ R12, $8
	JL htail
hloop:
	VCVTPS2PD (R13), Y12
	VMULPD (BX), Y12, Y12
	VCVTPS2PD 16(R13), Y13
	VMULPD 32(BX), Y13, Y13
	VFMADD231PD 0(AX), Y12, Y0
	VFMADD231PD 32(AX), Y12, Y1
	VFMADD231PD 64(AX), Y12, Y2
	VFMADD231PD 96(AX), Y12, Y3
	VFMADD231PD 128(AX), Y13, Y4
	VFMADD231PD 160(AX), Y13, Y5
	VFMADD231PD 192(AX), Y13, Y6
	VFMADD231PD 224(AX), Y13, Y7
	ADDQ $32, R13
	ADDQ $64, BX
	ADDQ $256, AX
	SUBQ $8, R12
	CMPQ R12, $8
	JGE hloop
htail:
	TESTQ R12, R12
	JLE hfold
	VCVTPS2PD (R13), Y12
	VMULPD (BX), Y12, Y12
	VFMADD231PD 0(AX), Y12, Y0
	VFMADD231PD 32(AX), Y12, Y1
	VFMADD231PD 64(AX), Y12, Y2
	VFMADD231PD 96(AX), Y12, Y3
hfold:
	VADDPD Y4, Y0, Y0
	VADDPD Y5, Y1, Y1
	VADDPD Y6, Y2, Y2
	VADDPD Y7, Y3, Y3
	VHADDPD Y1, Y0, Y0 // s0 s1 (lanes 0+1), s0 s1 (lanes 2+3)
	VHADDPD Y3, Y2, Y2 // the same for s2 s3
	VPERM2F128 $0x20, Y2, Y0, Y13
	VPERM2F128 $0x31, Y2, Y0, Y14
	VADDPD Y14, Y13, Y13
	VMULPD (R11), Y13, Y13
	VMOVUPD Y13, (DI)
	ADDQ $32, DI
	ADDQ $32, R11
	ADDQ $4, R8
	ADDQ $4, R9
	DECQ CX
	JG hblock
hstop:
	MOVQ nb+48(FP), AX
	SUBQ CX, AX
	MOVQ AX, ret+64(FP)
	VZEROUPPER
	RET
