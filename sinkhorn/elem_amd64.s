#include "textflag.h"

// Element-wise parts of the absorbed kernel (absorbed.go), four lanes at a
// time; the scalar forms are nearScan, expShiftGo and logAddGo. c points to
// the constants of elemConsts, each stored four times (32 bytes apart).

// func nearAVX(src, ref *float64, n int, c *float64) (lo, hi float64, bad int)
// Over n (a multiple of 4) entries: the least and largest src - ref where
// src is finite, and nonzero bad where exactly one of src, ref is -Inf. A
// NaN difference is passed over, as in the scalar loop.
TEXT ·nearAVX(SB), NOSPLIT, $0-56
	MOVQ src+0(FP), SI
	MOVQ ref+8(FP), DX
	MOVQ n+16(FP), CX
	MOVQ c+24(FP), R9
	VMOVUPD 0(R9), Y15  // -Inf
	VMOVUPD 32(R9), Y13 // lo = +Inf
	VMOVUPD Y15, Y12    // hi = -Inf
	VXORPD Y11, Y11, Y11
	TESTQ CX, CX
	JLE nearend
nearloop:
	VMOVUPD (SI), Y0
	VMOVUPD (DX), Y1
	VCMPPD $0, Y15, Y0, Y2
	VCMPPD $0, Y15, Y1, Y3
	VXORPD Y2, Y3, Y3
	VORPD Y3, Y11, Y11
	// Where both are -Inf the difference is NaN, and VMINPD, VMAXPD
	// return their second source (the bound) for a NaN.
	VSUBPD Y1, Y0, Y4
	VMINPD Y13, Y4, Y13
	VMAXPD Y12, Y4, Y12
	ADDQ $32, SI
	ADDQ $32, DX
	SUBQ $4, CX
	JG nearloop
nearend:
	VEXTRACTF128 $1, Y13, X0
	VMINPD X13, X0, X0
	VPERMILPD $1, X0, X1
	VMINPD X0, X1, X0
	VMOVSD X0, lo+32(FP)
	VEXTRACTF128 $1, Y12, X0
	VMAXPD X12, X0, X0
	VPERMILPD $1, X0, X1
	VMAXPD X0, X1, X0
	VMOVSD X0, hi+40(FP)
	VMOVMSKPD Y11, AX
	MOVQ AX, bad+48(FP)
	VZEROUPPER
	RET

// func expShiftAVX(ee, src, ref *float64, n int, sgn, shift float64, c, tab *float64) (bad int)
// ee[i] = exp(src[i] - sgn ref[i] - shift), 0 where src[i] is -Inf, for n a
// multiple of 4, by expNeg's reduction (n/64 ln 2 + r, a table of 2^(j/64)
// and a degree-6 polynomial). bad is nonzero when an argument with finite
// src lies outside [-700, 700] (or is NaN), where the reduction does not
// hold; the caller then takes math.Exp.
TEXT ·expShiftAVX(SB), NOSPLIT, $0-72
	MOVQ ee+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ ref+16(FP), DX
	MOVQ n+24(FP), CX
	VBROADCASTSD sgn+32(FP), Y13
	VBROADCASTSD shift+40(FP), Y14
	MOVQ c+48(FP), R9
	MOVQ tab+56(FP), R10
	VMOVUPD 0(R9), Y15 // -Inf
	VXORPD Y12, Y12, Y12
	TESTQ CX, CX
	JLE expend
