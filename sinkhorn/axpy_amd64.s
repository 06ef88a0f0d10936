#include "textflag.h"

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
