#include "textflag.h"

// Float32 activations eight at a time in float64 lanes (AVX-512F/DQ); see
// act_amd64.go for the formulas, the table and the error bounds.
//
// Registers held across the loop: Z18…Z31 = 1/n! for n = 0…13, Z17 = log2 e,
// Z16 + Z15 = ln 2 (high and low parts), Z14 / Z13 = the exponent clamps
// (710, −746), Z12 = 20, Z11 = 2, Z10 = 6, Z9 = 1/2, Z8 Z7 Z6 = the op's
// parameters, Z5 = the sign bit. Z0 holds x, Z3 the result.

// EXPPD sets E = e^T (T clamped to [−746, 710]: 0 and +Inf beyond; NaN stays
// NaN): T = k·ln2 + r, |r| ≤ ln2/2, e^r by its Taylor series to r¹³, scaled by 2^k.
// T and K are clobbered.
#define EXPPD(T, K, E) \
	VMINPD T, Z14, T; \
	VMAXPD T, Z13, T; \
	VMULPD Z17, T, K; \
	VRNDSCALEPD $0, K, K; \
	VFNMADD231PD Z16, K, T; \
	VFNMADD231PD Z15, K, T; \
	VMOVAPD Z31, E; \
	VFMADD213PD Z30, T, E; \
	VFMADD213PD Z29, T, E; \
	VFMADD213PD Z28, T, E; \
	VFMADD213PD Z27, T, E; \
	VFMADD213PD Z26, T, E; \
	VFMADD213PD Z25, T, E; \
	VFMADD213PD Z24, T, E; \
	VFMADD213PD Z23, T, E; \
	VFMADD213PD Z22, T, E; \
	VFMADD213PD Z21, T, E; \
	VFMADD213PD Z20, T, E; \
	VFMADD213PD Z19, T, E; \
	VFMADD213PD Z18, T, E; \
	VSCALEFPD K, E, E

// EXPM1PD sets E = e^T − 1 = 2^k·(e^r − 1) + (2^k − 1) with e^r − 1 = r·(1 + r/2 + …)
// (no cancellation near 0). T, K and W are clobbered.
#define EXPM1PD(T, K, E, W) \
	VMINPD T, Z14, T; \
	VMAXPD T, Z13, T; \
	VMULPD Z17, T, K; \
	VRNDSCALEPD $0, K, K; \
	VFNMADD231PD Z16, K, T; \
	VFNMADD231PD Z15, K, T; \
	VMOVAPD Z31, E; \
	VFMADD213PD Z30, T, E; \
	VFMADD213PD Z29, T, E; \
	VFMADD213PD Z28, T, E; \
	VFMADD213PD Z27, T, E; \
	VFMADD213PD Z26, T, E; \
	VFMADD213PD Z25, T, E; \
	VFMADD213PD Z24, T, E; \
	VFMADD213PD Z23, T, E; \
	VFMADD213PD Z22, T, E; \
	VFMADD213PD Z21, T, E; \
	VFMADD213PD Z20, T, E; \
	VFMADD213PD Z19, T, E; \
	VMULPD T, E, E; \
	VSCALEFPD K, Z18, W; \
	VSUBPD Z18, W, K; \
	VFMADD213PD K, W, E

// func actAVX512(dst, src *float32, n int, op int, table *[24]float64, p *[3]float64)
TEXT ·actAVX512(SB), NOSPLIT, $0-48
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	MOVQ op+24(FP), R9
	MOVQ table+32(FP), DX
	MOVQ p+40(FP), R8
	SHRQ $3, CX
	JZ   done
	VBROADCASTSD 0(DX), Z18
	VBROADCASTSD 8(DX), Z19
	VBROADCASTSD 16(DX), Z20
	VBROADCASTSD 24(DX), Z21
	VBROADCASTSD 32(DX), Z22
	VBROADCASTSD 40(DX), Z23
	VBROADCASTSD 48(DX), Z24
	VBROADCASTSD 56(DX), Z25
	VBROADCASTSD 64(DX), Z26
	VBROADCASTSD 72(DX), Z27
	VBROADCASTSD 80(DX), Z28
	VBROADCASTSD 88(DX), Z29
	VBROADCASTSD 96(DX), Z30
	VBROADCASTSD 104(DX), Z31
	VBROADCASTSD 112(DX), Z17
	VBROADCASTSD 120(DX), Z16
	VBROADCASTSD 128(DX), Z15
	VBROADCASTSD 136(DX), Z14
	VBROADCASTSD 144(DX), Z13
	VBROADCASTSD 152(DX), Z12
	VBROADCASTSD 160(DX), Z11
	VBROADCASTSD 168(DX), Z10
	VBROADCASTSD 176(DX), Z9
	VBROADCASTSD 0(R8), Z8
	VBROADCASTSD 8(R8), Z7
	VBROADCASTSD 16(R8), Z6
	MOVQ $0x8000000000000000, R10
	VPBROADCASTQ R10, Z5
	CMPQ R9, $0
	JEQ  sigmoid
	CMPQ R9, $1
	JEQ  tanh
	CMPQ R9, $2
	JEQ  elu
	CMPQ R9, $3
	JEQ  hardsigmoid
	CMPQ R9, $4
	JEQ  hardswish
	CMPQ R9, $5
	JEQ  exp
	CMPQ R9, $6
	JEQ  mish
	JMP  done

