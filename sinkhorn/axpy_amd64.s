#include "textflag.h"

// BAND4 is the body of band4AVX and band4Z: ZERO clears a register, S0-S7
// are the eight sums (two vectors per output row), L0 L1 the input row's
// two vectors, B0-B3 the four taps broadcast, V the bytes of one vector
// and C the columns of two. (Defined before the first TEXT, so that vet
// does not take its argument names for another function's.)
#define BAND4(ZERO, S0, S1, S2, S3, S4, S5, S6, S7, L0, L1, B0, B1, B2, B3, V, C) \
	MOVQ out+0(FP), DI \
	MOVQ src+8(FP), SI \
	MOVQ stride+16(FP), R8 \
	SHLQ $3, R8 \
	MOVQ cols+24(FP), CX \
	MOVQ w+32(FP), R9 \
	MOVQ nj+40(FP), R10 \
colloop: \
	ZERO S0, S0, S0 \
	ZERO S1, S1, S1 \
	ZERO S2, S2, S2 \
	ZERO S3, S3, S3 \
	ZERO S4, S4, S4 \
	ZERO S5, S5, S5 \
	ZERO S6, S6, S6 \
	ZERO S7, S7, S7 \
	MOVQ SI, R11 \
	MOVQ R9, R12 \
	MOVQ R10, BX \
rowloop: \
	VMOVUPD (R11), L0 \
	VMOVUPD V(R11), L1 \
	VBROADCASTSD (R12), B0 \
	VFMADD231PD L0, B0, S0 \
	VFMADD231PD L1, B0, S1 \
	VBROADCASTSD -8(R12), B1 \
	VFMADD231PD L0, B1, S2 \
	VFMADD231PD L1, B1, S3 \
	VBROADCASTSD -16(R12), B2 \
	VFMADD231PD L0, B2, S4 \
	VFMADD231PD L1, B2, S5 \
	VBROADCASTSD -24(R12), B3 \
	VFMADD231PD L0, B3, S6 \
	VFMADD231PD L1, B3, S7 \
	ADDQ R8, R11 \
	ADDQ $8, R12 \
	DECQ BX \
	JNZ rowloop \
	VMOVUPD S0, (DI) \
	VMOVUPD S1, V(DI) \
	LEAQ (DI)(R8*1), R13 \
	VMOVUPD S2, (R13) \
	VMOVUPD S3, V(R13) \
	ADDQ R8, R13 \
	VMOVUPD S4, (R13) \
	VMOVUPD S5, V(R13) \
	ADDQ R8, R13 \
	VMOVUPD S6, (R13) \
	VMOVUPD S7, V(R13) \
	ADDQ $(2*V), DI \
	ADDQ $(2*V), SI \
	SUBQ $C, CX \
	JG colloop \
	VZEROUPPER \
	RET

// func pair2AVX(out, a0, b0, a1, b1 *float64, n int, w0, w1 float64)
// out[c] += w0*(a0[c]+b0[c]) + w1*(a1[c]+b1[c]) for c in [0, n), n % 4 == 0.
TEXT ·pair2AVX(SB), NOSPLIT, $0-64
	MOVQ out+0(FP), DI
	MOVQ a0+8(FP), R8
	MOVQ b0+16(FP), R9
	MOVQ a1+24(FP), R10
	MOVQ b1+32(FP), R11
	MOVQ n+40(FP), CX
	VBROADCASTSD w0+48(FP), Y0
	VBROADCASTSD w1+56(FP), Y1
	XORQ AX, AX
loop2:
	CMPQ AX, CX
	JGE done2
	VMOVUPD (R8)(AX*8), Y2
	VADDPD (R9)(AX*8), Y2, Y2
	VMOVUPD (R10)(AX*8), Y3
	VADDPD (R11)(AX*8), Y3, Y3
	VMOVUPD (DI)(AX*8), Y4
	VFMADD231PD Y2, Y0, Y4
	VFMADD231PD Y3, Y1, Y4
	VMOVUPD Y4, (DI)(AX*8)
	ADDQ $4, AX
	JMP loop2
done2:
	VZEROUPPER
	RET

