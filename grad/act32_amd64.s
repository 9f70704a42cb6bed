#include "textflag.h"

// func hardSwishAVX512(dst, gp, x *float32, n int, lanes *[2][8]float64)
//
// HardSwish's rule on float32 gradients for n elements (a multiple of 16):
// dst = G·d(x) in float32, d = 0 below −3, x·(1/3) + 1/2 (one fused
// multiply-add in float32) up to 3, 1 above or for NaN; lanes[0..1] Σ G²
// in float64 (elements ≡ 0..7, 8..15 mod 16). dst may be G itself.
TEXT ·hardSwishAVX512(SB), NOSPLIT, $0-40
	MOVQ dst+0(FP), DI
	MOVQ gp+8(FP), SI
	MOVQ x+16(FP), R9
	MOVQ n+24(FP), CX
	MOVQ lanes+32(FP), BX
	MOVL $0x3eaaaaab, AX         // 1/3
	VPBROADCASTD AX, Z28
	MOVL $0x3f000000, AX         // 1/2
	VPBROADCASTD AX, Z29
	MOVL $0x3f800000, AX         // 1
	VPBROADCASTD AX, Z30
	MOVL $0x40400000, AX         // 3
	VPBROADCASTD AX, Z26
	MOVL $0xc0400000, AX         // −3
	VPBROADCASTD AX, Z25
	VPXORQ Z31, Z31, Z31
	VPXORQ Z10, Z10, Z10
	VPXORQ Z11, Z11, Z11
	SHRQ $4, CX
	JZ   done
loop:
	VCVTPS2PD 0(SI), Z2          // G as float64
	VCVTPS2PD 32(SI), Z3
	VFMADD231PD Z2, Z2, Z10      // Σ G²
	VFMADD231PD Z3, Z3, Z11
	VMOVUPS (SI), Z0
	VMOVUPS (R9), Z1
	VMOVAPS Z29, Z4
	VFMADD231PS Z28, Z1, Z4      // x·(1/3) + 1/2
	VCMPPS $0x12, Z26, Z1, K1    // x ≤ 3 (ordered: false for NaN)
	VBLENDMPS Z4, Z30, K1, Z5    // else 1
	VCMPPS $0x11, Z25, Z1, K2    // x < −3
	VBLENDMPS Z31, Z5, K2, Z5    // then 0
	VMULPS Z5, Z0, Z6
	VMOVUPS Z6, (DI)
	ADDQ $64, SI
	ADDQ $64, R9
	ADDQ $64, DI
	DECQ CX
	JNZ  loop
done:
	VMOVUPD Z10, 0(BX)
	VMOVUPD Z11, 64(BX)
	VZEROUPPER
	RET

// func sumAVX512(x *float32, n int, lanes *[2][8]float64)
//
// Σ x over n elements (a multiple of 16) in 16 float64 lanes (elements
// ≡ 0..7, 8..15 mod 16).
TEXT ·sumAVX512(SB), NOSPLIT, $0-24
	MOVQ x+0(FP), SI
	MOVQ n+8(FP), CX
	MOVQ lanes+16(FP), BX
	VPXORQ Z0, Z0, Z0
	VPXORQ Z1, Z1, Z1
	SHRQ $4, CX
	JZ   sdone
sloop:
	VCVTPS2PD 0(SI), Z2
	VCVTPS2PD 32(SI), Z3
	VADDPD Z2, Z0, Z0
	VADDPD Z3, Z1, Z1
	ADDQ $64, SI
	DECQ CX
	JNZ  sloop
sdone:
	VMOVUPD Z0, 0(BX)
	VMOVUPD Z1, 64(BX)
	VZEROUPPER
	RET
