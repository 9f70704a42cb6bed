#include "textflag.h"

// Element-wise float32 arithmetic, 16 values per instruction: the same
// IEEE single-precision operation per element as the Go loops of
// elem_f32.go. n is a multiple of 16; the caller does the rest.

// VV(INSN): dst[i] = x[i] op y[i] for func(dst, x, y *float32, n int),
// op the instruction INSN (Go operand order: INSN y, x, result).
#define VV(INSN) \
	MOVQ dst+0(FP), DI; \
	MOVQ x+8(FP), SI; \
	MOVQ y+16(FP), DX; \
	MOVQ n+24(FP), CX; \
	SHRQ $4, CX; \
	JZ   done; \
loop: \
	VMOVUPS (SI), Z0; \
	VMOVUPS (DX), Z1; \
	INSN Z1, Z0, Z2; \
	VMOVUPS Z2, (DI); \
	ADDQ $64, SI; \
	ADDQ $64, DX; \
	ADDQ $64, DI; \
	DECQ CX; \
	JNZ  loop; \
	VZEROUPPER; \
done: \
	RET

// VS(INSN, A, B): for func(dst, x *float32, s float32, n int), with x[i]
// in Z0 and s in Z1, dst[i] = INSN A, B (A, B = Z1, Z0: x op s; Z0, Z1:
// s op x).
#define VS(INSN, A, B) \
	MOVQ dst+0(FP), DI; \
	MOVQ x+8(FP), SI; \
	VBROADCASTSS s+16(FP), Z1; \
	MOVQ n+24(FP), CX; \
	SHRQ $4, CX; \
	JZ   done; \
loop: \
	VMOVUPS (SI), Z0; \
	INSN A, B, Z2; \
	VMOVUPS Z2, (DI); \
	ADDQ $64, SI; \
	ADDQ $64, DI; \
	DECQ CX; \
	JNZ  loop; \
	VZEROUPPER; \
done: \
	RET

// func vvAddAVX512(dst, x, y *float32, n int)
TEXT ·vvAddAVX512(SB), NOSPLIT, $0-32
	VV(VADDPS)

// func vvSubAVX512(dst, x, y *float32, n int)
TEXT ·vvSubAVX512(SB), NOSPLIT, $0-32
	VV(VSUBPS)

// func vvMulAVX512(dst, x, y *float32, n int)
TEXT ·vvMulAVX512(SB), NOSPLIT, $0-32
	VV(VMULPS)

// func vvDivAVX512(dst, x, y *float32, n int)
TEXT ·vvDivAVX512(SB), NOSPLIT, $0-32
	VV(VDIVPS)

// func vsAddAVX512(dst, x *float32, s float32, n int): x op s
TEXT ·vsAddAVX512(SB), NOSPLIT, $0-32
	VS(VADDPS, Z1, Z0)

// func vsSubAVX512(dst, x *float32, s float32, n int): x op s
TEXT ·vsSubAVX512(SB), NOSPLIT, $0-32
	VS(VSUBPS, Z1, Z0)

// func vsSubSwapAVX512(dst, x *float32, s float32, n int): s op x
TEXT ·vsSubSwapAVX512(SB), NOSPLIT, $0-32
	VS(VSUBPS, Z0, Z1)

// func vsMulAVX512(dst, x *float32, s float32, n int): x op s
TEXT ·vsMulAVX512(SB), NOSPLIT, $0-32
	VS(VMULPS, Z1, Z0)

// func vsDivAVX512(dst, x *float32, s float32, n int): x op s
TEXT ·vsDivAVX512(SB), NOSPLIT, $0-32
	VS(VDIVPS, Z1, Z0)

// func vsDivSwapAVX512(dst, x *float32, s float32, n int): s op x
TEXT ·vsDivSwapAVX512(SB), NOSPLIT, $0-32
	VS(VDIVPS, Z0, Z1)