// func quad4AVX(out, s0, s1, s2, s3 *float64, n int, w0, w1, w2, w3 float64)
// out[c] += w0*s0[c] + w1*s1[c] + w2*s2[c] + w3*s3[c], n % 4 == 0.
TEXT ·quad4AVX(SB), NOSPLIT, $0-80
	MOVQ out+0(FP), DI
	MOVQ s0+8(FP), R8
	MOVQ s1+16(FP), R9
	MOVQ s2+24(FP), R10
	MOVQ s3+32(FP), R11
	MOVQ n+40(FP), CX
	VBROADCASTSD w0+48(FP), Y0
	VBROADCASTSD w1+56(FP), Y1
	VBROADCASTSD w2+64(FP), Y5
	VBROADCASTSD w3+72(FP), Y6
	XORQ AX, AX
loop4:
	CMPQ AX, CX
	JGE done4
	VMOVUPD (DI)(AX*8), Y4
	VMOVUPD (R8)(AX*8), Y2
	VFMADD231PD Y2, Y0, Y4
	VMOVUPD (R9)(AX*8), Y3
	VFMADD231PD Y3, Y1, Y4
	VMOVUPD (R10)(AX*8), Y2
	VFMADD231PD Y2, Y5, Y4
	VMOVUPD (R11)(AX*8), Y3
	VFMADD231PD Y3, Y6, Y4
	VMOVUPD Y4, (DI)(AX*8)
	ADDQ $4, AX
	JMP loop4
done4:
	VZEROUPPER
	RET

// func pair1AVX(out, a, b *float64, n int, w float64)
// out[c] += w*(a[c]+b[c]) for c in [0, n), n % 4 == 0.
TEXT ·pair1AVX(SB), NOSPLIT, $0-40
	MOVQ out+0(FP), DI
	MOVQ a+8(FP), R8
	MOVQ b+16(FP), R9
	MOVQ n+24(FP), CX
	VBROADCASTSD w+32(FP), Y0
	XORQ AX, AX
loop1:
	CMPQ AX, CX
	JGE done1
	VMOVUPD (R8)(AX*8), Y2
	VADDPD (R9)(AX*8), Y2, Y2
	VMOVUPD (DI)(AX*8), Y4
	VFMADD231PD Y2, Y0, Y4
	VMOVUPD Y4, (DI)(AX*8)
	ADDQ $4, AX
	JMP loop1
done1:
	VZEROUPPER
	RET

// func band4AVX(out, src *float64, stride, cols int, w *float64, nj int)
// Four output rows of a banded pass at once, eight columns at a time:
// out[q*stride + c] = sum_{i < nj} w[i-q] * src[i*stride + c] for q < 4 and
// c < cols (a positive multiple of 8). The eight sums stay in registers
// while the input rows stream past, so each input row is loaded once for
// four outputs and no output is loaded or stored in the loop.
TEXT ·band4AVX(SB), NOSPLIT, $0-48
	BAND4(VXORPD, Y0, Y1, Y2, Y3, Y4, Y5, Y6, Y7, Y8, Y9, Y10, Y11, Y12, Y13, 32, 8)

// func band4Z(out, src *float64, stride, cols int, w *float64, nj int)
// band4AVX with 512-bit registers: sixteen columns at a time (cols a
// positive multiple of 16), the same fused multiply-adds in the same order
// per output (so the same bits).
TEXT ·band4Z(SB), NOSPLIT, $0-48
	BAND4(VPXORQ, Z0, Z1, Z2, Z3, Z4, Z5, Z6, Z7, Z8, Z9, Z10, Z11, Z12, Z13, 64, 16)

// func conv1dAVX(out, in *float64, n int, w *float64, nt int)
// A correlation along a line: out[c] = sum_{t < nt} w[t] * in[c+t] for
// c < n, a positive multiple of 32. Thirty-two sums stay in registers while
// the taps stream past (unaligned loads of in are cheap L1 hits).
TEXT ·conv1dAVX(SB), NOSPLIT, $0-40
	MOVQ out+0(FP), DI
	MOVQ in+8(FP), SI
	MOVQ n+16(FP), CX
	MOVQ w+24(FP), R9
	MOVQ nt+32(FP), R10