exploop:
	VMOVUPD (SI), Y0
	VCMPPD $0, Y15, Y0, Y1
	VFNMADD231PD (DX), Y13, Y0   // src - sgn ref
	VSUBPD Y14, Y0, Y2
	VCMPPD $0x1d, 800(R9), Y2, Y10 // x >= -700 (GE_OQ)
	VCMPPD $0x12, 832(R9), Y2, Y11 // x <= 700 (LE_OQ)
	VANDPD Y11, Y10, Y10
	VORPD Y1, Y10, Y10
	VPCMPEQD Y11, Y11, Y11
	VXORPD Y11, Y10, Y10
	VORPD Y10, Y12, Y12
	VMULPD 64(R9), Y2, Y3  // x * 64/ln2
	VROUNDPD $0, Y3, Y3
	VFNMADD231PD 96(R9), Y3, Y2  // x - n ln2hi/64
	VFNMADD231PD 128(R9), Y3, Y2 // - n ln2lo/64
	VMOVUPD 160(R9), Y4          // 1/720
	VFMADD213PD 192(R9), Y2, Y4  // 1/120
	VFMADD213PD 224(R9), Y2, Y4  // 1/24
	VFMADD213PD 256(R9), Y2, Y4  // 1/6
	VFMADD213PD 288(R9), Y2, Y4  // 1/2
	VFMADD213PD 320(R9), Y2, Y4  // 1
	VFMADD213PD 320(R9), Y2, Y4  // 1
	VCVTPD2DQY Y3, X5
	VPAND 352(R9), X5, X6        // n & 63
	VPSRAD $6, X5, X7
	VPMOVSXDQ X7, Y7
	VPSLLQ $52, Y7, Y7
	VPCMPEQD Y8, Y8, Y8
	VXORPD Y9, Y9, Y9
	VGATHERDPD Y8, (R10)(X6*8), Y9
	VPADDQ Y7, Y9, Y9
	VMULPD Y4, Y9, Y9
	VANDNPD Y9, Y1, Y9
	VMOVUPD Y9, (DI)
	ADDQ $32, SI
	ADDQ $32, DX
	ADDQ $32, DI
	SUBQ $4, CX
	JG exploop
expend:
	VMOVMSKPD Y12, AX
	MOVQ AX, bad+64(FP)
	VZEROUPPER
	RET

// func logAddAVX(dst, out0 *float64, n int, shift float64, c, ltab, itab *float64) int
// LOG4 sets Y6 to the log of the four positive normal numbers in Y0 by
// fastLog's reduction: x = 2^e (1 + j/256) (1 + r), the table entries for
// j read by gather (R10: logTab, R11: invTab, R9: elemConsts), log(1 + r)
// from six terms of its series. It clobbers Y3-Y10.
#define LOG4 \
	VPSRLQ $44, Y0, Y3; \
	VPAND 416(R9), Y3, Y3; \
	VPCMPEQD Y8, Y8, Y8; \
	VXORPD Y9, Y9, Y9; \
	VGATHERQPD Y8, (R11)(Y3*8), Y9; \
	VPCMPEQD Y8, Y8, Y8; \
	VXORPD Y10, Y10, Y10; \
	VGATHERQPD Y8, (R10)(Y3*8), Y10; \
	VANDPD 448(R9), Y0, Y4; \
	VORPD 480(R9), Y4, Y4; \
	VANDPD 512(R9), Y4, Y5; \
	VSUBPD Y5, Y4, Y4; \
	VMULPD Y9, Y4, Y4; \
	VMOVUPD 544(R9), Y6; \
	VFNMADD213PD 576(R9), Y4, Y6; \
	VFNMADD213PD 608(R9), Y4, Y6; \
	VFNMADD213PD 640(R9), Y4, Y6; \
	VFNMADD213PD 288(R9), Y4, Y6; \
	VFNMADD213PD 320(R9), Y4, Y6; \
	VMULPD Y4, Y6, Y6; \
	VPSRLQ $52, Y0, Y7; \
	VPOR 672(R9), Y7, Y7; \
	VSUBPD 704(R9), Y7, Y7; \
	VADDPD Y10, Y6, Y6; \
	VFMADD231PD 736(R9), Y7, Y6; \
	VFMADD231PD 768(R9), Y7, Y6

// POSNORMAL4 jumps to bad unless all four numbers in Y0 are positive
// normal numbers below +Inf (the inputs LOG4 takes); it clobbers Y1, Y2, BX.
#define POSNORMAL4(bad) \
	VCMPPD $0x1d, 384(R9), Y0, Y1; \
	VCMPPD $0x11, 32(R9), Y0, Y2; \
	VANDPD Y2, Y1, Y1; \
	VMOVMSKPD Y1, BX; \
	CMPQ BX, $15; \
	JNE bad

// dst[i] = out0[i] + shift + log(dst[i]) by fastLog's reduction, for n a
// multiple of 4. It stops before the first group of four with a sum that
// is not a positive normal number (zero where every input was -Inf) and
// returns how many entries it wrote; the caller takes that group.
TEXT ·logAddAVX(SB), NOSPLIT, $0-64
	MOVQ dst+0(FP), DI
	MOVQ out0+8(FP), SI
	MOVQ n+16(FP), CX
	VBROADCASTSD shift+24(FP), Y14
	MOVQ c+32(FP), R9
	MOVQ ltab+40(FP), R10
	MOVQ itab+48(FP), R11
	XORQ AX, AX
	TESTQ CX, CX
	JLE logend