sigmoid:
	VCVTPS2PD (SI), Z0
	VXORPD Z5, Z0, Z1 // −x
	EXPPD(Z1, Z2, Z3) // e^−x
	VADDPD Z18, Z3, Z3
	VDIVPD Z3, Z18, Z3 // 1/(1 + e^−x)
	VCVTPD2PS Z3, Y3
	VMOVUPS Y3, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	DECQ CX
	JNZ  sigmoid
	JMP  done

tanh:
	VCVTPS2PD (SI), Z0
	VANDNPD Z0, Z5, Z1 // a = |x|
	VMINPD Z1, Z12, Z1 // min(a, 20): tanh rounds to 1 beyond
	VADDPD Z1, Z1, Z1  // 2a
	EXPM1PD(Z1, Z2, Z3, Z4) // m = e^2a − 1
	VADDPD Z11, Z3, Z4
	VDIVPD Z4, Z3, Z3  // m/(m + 2) = tanh a
	VANDPD Z5, Z0, Z4
	VORPD Z4, Z3, Z3   // the sign of x
	VCVTPD2PS Z3, Y3
	VMOVUPS Y3, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	DECQ CX
	JNZ  tanh
	JMP  done

elu:
	VCVTPS2PD (SI), Z0
	VDIVPD Z6, Z0, Z1  // x/d
	EXPM1PD(Z1, Z2, Z3, Z4) // e^(x/d) − 1
	VMULPD Z7, Z3, Z3  // q·(e^(x/d) − 1)
	VMULPD Z8, Z0, Z4  // p·x
	VXORPD Z2, Z2, Z2
	VCMPPD $0x1e, Z2, Z0, K1 // x > 0
	VBLENDMPD Z4, Z3, K1, Z3
	VCVTPD2PS Z3, Y3
	VMOVUPS Y3, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	DECQ CX
	JNZ  elu
	JMP  done

hardsigmoid:
	VCVTPS2PD (SI), Z0
	VFMADD213PD Z7, Z8, Z0 // αx + β (αx exact in float64)
	VMINPD Z0, Z18, Z0
	VXORPD Z2, Z2, Z2
	VMAXPD Z0, Z2, Z3
	VCVTPD2PS Z3, Y3
	VMOVUPS Y3, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	DECQ CX
	JNZ  hardsigmoid
	JMP  done

hardswish:
	VCVTPS2PD (SI), Z0
	VDIVPD Z10, Z0, Z1 // x/6
	VADDPD Z9, Z1, Z1  // + 1/2
	VMINPD Z1, Z18, Z1
	VXORPD Z2, Z2, Z2
	VMAXPD Z1, Z2, Z1
	VMULPD Z1, Z0, Z3
	VCVTPD2PS Z3, Y3
	VMOVUPS Y3, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	DECQ CX
	JNZ  hardswish
	JMP  done

exp:
	VCVTPS2PD (SI), Z0
	EXPPD(Z0, Z1, Z3)
	VCVTPD2PS Z3, Y3
	VMOVUPS Y3, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	DECQ CX
	JNZ  exp
	JMP  done

mish:
	VCVTPS2PD (SI), Z0
	VMINPD Z0, Z12, Z1 // min(x, 20): tanh(softplus x) rounds to 1 beyond
	EXPPD(Z1, Z2, Z3)  // e = e^x
	VADDPD Z11, Z3, Z4
	VMULPD Z4, Z3, Z3  // n = e(e + 2) = (1 + e)² − 1
	VADDPD Z11, Z3, Z4
	VDIVPD Z4, Z3, Z3  // n/(n + 2) = tanh(ln(1 + e))
	VMULPD Z3, Z0, Z3
	VCVTPD2PS Z3, Y3
	VMOVUPS Y3, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	DECQ CX
	JNZ  mish
	JMP  done

done:
	VZEROUPPER
	RET
