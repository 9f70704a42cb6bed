#include "textflag.h"

// func expZeroAVX512(x []float32) int
// The number of values whose exponent bits are all zero, 64 values a round
// (len(x) a multiple of 64).
TEXT ·expZeroAVX512(SB), NOSPLIT, $0-32
	MOVQ x_base+0(FP), SI
	MOVQ x_len+8(FP), CX
	SHRQ $6, CX
	XORQ AX, AX
	MOVL $0x7f800000, DX
	VPBROADCASTD DX, Z0
	TESTQ CX, CX
	JZ   done

loop:
	VPTESTMD 0(SI), Z0, K1       // exponent bits not all zero
	VPTESTMD 64(SI), Z0, K2
	VPTESTMD 128(SI), Z0, K3
	VPTESTMD 192(SI), Z0, K4
	KMOVW K1, R8
	KMOVW K2, R9
	KMOVW K3, R10
	KMOVW K4, R11
	POPCNTL R8, R8
	POPCNTL R9, R9
	POPCNTL R10, R10
	POPCNTL R11, R11
	ADDQ R8, AX
	ADDQ R9, AX
	ADDQ R10, AX
	ADDQ R11, AX
	ADDQ $256, SI
	DECQ CX
	JNZ  loop

done:
	VZEROUPPER
	MOVQ AX, ret+24(FP)
	RET
