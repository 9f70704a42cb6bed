#include "textflag.h"

// Element-wise maximum with Go's max semantics (math/bits of the result as
// Go's max gives them): NaN wins, +0 beats −0, otherwise the larger value.
// VMAXPS alone returns its second source when either is NaN or both are
// zero, so equal lanes get a AND b (+0 for ±0, a otherwise) and lanes where
// a is NaN get a. r = gomax(a, b); K1, K2 clobbered.
#define GOMAX(a, b, r) \
	VMAXPS b, a, r; \
	VCMPPS $0, b, a, K1; \
	VANDPS b, a, K1, r; \
	VCMPPS $3, a, a, K2; \
	VMOVAPS a, K2, r

DATA poolEvenIdx<>+0(SB)/4, $0
DATA poolEvenIdx<>+4(SB)/4, $2
DATA poolEvenIdx<>+8(SB)/4, $4
DATA poolEvenIdx<>+12(SB)/4, $6
DATA poolEvenIdx<>+16(SB)/4, $8
DATA poolEvenIdx<>+20(SB)/4, $10
DATA poolEvenIdx<>+24(SB)/4, $12
DATA poolEvenIdx<>+28(SB)/4, $14
DATA poolEvenIdx<>+32(SB)/4, $16
DATA poolEvenIdx<>+36(SB)/4, $18
DATA poolEvenIdx<>+40(SB)/4, $20
DATA poolEvenIdx<>+44(SB)/4, $22
DATA poolEvenIdx<>+48(SB)/4, $24
DATA poolEvenIdx<>+52(SB)/4, $26
DATA poolEvenIdx<>+56(SB)/4, $28
DATA poolEvenIdx<>+60(SB)/4, $30
GLOBL poolEvenIdx<>(SB), RODATA, $64

DATA poolOddIdx<>+0(SB)/4, $1
DATA poolOddIdx<>+4(SB)/4, $3
DATA poolOddIdx<>+8(SB)/4, $5
DATA poolOddIdx<>+12(SB)/4, $7
DATA poolOddIdx<>+16(SB)/4, $9
DATA poolOddIdx<>+20(SB)/4, $11
DATA poolOddIdx<>+24(SB)/4, $13
DATA poolOddIdx<>+28(SB)/4, $15
DATA poolOddIdx<>+32(SB)/4, $17
DATA poolOddIdx<>+36(SB)/4, $19
DATA poolOddIdx<>+40(SB)/4, $21
DATA poolOddIdx<>+44(SB)/4, $23
DATA poolOddIdx<>+48(SB)/4, $25
DATA poolOddIdx<>+52(SB)/4, $27
DATA poolOddIdx<>+56(SB)/4, $29
DATA poolOddIdx<>+60(SB)/4, $31
GLOBL poolOddIdx<>(SB), RODATA, $64

// func maxRowsAVX512(dst, a, b *float32, n int)
// dst[i] = max(a[i], b[i]) for i < n (n a multiple of 16).
TEXT ·maxRowsAVX512(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ a+8(FP), SI
	MOVQ b+16(FP), DX
	MOVQ n+24(FP), CX
	SHRQ $4, CX
	JZ   rowsdone

rows:
	VMOVUPS (SI), Z0
	VMOVUPS (DX), Z1
	GOMAX(Z0, Z1, Z2)
	VMOVUPS Z2, (DI)
	ADDQ $64, SI
	ADDQ $64, DX
	ADDQ $64, DI
	DECQ CX
	JNZ  rows
	VZEROUPPER

rowsdone:
	RET

// func maxCols3s2AVX512(dst, src *float32, n int)
// dst[o] = max(src[2o−1], src[2o], src[2o+1]) for o < n (n a multiple of
// 16), in that order; it reads src[−1] through src[2n−1].
TEXT ·maxCols3s2AVX512(SB), NOSPLIT, $0-24
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	SHRQ $4, CX
	JZ   colsdone
	VMOVDQU32 poolEvenIdx<>(SB), Z30
	VMOVDQU32 poolOddIdx<>(SB), Z29

cols:
	VMOVUPS (SI), Z0             // src[2o .. 2o+15]
	VMOVUPS 64(SI), Z1           // src[2o+16 .. 2o+31]
	VMOVUPS -4(SI), Z3           // src[2o−1 .. 2o+14]
	VMOVUPS 60(SI), Z4           // src[2o+15 .. 2o+30]
	VMOVDQA32 Z30, Z5
	VPERMI2PS Z1, Z0, Z5         // src[2o]
	VMOVDQA32 Z29, Z6
	VPERMI2PS Z1, Z0, Z6         // src[2o+1]
	VMOVDQA32 Z30, Z7
	VPERMI2PS Z4, Z3, Z7         // src[2o−1]
	GOMAX(Z7, Z5, Z8)
	GOMAX(Z8, Z6, Z9)
	VMOVUPS Z9, (DI)
	ADDQ $128, SI
	ADDQ $64, DI
	DECQ CX
	JNZ  cols
	VZEROUPPER

colsdone:
	RET

// func maxCols2s2AVX512(dst, src *float32, n int)
// dst[o] = max(src[2o], src[2o+1]) for o < n (n a multiple of 16); it reads
// src[0] through src[2n−1].
TEXT ·maxCols2s2AVX512(SB), NOSPLIT, $0-24
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	SHRQ $4, CX
	JZ   pairsdone
	VMOVDQU32 poolEvenIdx<>(SB), Z30
	VMOVDQU32 poolOddIdx<>(SB), Z29

pairs:
	VMOVUPS (SI), Z0             // src[2o .. 2o+15]
	VMOVUPS 64(SI), Z1           // src[2o+16 .. 2o+31]
	VMOVDQA32 Z30, Z5
	VPERMI2PS Z1, Z0, Z5         // src[2o]
	VMOVDQA32 Z29, Z6
	VPERMI2PS Z1, Z0, Z6         // src[2o+1]
	GOMAX(Z5, Z6, Z9)
	VMOVUPS Z9, (DI)
	ADDQ $128, SI
	ADDQ $64, DI
	DECQ CX
	JNZ  pairs
	VZEROUPPER

pairsdone:
	RET

// func sum8AVX512(x *float32, n int, acc *[8]float64)
// acc[j] += Σ_i x[8i + j] for i < n/8 (n a multiple of 8), in order, one
// float64 lane per j: the additions of the Go loop of poolGlobalAvgF32.
TEXT ·sum8AVX512(SB), NOSPLIT, $0-24
	MOVQ x+0(FP), SI
	MOVQ n+8(FP), CX
	MOVQ acc+16(FP), DX
	VMOVUPD (DX), Z0
	SHRQ $3, CX
	JZ   sumdone
sumloop:
	VCVTPS2PD (SI), Z1
	VADDPD Z1, Z0, Z0
	ADDQ $32, SI
	DECQ CX
	JNZ  sumloop
sumdone:
	VMOVUPD Z0, (DX)
	VZEROUPPER
	RET
