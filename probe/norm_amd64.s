#include "textflag.h"

// LayerNormalization rows in float64 lanes (op_norm.go normRows32): the
// same IEEE double operations, in the same order, as the Go loops of
// norm_f32.go, so the results are bit-identical to them.

// func normPartialsAVX512(x *float32, n int, mu float64, sq int, p *[16]float64)
// For j < n (a multiple of 16), p[j mod 16] += x[j] (sq = 0) or
// (x[j] − mu)·(x[j] − mu) (sq = 1), each product rounded before the sum
// (no fused multiply-add), values in order of j.
TEXT ·normPartialsAVX512(SB), NOSPLIT, $0-40
	MOVQ x+0(FP), SI
	MOVQ n+8(FP), CX
	VBROADCASTSD mu+16(FP), Z4
	MOVQ sq+24(FP), AX
	MOVQ p+32(FP), DI
	VMOVUPD (DI), Z0
	VMOVUPD 64(DI), Z1
	SHRQ $4, CX
	JZ   store
	TESTQ AX, AX
	JNZ  sqloop
sumloop:
	VCVTPS2PD (SI), Z2
	VCVTPS2PD 32(SI), Z3
	VADDPD Z2, Z0, Z0
	VADDPD Z3, Z1, Z1
	ADDQ $64, SI
	DECQ CX
	JNZ  sumloop
	JMP  store
sqloop:
	VCVTPS2PD (SI), Z2
	VCVTPS2PD 32(SI), Z3
	VSUBPD Z4, Z2, Z2
	VSUBPD Z4, Z3, Z3
	VMULPD Z2, Z2, Z2
	VMULPD Z3, Z3, Z3
	VADDPD Z2, Z0, Z0
	VADDPD Z3, Z1, Z1
	ADDQ $64, SI
	DECQ CX
	JNZ  sqloop
store:
	VMOVUPD Z0, (DI)
	VMOVUPD Z1, 64(DI)
	VZEROUPPER
	RET

// func normAffineAVX512(y, x *float32, n int, mu, rs float64, scale, bias *float64)
// For j < n (a multiple of 8): y[j] = float32(((x[j] − mu)·rs)·scale[j] +
// bias[j]), bias nil: without the sum; each operation rounded in float64.
TEXT ·normAffineAVX512(SB), NOSPLIT, $0-56
	MOVQ y+0(FP), DI
	MOVQ x+8(FP), SI
	MOVQ n+16(FP), CX
	VBROADCASTSD mu+24(FP), Z4
	VBROADCASTSD rs+32(FP), Z5
	MOVQ scale+40(FP), R8
	MOVQ bias+48(FP), R9
	SHRQ $3, CX
	JZ   done
	TESTQ R9, R9
	JZ   nobias
bloop:
	VCVTPS2PD (SI), Z0
	VSUBPD Z4, Z0, Z0
	VMULPD Z5, Z0, Z0
	VMULPD (R8), Z0, Z0
	VADDPD (R9), Z0, Z0
	VCVTPD2PS Z0, Y1
	VMOVUPS Y1, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	ADDQ $64, R8
	ADDQ $64, R9
	DECQ CX
	JNZ  bloop
	JMP  done
nobias:
	VCVTPS2PD (SI), Z0
	VSUBPD Z4, Z0, Z0
	VMULPD Z5, Z0, Z0
	VMULPD (R8), Z0, Z0
	VCVTPD2PS Z0, Y1
	VMOVUPS Y1, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	ADDQ $64, R8
	DECQ CX
	JNZ  nobias
done:
	VZEROUPPER
	RET