logloop:
	VMOVUPD (DI), Y0
	POSNORMAL4(logend)
	LOG4
	VMOVUPD (SI), Y11
	VADDPD Y14, Y11, Y11
	VADDPD Y6, Y11, Y11
	VMOVUPD Y11, (DI)
	ADDQ $32, DI
	ADDQ $32, SI
	ADDQ $4, AX
	SUBQ $4, CX
	JG logloop
logend:
	MOVQ AX, ret+56(FP)
	VZEROUPPER
	RET

// dst[i] = relax(dst[i], t, omega) with t = num[i] / den[i] where test[i] >
// 0 and 0 elsewhere (the scaling updates u = a / K v, v = b / K u), for n a
// multiple of 4; c = 1 - omega, plain != 0 when omega is 1 (dst = t).
TEXT ·relaxDivAVX(SB), NOSPLIT, $0-64
	MOVQ dst+0(FP), DI
	MOVQ num+8(FP), SI
	MOVQ den+16(FP), DX
	MOVQ test+24(FP), R8
	MOVQ n+32(FP), CX
	VBROADCASTSD c+40(FP), Y15
	MOVQ plain+48(FP), BX
	MOVQ cst+56(FP), R9
	VMOVUPD 320(R9), Y14      // 1
	VADDPD Y15, Y14, Y13      // 1 + c
	VSUBPD Y15, Y14, Y12      // 1 - c
	VXORPD Y11, Y11, Y11      // 0
	TESTQ CX, CX
	JLE rdend
rdloop:
	VMOVUPD (SI), Y0
	VDIVPD (DX), Y0, Y4       // t = num / den
	VMOVUPD (R8), Y2
	VCMPPD $0x1e, Y11, Y2, Y5 // test > 0 (GT_OQ)
	VANDPD Y5, Y4, Y4
	TESTQ BX, BX
	JNE rdstore
	VMOVUPD (DI), Y3          // old
	VMULPD Y12, Y4, Y6
	VFMADD231PD Y13, Y3, Y6   // (1 + c) old + (1 - c) t
	VMULPD Y13, Y4, Y7
	VFMADD231PD Y12, Y3, Y7   // (1 - c) old + (1 + c) t
	VMULPD Y6, Y4, Y8
	VDIVPD Y7, Y8, Y8         // t p / q
	VCMPPD $0x1e, Y11, Y3, Y9 // old > 0
	VCMPPD $0x1e, Y11, Y4, Y10 // t > 0
	VANDPD Y10, Y9, Y9
	VBLENDVPD Y9, Y8, Y4, Y4
rdstore:
	VMOVUPD Y4, (DI)
	ADDQ $32, DI
	ADDQ $32, SI
	ADDQ $32, DX
	ADDQ $32, R8
	SUBQ $4, CX
	JG rdloop
rdend:
	VZEROUPPER
	RET

// acc[i] += w log(x[i]) by fastLog's reduction, for n a multiple of 4. It
// stops before the first group of four with an x that is not a positive
// normal number and returns how many entries it wrote.
TEXT ·logAxpyAVX(SB), NOSPLIT, $0-64
	MOVQ acc+0(FP), DI
	MOVQ x+8(FP), SI
	MOVQ n+16(FP), CX
	VBROADCASTSD w+24(FP), Y14
	MOVQ c+32(FP), R9
	MOVQ ltab+40(FP), R10
	MOVQ itab+48(FP), R11
	XORQ AX, AX
	TESTQ CX, CX
	JLE laend
laloop:
	VMOVUPD (SI), Y0
	POSNORMAL4(laend)
	LOG4
	VMOVUPD (DI), Y11
	VFMADD231PD Y14, Y6, Y11       // acc + w log x
	VMOVUPD Y11, (DI)
	ADDQ $32, DI
	ADDQ $32, SI
	ADDQ $4, AX
	SUBQ $4, CX
	JG laloop
laend:
	MOVQ AX, ret+56(FP)
	VZEROUPPER
	RET

