#include "textflag.h"

// SIGMOID32 sets Z11 = sigmoid(Z0). With a = |x|, t = max(−a, −150),
// t = k·ln2 + r (|r| ≤ ln2/2, k rounded to nearest), q = e^r − 1 =
// r + r²·(1/2! + r/3! + … + r⁶/8!), E = e^t = 2^k·(1 + q), s = 1 + E held as
// s_hi + s_lo exactly (Fast2Sum, 1 ≥ E), d = 1/s from the 14-bit VRCP14PS
// and one Newton step on s_hi + s_lo (d = d0·(1 + ρ), ρ the residual
// 1 − d0·s); the result is d for x ≥ 0 (and NaN), and for x < 0
// E/(1 + E) = 2^k·(1 + q)·d0·(1 + ρ) = 2^k·(d0 + d0·(q + ρ·(1 + q))), d0
// exact and only the small sum q + ρ·(1 + q) rounded before the last fused
// multiply-add. Clobbers Z1…Z12, K1.
#define SIGMOID32() \
	VORPS Z19, Z0, Z1; \
	VMAXPS Z1, Z28, Z1; \
	VMULPS Z31, Z1, Z2; \
	VRNDSCALEPS $0, Z2, Z2; \
	VFNMADD231PS Z30, Z2, Z1; \
	VFNMADD231PS Z29, Z2, Z1; \
	VMULPS Z1, Z1, Z3; \
	VMOVAPS Z21, Z4; \
	VFMADD213PS Z22, Z1, Z4; \
	VFMADD213PS Z23, Z1, Z4; \
	VFMADD213PS Z24, Z1, Z4; \
	VFMADD213PS Z25, Z1, Z4; \
	VFMADD213PS Z26, Z1, Z4; \
	VFMADD213PS Z27, Z1, Z4; \
	VFMADD213PS Z1, Z3, Z4; \
	VADDPS Z20, Z4, Z5; \
	VSCALEFPS Z2, Z5, Z5; \
	VADDPS Z20, Z5, Z6; \
	VSUBPS Z6, Z20, Z7; \
	VADDPS Z5, Z7, Z7; \
	VRCP14PS Z6, Z8; \
	VMOVAPS Z20, Z9; \
	VFNMADD231PS Z8, Z6, Z9; \
	VFNMADD231PS Z8, Z7, Z9; \
	VMOVAPS Z8, Z12; \
	VFMADD231PS Z8, Z9, Z12; \
	VMOVAPS Z9, Z10; \
	VFMADD231PS Z9, Z4, Z10; \
	VADDPS Z4, Z10, Z10; \
	VFMADD213PS Z8, Z8, Z10; \
	VSCALEFPS Z2, Z10, Z10; \
	VCMPPS $0x11, Z18, Z0, K1; \
	VBLENDMPS Z10, Z12, K1, Z11

// func sigmoid32AVX512(dst, src *float32, n int, table *[16]float32, mul *float32, order int)
//
// Sigmoid sixteen values at a time in float32 lanes (AVX-512F); see
// act32_amd64.go for the method and its error. Registers held: Z31 = log2 e,
// Z30 + Z29 = ln 2 (high part, exact for k·ln2hi, and remainder), Z28 = −150
// (the clamp of −|x|), Z27 … Z21 = 1/2!, 1/3!, … 1/8!, Z20 = 1, Z19 = the
// sign bit, Z18 = 0. The last n mod 16 values go through a masked load and
// store (K2), so a value's result does not depend on its lane. With mul set
// (SiLU), mul[i] = x·s as VMULPS with the operands in the Mul node's order:
// order 0 Mul(x, s), 1 Mul(s, x) (the same NaN operand is returned first).
TEXT ·sigmoid32AVX512(SB), NOSPLIT, $0-48
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	MOVQ table+24(FP), DX
	MOVQ mul+32(FP), R9
	MOVQ order+40(FP), R10
	VBROADCASTSS 0(DX), Z31
	VBROADCASTSS 4(DX), Z30
	VBROADCASTSS 8(DX), Z29
	VBROADCASTSS 12(DX), Z28
	VBROADCASTSS 16(DX), Z27
	VBROADCASTSS 20(DX), Z26
	VBROADCASTSS 24(DX), Z25
	VBROADCASTSS 28(DX), Z24
	VBROADCASTSS 32(DX), Z23
	VBROADCASTSS 36(DX), Z22
	VBROADCASTSS 40(DX), Z21
	VBROADCASTSS 44(DX), Z20
	VBROADCASTSS 48(DX), Z19
	VXORPS Z18, Z18, Z18
	MOVQ CX, R8
	SHRQ $4, CX
	ANDQ $15, R8
	MOVQ $1, AX
	MOVQ R8, DX
	XCHGQ DX, CX
	SHLQ CX, AX
	XCHGQ DX, CX
	DECQ AX
	KMOVW AX, K2
	TESTQ R9, R9
	JZ   plain
	MOVQ $64, R11                // dst's step: 0 with order bit 1 (dst a
	BTQ  $1, R10                 // 16-value scratch, the sigmoid not kept)
	JCC  keepdst
	XORQ R11, R11
keepdst:
	ANDQ $1, R10
	TESTQ R10, R10
	JNZ  sfirst

xfirst:
	TESTQ CX, CX
	JZ   xtail
xloop:
	VMOVUPS (SI), Z0
	SIGMOID32()
	VMOVUPS Z11, (DI)
	VMULPS Z11, Z0, Z13
	VMOVUPS Z13, (R9)
	ADDQ $64, SI
	ADDQ R11, DI
	ADDQ $64, R9
	DECQ CX
	JNZ  xloop
xtail:
	TESTQ R8, R8
	JZ   done
	VMOVUPS.Z (SI), K2, Z0
	SIGMOID32()
	VMOVUPS Z11, K2, (DI)
	VMULPS Z11, Z0, Z13
	VMOVUPS Z13, K2, (R9)
	JMP  done

sfirst:
	TESTQ CX, CX
	JZ   stail
sloop:
	VMOVUPS (SI), Z0
	SIGMOID32()
	VMOVUPS Z11, (DI)
	VMULPS Z0, Z11, Z13
	VMOVUPS Z13, (R9)
	ADDQ $64, SI
	ADDQ R11, DI
	ADDQ $64, R9
	DECQ CX
	JNZ  sloop
stail:
	TESTQ R8, R8
	JZ   done
	VMOVUPS.Z (SI), K2, Z0
	SIGMOID32()
	VMOVUPS Z11, K2, (DI)
	VMULPS Z0, Z11, Z13
	VMOVUPS Z13, K2, (R9)
	JMP  done

plain:
	TESTQ CX, CX
	JZ   ptail
ploop:
	VMOVUPS (SI), Z0
	SIGMOID32()
	VMOVUPS Z11, (DI)
	ADDQ $64, SI
	ADDQ $64, DI
	DECQ CX
	JNZ  ploop
ptail:
	TESTQ R8, R8
	JZ   done
	VMOVUPS.Z (SI), K2, Z0
	SIGMOID32()
	VMOVUPS Z11, K2, (DI)

done:
	VZEROUPPER
	RET
