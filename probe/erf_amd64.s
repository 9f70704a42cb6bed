#include "textflag.h"

// func erfAVX512(dst, src *float32, n int, table *float64) int
//
// erf of float32 values, eight at a time in float64 lanes, by the local
// Taylor series of erf_f32.go around the centres c = k/4, k = ⌊4|x|⌋ < 16:
// h = |x| − k/4 ∈ [0, 1/4), s = c20, s = fma(s, h, cₙ) for n = 19…0, the
// sign of x, rounded to float32. table holds the coefficients
// coefficient-major (erfVecTable: 21 × 16 float64); each coefficient is
// looked up with one two-register permute (the first 8 centres held in
// Z11…Z31, the other 8 read from memory). It stops before the first group
// of 8 holding a value with |x| ≥ 4 or NaN and returns how many values it
// wrote (a multiple of 8, at most n).
TEXT ·erfAVX512(SB), NOSPLIT, $0-40
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	MOVQ table+24(FP), DX
	XORQ AX, AX                  // values done
	SHRQ $3, CX
	JZ   done
	MOVQ $0x7fffffffffffffff, R8
	VPBROADCASTQ R8, Z6         // |x| mask
	MOVQ $0x4010000000000000, R8 // 4.0: the table's end and the centres per unit
	VPBROADCASTQ R8, Z7
	MOVQ $0x3fd0000000000000, R8 // 1/4
	VPBROADCASTQ R8, Z8
	VMOVUPD 0(DX), Z11       // c0, centres 0…7
	VMOVUPD 128(DX), Z12       // c1, centres 0…7
	VMOVUPD 256(DX), Z13       // c2, centres 0…7
	VMOVUPD 384(DX), Z14       // c3, centres 0…7
	VMOVUPD 512(DX), Z15       // c4, centres 0…7
	VMOVUPD 640(DX), Z16       // c5, centres 0…7
	VMOVUPD 768(DX), Z17       // c6, centres 0…7
	VMOVUPD 896(DX), Z18       // c7, centres 0…7
	VMOVUPD 1024(DX), Z19       // c8, centres 0…7
	VMOVUPD 1152(DX), Z20       // c9, centres 0…7
	VMOVUPD 1280(DX), Z21       // c10, centres 0…7
	VMOVUPD 1408(DX), Z22       // c11, centres 0…7
	VMOVUPD 1536(DX), Z23       // c12, centres 0…7
	VMOVUPD 1664(DX), Z24       // c13, centres 0…7
	VMOVUPD 1792(DX), Z25       // c14, centres 0…7
	VMOVUPD 1920(DX), Z26       // c15, centres 0…7
	VMOVUPD 2048(DX), Z27       // c16, centres 0…7
	VMOVUPD 2176(DX), Z28       // c17, centres 0…7
	VMOVUPD 2304(DX), Z29       // c18, centres 0…7
	VMOVUPD 2432(DX), Z30       // c19, centres 0…7
	VMOVUPD 2560(DX), Z31       // c20, centres 0…7

loop:
	VCVTPS2PD (SI), Z0           // x
	VANDPD Z6, Z0, Z1            // a = |x|
	VCMPPD $0x11, Z7, Z1, K1     // a < 4 (ordered: NaN false)
	KORTESTB K1, K1
	JNC  done                    // some lane off the table: stop here
	VMULPD Z7, Z1, Z5            // 4a
	VCVTTPD2QQ Z5, Z3            // k = ⌊4a⌋
	VCVTQQ2PD Z3, Z5
	VMULPD Z8, Z5, Z5            // k/4
	VSUBPD Z5, Z1, Z2            // h (exact)
	VMOVDQA64 Z3, Z4
	VPERMI2PD 2624(DX), Z31, Z4 // s = c20
	VMOVDQA64 Z3, Z5
	VPERMI2PD 2496(DX), Z30, Z5 // c19
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 2368(DX), Z29, Z5 // c18
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 2240(DX), Z28, Z5 // c17
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 2112(DX), Z27, Z5 // c16
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 1984(DX), Z26, Z5 // c15
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 1856(DX), Z25, Z5 // c14
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 1728(DX), Z24, Z5 // c13
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 1600(DX), Z23, Z5 // c12
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 1472(DX), Z22, Z5 // c11
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 1344(DX), Z21, Z5 // c10
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 1216(DX), Z20, Z5 // c9
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 1088(DX), Z19, Z5 // c8
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 960(DX), Z18, Z5 // c7
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 832(DX), Z17, Z5 // c6
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 704(DX), Z16, Z5 // c5
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 576(DX), Z15, Z5 // c4
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 448(DX), Z14, Z5 // c3
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 320(DX), Z13, Z5 // c2
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 192(DX), Z12, Z5 // c1
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VMOVDQA64 Z3, Z5
	VPERMI2PD 64(DX), Z11, Z5 // c0
	VFMADD213PD Z5, Z2, Z4      // s = s·h + cₙ
	VPTERNLOGQ $0xe2, Z0, Z6, Z4 // magnitude bits from s, the sign bit from x
	VCVTPD2PS Z4, Y4
	VMOVUPS Y4, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	ADDQ $8, AX
	DECQ CX
	JNZ  loop

done:
	VZEROUPPER
	MOVQ AX, ret+32(FP)
	RET
