#include "textflag.h"

// GROUP folds the 16 values in Z0 into Z10/Z11, Z5 and R8 (clobbers
// Z1-Z4, Z6-Z8, K1, AX).
#define GROUP \
	VCMPPS $0x1e, Z31, Z0, K1; \
	VMAXPS Z0, Z5, K1, Z5; \
	KMOVW K1, AX; \
	POPCNTL AX, AX; \
	ADDQ AX, R8; \
	VGETEXPPS Z0, Z1; \
	VGETMANTPS $0x03, Z0, Z2; \
	VGETEXPPS Z2, Z3; \
	VSUBPS Z3, Z1, Z1; \
	VSUBPS Z29, Z2, Z3; \
	VADDPS Z29, Z2, Z4; \
	VDIVPS Z4, Z3, Z3; \
	VMULPS Z3, Z3, Z4; \
	VMOVAPS Z27, Z6; \
	VFMADD213PS Z26, Z4, Z6; \
	VFMADD213PS Z25, Z4, Z6; \
	VFMADD213PS Z24, Z4, Z6; \
	VFMADD213PS Z29, Z4, Z6; \
	VADDPS Z3, Z3, Z3; \
	VMULPS Z3, Z6, Z6; \
	VFMADD231PS Z30, Z1, Z6; \
	VMULPS.Z Z0, Z6, K1, Z6; \
	VCVTPS2PD Y6, Z7; \
	VEXTRACTF32X8 $1, Z6, Y8; \
	VCVTPS2PD Y8, Z8; \
	VADDPD Z7, Z10, Z10; \
	VADDPD Z8, Z11, Z11;


// func rowEntAVX512(p []float32) (sum float64, nz int, mx float32)
//
// sum = Σ_{p_j > 0} p_j·ln p_j (float64 sums of float32 terms), nz the
// number of p_j > 0, mx their maximum (0 when none). ln p = e·ln2 + ln m
// with p = 2^e·m, m in [3/4, 3/2) (VGETEXPPS, VGETMANTPS), and
// ln m = 2s·(1 + s²/3 + s⁴/5 + s⁶/7 + s⁸/9), s = (m−1)/(m+1), |s| ≤ 1/5
// (the series' next term is below 1e-8 of ln m), all in float32.
// Lanes: Z10/Z11 the float64 sums (values 0..7 / 8..15 of each group), Z5
// the maximum, R8 the count. The tail (len mod 16) is read with a mask.
TEXT ·rowEntAVX512(SB), NOSPLIT, $0-44
	MOVQ p_base+0(FP), SI
	MOVQ p_len+8(FP), CX
	XORQ R8, R8
	VPXORD Z31, Z31, Z31          // 0
	VPXORD Z5, Z5, Z5             // max
	VPXORD Z10, Z10, Z10
	VPXORD Z11, Z11, Z11
	MOVL $0x3f800000, AX          // 1
	VPBROADCASTD AX, Z29
	MOVL $0x3f317218, AX          // ln 2
	VPBROADCASTD AX, Z30
	MOVL $0x3e638e39, AX          // 1/9
	VPBROADCASTD AX, Z27
	MOVL $0x3e124925, AX          // 1/7
	VPBROADCASTD AX, Z26
	MOVL $0x3e4ccccd, AX          // 1/5
	VPBROADCASTD AX, Z25
	MOVL $0x3eaaaaab, AX          // 1/3
	VPBROADCASTD AX, Z24
	MOVQ CX, DX
	SHRQ $4, DX
	JZ   tail

loop:
	VMOVUPS (SI), Z0
	GROUP
	ADDQ $64, SI
	DECQ DX
	JNZ  loop

tail:
	ANDQ $15, CX
	JZ   reduce
	MOVL $1, AX
	SHLL CX, AX
	DECL AX
	KMOVW AX, K2
	VMOVUPS.Z (SI), K2, Z0
	GROUP

reduce:
	VADDPD Z11, Z10, Z10
	VEXTRACTF64X4 $1, Z10, Y11
	VADDPD Y11, Y10, Y10
	VEXTRACTF128 $1, Y10, X11
	VADDPD X11, X10, X10
	VPERMILPD $1, X10, X11
	VADDSD X11, X10, X10
	MOVSD X10, sum+24(FP)
	MOVQ R8, nz+32(FP)
	VEXTRACTF32X8 $1, Z5, Y6
	VMAXPS Y6, Y5, Y5
	VEXTRACTF128 $1, Y5, X6
	VMAXPS X6, X5, X5
	VPERMILPS $0x4e, X5, X6
	VMAXPS X6, X5, X5
	VPERMILPS $0xb1, X5, X6
	VMAXPS X6, X5, X5
	MOVSS X5, mx+40(FP)
	VZEROUPPER
	RET
