#include "textflag.h"

// func erfAVX512(dst, src *float32, n int, table *float64) int
//
// erf of float32 values, eight at a time in float64 lanes, by the local
// Taylor series of erf_f32.go around the nearest centre c = k/4,
// k = round(4|x|) < 16: h = |x| − k/4 ∈ [−1/8, 1/8], the series to h¹⁴
// evaluated as two independent Horner chains in h², E = c0 + c2·h² + … +
// c14·h¹² and O = c1 + c3·h² + … + c13·h¹², s = E + h·O, then the sign of
// x, rounded to float32. table holds the coefficients coefficient-major
// (erfVecTable: 15 × 16 float64); each coefficient is looked up with one
// two-register permute (the first 8 centres held in Z11…Z25, the other 8
// read from memory). It stops before the first group of 8 holding a value
// with |x| ≥ 3.875 (the last centre's half-width short of 4) or NaN and
// returns how many values it wrote (a multiple of 8, at most n).
TEXT ·erfAVX512(SB), NOSPLIT, $0-40
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	MOVQ table+24(FP), DX
	XORQ AX, AX                  // values done
	SHRQ $3, CX
	JZ   done
	MOVQ $0x7fffffffffffffff, R8
	VPBROADCASTQ R8, Z6          // |x| mask
	MOVQ $0x4010000000000000, R8 // 4.0: centres per unit
	VPBROADCASTQ R8, Z7
	MOVQ $0x3fd0000000000000, R8 // 1/4
	VPBROADCASTQ R8, Z8
	MOVQ $0x400f000000000000, R8 // 3.875: the table's end
	VPBROADCASTQ R8, Z9
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

loop:
	VCVTPS2PD (SI), Z0           // x
	VANDPD Z6, Z0, Z1            // a = |x|
	VCMPPD $0x11, Z9, Z1, K1     // a < 3.875 (ordered: NaN false)
	KORTESTB K1, K1
	JNC  done                    // some lane off the table: stop here
	VMULPD Z7, Z1, Z5            // 4a
	VRNDSCALEPD $8, Z5, Z5       // round(4a), nearest
	VCVTPD2QQ Z5, Z3             // k
	VMULPD Z8, Z5, Z5            // k/4
	VSUBPD Z5, Z1, Z2            // h (exact)
	VMULPD Z2, Z2, Z10           // h²
	VMOVDQA64 Z3, Z4
	VPERMI2PD 1856(DX), Z25, Z4 // c14
	VMOVDQA64 Z3, Z26
	VPERMI2PD 1728(DX), Z24, Z26 // c13
	VMOVDQA64 Z3, Z5
	VPERMI2PD 1600(DX), Z23, Z5 // c12
	VFMADD213PD Z5, Z10, Z4     // E = E·h² + c12
	VMOVDQA64 Z3, Z27
	VPERMI2PD 1472(DX), Z22, Z27 // c11
	VFMADD213PD Z27, Z10, Z26   // O = O·h² + c11
	VMOVDQA64 Z3, Z5
	VPERMI2PD 1344(DX), Z21, Z5 // c10
	VFMADD213PD Z5, Z10, Z4     // E = E·h² + c10
	VMOVDQA64 Z3, Z27
	VPERMI2PD 1216(DX), Z20, Z27 // c9
	VFMADD213PD Z27, Z10, Z26   // O = O·h² + c9
	VMOVDQA64 Z3, Z5
	VPERMI2PD 1088(DX), Z19, Z5 // c8
	VFMADD213PD Z5, Z10, Z4     // E = E·h² + c8
	VMOVDQA64 Z3, Z27
	VPERMI2PD 960(DX), Z18, Z27 // c7
	VFMADD213PD Z27, Z10, Z26   // O = O·h² + c7
	VMOVDQA64 Z3, Z5
	VPERMI2PD 832(DX), Z17, Z5 // c6
	VFMADD213PD Z5, Z10, Z4     // E = E·h² + c6
	VMOVDQA64 Z3, Z27
	VPERMI2PD 704(DX), Z16, Z27 // c5
	VFMADD213PD Z27, Z10, Z26   // O = O·h² + c5
	VMOVDQA64 Z3, Z5
	VPERMI2PD 576(DX), Z15, Z5 // c4
	VFMADD213PD Z5, Z10, Z4     // E = E·h² + c4
	VMOVDQA64 Z3, Z27
	VPERMI2PD 448(DX), Z14, Z27 // c3
	VFMADD213PD Z27, Z10, Z26   // O = O·h² + c3
	VMOVDQA64 Z3, Z5
	VPERMI2PD 320(DX), Z13, Z5 // c2
	VFMADD213PD Z5, Z10, Z4     // E = E·h² + c2
	VMOVDQA64 Z3, Z27
	VPERMI2PD 192(DX), Z12, Z27 // c1
	VFMADD213PD Z27, Z10, Z26   // O = O·h² + c1
	VMOVDQA64 Z3, Z5
	VPERMI2PD 64(DX), Z11, Z5 // c0
	VFMADD213PD Z5, Z10, Z4     // E = E·h² + c0
	VFMADD231PD Z26, Z2, Z4      // s = E + h·O
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
