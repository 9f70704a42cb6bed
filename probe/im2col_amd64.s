#include "textflag.h"

// func packRunAVX512(dst, src *float32, offs *int, rows int, m1, m2, m3 uint16)
//
// For p in [0, rows): the masked 48 floats at src + offs[p] go to
// dst + 48·p, lane i of 16-float vector v copied when bit i of mask m(v+1)
// is set (the others neither read nor written).
TEXT ·packRunAVX512(SB), NOSPLIT, $0-38
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ offs+16(FP), R8
	MOVQ rows+24(FP), CX
	KMOVW m1+32(FP), K1
	KMOVW m2+34(FP), K2
	KMOVW m3+36(FP), K3
	TESTQ CX, CX
	JZ   done

loop:
	MOVQ (R8), AX
	LEAQ (SI)(AX*4), AX
	VMOVUPS.Z (AX), K1, Z0
	VMOVUPS.Z 64(AX), K2, Z1
	VMOVUPS.Z 128(AX), K3, Z2
	VMOVUPS Z0, K1, (DI)
	VMOVUPS Z1, K2, 64(DI)
	VMOVUPS Z2, K3, 128(DI)
	ADDQ $8, R8
	ADDQ $192, DI
	DECQ CX
	JNZ  loop
	VZEROUPPER

done:
	RET
