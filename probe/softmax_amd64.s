#include "textflag.h"

// func softmaxExpAVX512(y, x *float32, n int, mx float32, c *[11]float64, table *[32]float64) float64
//
// For i < n (a multiple of 8): e = expNonPos(float64(x[i] − mx)) with
// expNonPos's operations in its order (exp_f32.go), y[i] = float32(e); it
// returns Σe, summed in 8 float64 lanes that are then added pairwise.
// c holds expNonPos's constants: 32/ln2, 0.5, the high and low parts of
// ln2/32, the smallest argument, 1/720, 1/120, 1/24, 1/6, 1/2 and 1.
TEXT ·softmaxExpAVX512(SB), NOSPLIT, $0-56
	MOVQ y+0(FP), DI
	MOVQ x+8(FP), SI
	MOVQ n+16(FP), CX
	VBROADCASTSS mx+24(FP), Y31
	MOVQ c+32(FP), DX
	MOVQ table+40(FP), BX
	VBROADCASTSD 0(DX), Z30      // 32/ln2
	VBROADCASTSD 8(DX), Z29      // 0.5
	VBROADCASTSD 16(DX), Z28     // ln2/32, high part
	VBROADCASTSD 24(DX), Z27     // ln2/32, low part
	VBROADCASTSD 32(DX), Z26     // −708
	VBROADCASTSD 40(DX), Z25     // 1/720
	VBROADCASTSD 48(DX), Z24     // 1/120
	VBROADCASTSD 56(DX), Z23     // 1/24
	VBROADCASTSD 64(DX), Z22     // 1/6
	VBROADCASTSD 72(DX), Z21     // 1/2
	VBROADCASTSD 80(DX), Z20     // 1
	VMOVUPD 0(BX), Z16           // 2^(j/32), j = 0…7
	VMOVUPD 64(BX), Z17          // j = 8…15
	VMOVUPD 128(BX), Z18         // j = 16…23
	VMOVUPD 192(BX), Z19         // j = 24…31
	MOVQ $16, AX
	VPBROADCASTQ AX, Z15
	MOVQ $1023, AX
	VPBROADCASTQ AX, Z14
	VPXORQ Z13, Z13, Z13         // Σe lanes
	SHRQ $3, CX
	JZ   sum

loop:
	VMOVUPS (SI), Y0
	VSUBPS Y31, Y0, Y0           // x − mx in float32
	VCVTPS2PD Y0, Z0             // as float64
	VCMPPD $0x1d, Z26, Z0, K1    // x ≥ −708 (ordered)
	VMULPD Z30, Z0, Z1
	VSUBPD Z29, Z1, Z1
	VCVTTPD2QQ Z1, Z2            // k = int(x·32/ln2 − 0.5)
	VCVTQQ2PD Z2, Z3             // kf
	VMULPD Z28, Z3, Z4
	VSUBPD Z4, Z0, Z4            // x − kf·hi
	VMULPD Z27, Z3, Z5
	VSUBPD Z5, Z4, Z4            // r = (x − kf·hi) − kf·lo
	VMULPD Z25, Z4, Z6           // r·(1/720)
	VADDPD Z24, Z6, Z6           // 1/120 + …
	VMULPD Z6, Z4, Z6
	VADDPD Z23, Z6, Z6           // 1/24 + …
	VMULPD Z6, Z4, Z6
	VADDPD Z22, Z6, Z6           // 1/6 + …
	VMULPD Z6, Z4, Z6
	VADDPD Z21, Z6, Z6           // 1/2 + …
	VMULPD Z6, Z4, Z6
	VADDPD Z20, Z6, Z6           // 1 + …
	VMULPD Z6, Z4, Z6
	VADDPD Z20, Z6, Z6           // p = 1 + …
	VMOVDQA64 Z2, Z7
	VPERMI2PD Z17, Z16, Z7       // table[k & 15]
	VMOVDQA64 Z2, Z8
	VPERMI2PD Z19, Z18, Z8       // table[16 + k & 15]
	VPTESTMQ Z15, Z2, K2         // k & 16
	VMOVAPD Z8, K2, Z7           // table[k & 31]
	VPSRAQ $5, Z2, Z9
	VPADDQ Z14, Z9, Z9
	VPSLLQ $52, Z9, Z9           // 2^(k>>5)
	VMULPD Z6, Z7, Z7            // table·p
	VMULPD Z9, Z7, Z7            // ·2^(k>>5)
	VMOVAPD.Z Z7, K1, Z7         // below −708: 0
	VCMPPD $3, Z0, Z0, K3        // NaN stays NaN
	VMOVAPD Z0, K3, Z7
	VADDPD Z7, Z13, Z13
	VCVTPD2PS Z7, Y7
	VMOVUPS Y7, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	DECQ CX
	JNZ  loop

sum:
	VEXTRACTF64X4 $1, Z13, Y0
	VADDPD Y0, Y13, Y0
	VEXTRACTF128 $1, Y0, X1
	VADDPD X1, X0, X0
	VPERMILPD $1, X0, X1
	VADDSD X1, X0, X0
	VZEROUPPER
	MOVSD X0, ret+48(FP)
	RET

// func softmaxMaxAVX512(x *float32, n int, m float32) float32
//
// For n a multiple of 16: the running maximum m ← (x[i] > m) ? x[i] : m over
// x[0:n], in 16 lanes started at m and then folded by the same rule, so
// NaNs in x are skipped as by smLoop's scalar scan (VMAXPS returns its
// second source when the comparison is unordered).
TEXT ·softmaxMaxAVX512(SB), NOSPLIT, $0-28
	MOVQ x+0(FP), SI
	MOVQ n+8(FP), CX
	VBROADCASTSS m+16(FP), Z0
	SHRQ $4, CX
	JZ   fold

mloop:
	VMOVUPS (SI), Z1
	VMAXPS  Z0, Z1, Z0           // Z0 = Z1 > Z0 ? Z1 : Z0
	ADDQ    $64, SI
	DECQ    CX
	JNZ     mloop

fold:
	VEXTRACTF32X8 $1, Z0, Y1
	VMAXPS        Y0, Y1, Y0
	VEXTRACTF128  $1, Y0, X1
	VMAXPS        X0, X1, X0
	VPERMILPS     $0x4E, X0, X1
	VMAXPS        X0, X1, X0
	VPERMILPS     $0xB1, X0, X1
	VMAXPS        X0, X1, X0
	MOVSS         X0, ret+24(FP)
	VZEROUPPER
	RET

// func softmaxScaleAVX512(y *float32, n int, r float64)
//
// For n a multiple of 8: y[i] = float32(float64(y[i])·r), the float64
// product rounded once to float32, as smLoop's scalar loop.
TEXT ·softmaxScaleAVX512(SB), NOSPLIT, $0-24
	MOVQ y+0(FP), DI
	MOVQ n+8(FP), CX
	VBROADCASTSD r+16(FP), Z2
	SHRQ $3, CX
	JZ   sdone

sloop:
	VCVTPS2PD (DI), Z1
	VMULPD    Z2, Z1, Z1
	VCVTPD2PS Z1, Y1
	VMOVUPS   Y1, (DI)
	ADDQ      $32, DI
	DECQ      CX
	JNZ       sloop

sdone:
	VZEROUPPER
	RET
