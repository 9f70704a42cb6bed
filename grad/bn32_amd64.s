#include "textflag.h"

// func bnPlaneAVX512(gp, x, d *float32, n int, k float32, lanes *[10][8]float64)
//
// bnPlane32's sums over n elements (a multiple of 16), 16 per step, in
// float64 lanes: lanes[0..1] Σ G (elements ≡ 0..7, 8..15 mod 16), [2..3]
// Σ G·x, [4..5] Σ G², [8..9] Σ d² with d = G·k written in float32 (d may
// be G itself: a step reads its elements before it writes them). [6..7]
// are left zero.
TEXT ·bnPlaneAVX512(SB), NOSPLIT, $0-48
	MOVQ gp+0(FP), SI
	MOVQ x+8(FP), R9
	MOVQ d+16(FP), DI
	MOVQ n+24(FP), CX
	VBROADCASTSS k+32(FP), Z30
	MOVQ lanes+40(FP), BX
	VPXORQ Z0, Z0, Z0
	VPXORQ Z1, Z1, Z1
	VPXORQ Z2, Z2, Z2
	VPXORQ Z3, Z3, Z3
	VPXORQ Z4, Z4, Z4
	VPXORQ Z5, Z5, Z5
	VPXORQ Z6, Z6, Z6
	VPXORQ Z7, Z7, Z7
	VPXORQ Z8, Z8, Z8
	VPXORQ Z9, Z9, Z9
	SHRQ $4, CX
	JZ   done
loop:
	VCVTPS2PD 0(SI), Z12         // G 0..7 as float64
	VCVTPS2PD 32(SI), Z13        // G 8..15
	VADDPD Z12, Z0, Z0
	VADDPD Z13, Z1, Z1
	VCVTPS2PD 0(R9), Z14         // x
	VCVTPS2PD 32(R9), Z15
	VFMADD231PD Z14, Z12, Z2     // Σ G·x
	VFMADD231PD Z15, Z13, Z3
	VFMADD231PD Z12, Z12, Z4     // Σ G²
	VFMADD231PD Z13, Z13, Z5
	VMOVUPS (SI), Z10
	VMULPS  Z30, Z10, Z10        // d = G·k in float32
	VMOVUPS Z10, (DI)
	VCVTPS2PD Y10, Z14
	VEXTRACTF64X4 $1, Z10, Y15
	VCVTPS2PD Y15, Z15
	VFMADD231PD Z14, Z14, Z8     // Σ d²
	VFMADD231PD Z15, Z15, Z9
	ADDQ $64, SI
	ADDQ $64, R9
	ADDQ $64, DI
	DECQ CX
	JNZ  loop
done:
	VMOVUPD Z0, 0(BX)
	VMOVUPD Z1, 64(BX)
	VMOVUPD Z2, 128(BX)
	VMOVUPD Z3, 192(BX)
	VMOVUPD Z4, 256(BX)
	VMOVUPD Z5, 320(BX)
	VMOVUPD Z6, 384(BX)
	VMOVUPD Z7, 448(BX)
	VMOVUPD Z8, 512(BX)
	VMOVUPD Z9, 576(BX)
	VZEROUPPER
	RET

// func bnPlaneMaskAVX512(gp, m, x, d *float32, n int, k float32, lanes *[10][8]float64)
//
// bnPlaneAVX512 with G taken as 0 where m ≤ 0 or NaN (an ordered m > 0
// selects it: −0 and NaN do not pass), and lanes[6..7] Σ G² before the
// mask.
TEXT ·bnPlaneMaskAVX512(SB), NOSPLIT, $0-56
	MOVQ gp+0(FP), SI
	MOVQ m+8(FP), R8
	MOVQ x+16(FP), R9
	MOVQ d+24(FP), DI
	MOVQ n+32(FP), CX
	VBROADCASTSS k+40(FP), Z30
	MOVQ lanes+48(FP), BX
	VPXORQ Z31, Z31, Z31
	VPXORQ Z0, Z0, Z0
	VPXORQ Z1, Z1, Z1
	VPXORQ Z2, Z2, Z2
	VPXORQ Z3, Z3, Z3
	VPXORQ Z4, Z4, Z4
	VPXORQ Z5, Z5, Z5
	VPXORQ Z6, Z6, Z6
	VPXORQ Z7, Z7, Z7
	VPXORQ Z8, Z8, Z8
	VPXORQ Z9, Z9, Z9
	SHRQ $4, CX
	JZ   mdone
mloop:
	VMOVUPS (R8), Z11
	VCMPPS $0x1e, Z31, Z11, K1   // m > 0 (ordered)
	KSHIFTRW $8, K1, K2
	VCVTPS2PD 0(SI), Z12         // G 0..7 as float64
	VCVTPS2PD 32(SI), Z13        // G 8..15
	VFMADD231PD Z12, Z12, Z6     // Σ G² before the mask
	VFMADD231PD Z13, Z13, Z7
	VBLENDMPD Z12, Z31, K1, Z12  // masked: 0 where m ≤ 0
	VBLENDMPD Z13, Z31, K2, Z13
	VADDPD Z12, Z0, Z0
	VADDPD Z13, Z1, Z1
	VCVTPS2PD 0(R9), Z14         // x
	VCVTPS2PD 32(R9), Z15
	VFMADD231PD Z14, Z12, Z2     // Σ G·x
	VFMADD231PD Z15, Z13, Z3
	VFMADD231PD Z12, Z12, Z4     // Σ G²
	VFMADD231PD Z13, Z13, Z5
	VMOVUPS (SI), Z10
	VBLENDMPS Z10, Z31, K1, Z10
	VMULPS  Z30, Z10, Z10        // d = G·k in float32
	VMOVUPS Z10, (DI)
	VCVTPS2PD Y10, Z14
	VEXTRACTF64X4 $1, Z10, Y15
	VCVTPS2PD Y15, Z15
	VFMADD231PD Z14, Z14, Z8     // Σ d²
	VFMADD231PD Z15, Z15, Z9
	ADDQ $64, SI
	ADDQ $64, R8
	ADDQ $64, R9
	ADDQ $64, DI
	DECQ CX
	JNZ  mloop
mdone:
	VMOVUPD Z0, 0(BX)
	VMOVUPD Z1, 64(BX)
	VMOVUPD Z2, 128(BX)
	VMOVUPD Z3, 192(BX)
	VMOVUPD Z4, 256(BX)
	VMOVUPD Z5, 320(BX)
	VMOVUPD Z6, 384(BX)
	VMOVUPD Z7, 448(BX)
	VMOVUPD Z8, 512(BX)
	VMOVUPD Z9, 576(BX)
	VZEROUPPER
	RET