// Over n (a multiple of 4) pixels, nonzero when any breaks the scaling
// representation's range: where a > 0, K v and u above lo; where b > 0, v
// above lo; u and v at most hi (NaN fails every test).
TEXT ·rangeAVX(SB), NOSPLIT, $0-72
	MOVQ a+0(FP), SI
	MOVQ kv+8(FP), DX
	MOVQ u+16(FP), R8
	MOVQ b+24(FP), R10
	MOVQ v+32(FP), R11
	MOVQ n+40(FP), CX
	VBROADCASTSD lo+48(FP), Y14
	VBROADCASTSD hi+56(FP), Y13
	VXORPD Y12, Y12, Y12      // 0
	VXORPD Y15, Y15, Y15      // accumulated failures
	TESTQ CX, CX
	JLE rgend
rgloop:
	VMOVUPD (R8), Y2          // u
	VMOVUPD (R11), Y4         // v
	VMOVUPD (SI), Y0
	VCMPPD $0x1e, Y12, Y0, Y0 // a > 0
	VMOVUPD (DX), Y1
	VCMPPD $0x1e, Y14, Y1, Y1 // kv > lo
	VCMPPD $0x1e, Y14, Y2, Y5 // u > lo
	VANDPD Y5, Y1, Y1
	VANDNPD Y0, Y1, Y1        // a > 0 and not (kv > lo and u > lo)
	VORPD Y1, Y15, Y15
	VMOVUPD (R10), Y3
	VCMPPD $0x1e, Y12, Y3, Y3 // b > 0
	VCMPPD $0x1e, Y14, Y4, Y6 // v > lo
	VANDNPD Y3, Y6, Y6        // b > 0 and not v > lo
	VORPD Y6, Y15, Y15
	VCMPPD $0x12, Y13, Y2, Y7 // u <= hi (LE_OQ)
	VCMPPD $0x12, Y13, Y4, Y8 // v <= hi
	VANDPD Y8, Y7, Y7
	VPCMPEQD Y9, Y9, Y9
	VXORPD Y9, Y7, Y7         // not both
	VORPD Y7, Y15, Y15
	ADDQ $32, SI
	ADDQ $32, DX
	ADDQ $32, R8
	ADDQ $32, R10
	ADDQ $32, R11
	SUBQ $4, CX
	JG rgloop
rgend:
	VMOVMSKPD Y15, AX
	MOVQ AX, ret+64(FP)
	VZEROUPPER
	RET

// dst[i] = relaxed p[i] - q[i]: the log-domain updates F = log a - log K v
// and G = log b - log K u, blended with the old value as (1 - omega) dst +
// omega t where dst is finite and plain is 0; -Inf where p is -Inf (or q,
// when both is nonzero). n is a multiple of 4.
TEXT ·relaxLogAVX(SB), NOSPLIT, $0-64
	MOVQ dst+0(FP), DI
	MOVQ p+8(FP), SI
	MOVQ q+16(FP), DX
	MOVQ n+24(FP), CX
	VBROADCASTSD omega+32(FP), Y15
	MOVQ plain+40(FP), BX
	MOVQ both+48(FP), R10
	MOVQ c+56(FP), R9
	VMOVUPD 320(R9), Y14      // 1
	VSUBPD Y15, Y14, Y14      // 1 - omega
	VMOVUPD (R9), Y13         // -Inf
	TESTQ CX, CX
	JLE rlend
rlloop:
	VMOVUPD (SI), Y0
	VMOVUPD (DX), Y1
	VSUBPD Y1, Y0, Y2         // t = p - q
	TESTQ BX, BX
	JNE rlinf
	VMOVUPD (DI), Y3
	VMULPD Y14, Y3, Y4
	VFMADD231PD Y15, Y2, Y4   // (1 - omega) dst + omega t
	VCMPPD $0x0c, Y13, Y3, Y5 // dst != -Inf (NEQ_OQ)
	VBLENDVPD Y5, Y4, Y2, Y2
rlinf:
	VCMPPD $0x00, Y13, Y0, Y6 // p == -Inf
	TESTQ R10, R10
	JEQ rlset
	VCMPPD $0x00, Y13, Y1, Y7 // q == -Inf
	VORPD Y7, Y6, Y6
rlset:
	VBLENDVPD Y6, Y13, Y2, Y2
	VMOVUPD Y2, (DI)
	ADDQ $32, DI
	ADDQ $32, SI
	ADDQ $32, DX
	SUBQ $4, CX
	JG rlloop
rlend:
	VZEROUPPER
	RET