cblk:
	VXORPD Y0, Y0, Y0
	VXORPD Y1, Y1, Y1
	VXORPD Y2, Y2, Y2
	VXORPD Y3, Y3, Y3
	VXORPD Y4, Y4, Y4
	VXORPD Y5, Y5, Y5
	VXORPD Y6, Y6, Y6
	VXORPD Y7, Y7, Y7
	MOVQ SI, R11
	MOVQ R9, R12
	MOVQ R10, BX
ctap:
	VBROADCASTSD (R12), Y8
	VFMADD231PD (R11), Y8, Y0
	VFMADD231PD 32(R11), Y8, Y1
	VFMADD231PD 64(R11), Y8, Y2
	VFMADD231PD 96(R11), Y8, Y3
	VFMADD231PD 128(R11), Y8, Y4
	VFMADD231PD 160(R11), Y8, Y5
	VFMADD231PD 192(R11), Y8, Y6
	VFMADD231PD 224(R11), Y8, Y7
	ADDQ $8, R11
	ADDQ $8, R12
	DECQ BX
	JNZ ctap
	VMOVUPD Y0, (DI)
	VMOVUPD Y1, 32(DI)
	VMOVUPD Y2, 64(DI)
	VMOVUPD Y3, 96(DI)
	VMOVUPD Y4, 128(DI)
	VMOVUPD Y5, 160(DI)
	VMOVUPD Y6, 192(DI)
	VMOVUPD Y7, 224(DI)
	ADDQ $256, DI
	ADDQ $256, SI
	SUBQ $32, CX
	JG cblk
	VZEROUPPER
	RET

// TILE4 transposes the 4 x 4 tile in rows r0..r3 (a, b, c, d) in place by
// two unpacks and a lane permute per pair, with t0..t3 as scratch.
#define TILE4(r0, r1, r2, r3, t0, t1, t2, t3) \
	VUNPCKLPD r1, r0, t0; \
	VUNPCKHPD r1, r0, t1; \
	VUNPCKLPD r3, r2, t2; \
	VUNPCKHPD r3, r2, t3; \
	VPERM2F128 $0x20, t2, t0, r0; \
	VPERM2F128 $0x20, t3, t1, r1; \
	VPERM2F128 $0x31, t2, t0, r2; \
	VPERM2F128 $0x31, t3, t1, r3

// func transpose8AVX(dst, src *float64, rows, cols, r4 int)
// Transposes a strip of eight columns of src (rows x cols, row-major) into
// eight rows of dst (cols x rows): dst[c*rows + i] = src[i*cols + c] for
// c < 8 and i < r4, a positive multiple of 4; two 4 x 4 tiles at a time by
// unpacks and lane permutes. Walking down the strip writes each of the
// eight destination rows in order.
TEXT ·transpose8AVX(SB), NOSPLIT, $0-40
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ rows+16(FP), R8
	SHLQ $3, R8
	MOVQ cols+24(FP), R9
	SHLQ $3, R9
	MOVQ r4+32(FP), CX
	LEAQ (R9)(R9*2), R10 // 3 rows of src
	LEAQ (R8)(R8*2), R13 // 3 rows of dst
	LEAQ (DI)(R8*4), DX  // dst row 4
t8loop:
	VMOVUPD (SI), Y0
	VMOVUPD (SI)(R9*1), Y1
	VMOVUPD (SI)(R9*2), Y2
	VMOVUPD (SI)(R10*1), Y3
	VMOVUPD 32(SI), Y8
	VMOVUPD 32(SI)(R9*1), Y9
	VMOVUPD 32(SI)(R9*2), Y10
	VMOVUPD 32(SI)(R10*1), Y11
	TILE4(Y0, Y1, Y2, Y3, Y4, Y5, Y6, Y7)
	TILE4(Y8, Y9, Y10, Y11, Y12, Y13, Y14, Y15)
	VMOVUPD Y0, (DI)
	VMOVUPD Y1, (DI)(R8*1)
	VMOVUPD Y2, (DI)(R8*2)
	VMOVUPD Y3, (DI)(R13*1)
	VMOVUPD Y8, (DX)
	VMOVUPD Y9, (DX)(R8*1)
	VMOVUPD Y10, (DX)(R8*2)
	VMOVUPD Y11, (DX)(R13*1)
	LEAQ (SI)(R9*4), SI
	ADDQ $32, DI
	ADDQ $32, DX
	SUBQ $4, CX
	JG t8loop
	VZEROUPPER
	RET
