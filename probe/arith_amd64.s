#include "textflag.h"

// Element-wise float32 arithmetic, 16 values per instruction: the same
// IEEE single-precision operation per element as the Go loops of
// elem_f32.go. n is a multiple of 16; the caller does the rest.

// func vvAddAVX512(dst, x, y *float32, n int)
// dst[i] = x[i] + y[i].
TEXT ·vvAddAVX512(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ x+8(FP), SI
	MOVQ y+16(FP), DX
	MOVQ n+24(FP), CX
	SHRQ $4, CX
	JZ   done
loop:
	VMOVUPS (SI), Z0
	VMOVUPS (DX), Z1
	VADDPS Z1, Z0, Z2
	VMOVUPS Z2, (DI)
	ADDQ $64, SI
	ADDQ $64, DX
	ADDQ $64, DI
	DECQ CX
	JNZ  loop
	VZEROUPPER
done:
	RET

// func vvSubAVX512(dst, x, y *float32, n int)
// dst[i] = x[i] − y[i].
TEXT ·vvSubAVX512(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ x+8(FP), SI
	MOVQ y+16(FP), DX
	MOVQ n+24(FP), CX
	SHRQ $4, CX
	JZ   done
loop:
	VMOVUPS (SI), Z0
	VMOVUPS (DX), Z1
	VSUBPS Z1, Z0, Z2
	VMOVUPS Z2, (DI)
	ADDQ $64, SI
	ADDQ $64, DX
	ADDQ $64, DI
	DECQ CX
	JNZ  loop
	VZEROUPPER
done:
	RET

// func vvMulAVX512(dst, x, y *float32, n int)
// dst[i] = x[i] · y[i].
TEXT ·vvMulAVX512(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ x+8(FP), SI
	MOVQ y+16(FP), DX
	MOVQ n+24(FP), CX
	SHRQ $4, CX
	JZ   done
loop:
	VMOVUPS (SI), Z0
	VMOVUPS (DX), Z1
	VMULPS Z1, Z0, Z2
	VMOVUPS Z2, (DI)
	ADDQ $64, SI
	ADDQ $64, DX
	ADDQ $64, DI
	DECQ CX
	JNZ  loop
	VZEROUPPER
done:
	RET

// func vvDivAVX512(dst, x, y *float32, n int)
// dst[i] = x[i] / y[i].
TEXT ·vvDivAVX512(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ x+8(FP), SI
	MOVQ y+16(FP), DX
	MOVQ n+24(FP), CX
	SHRQ $4, CX
	JZ   done
loop:
	VMOVUPS (SI), Z0
	VMOVUPS (DX), Z1
	VDIVPS Z1, Z0, Z2
	VMOVUPS Z2, (DI)
	ADDQ $64, SI
	ADDQ $64, DX
	ADDQ $64, DI
	DECQ CX
	JNZ  loop
	VZEROUPPER
done:
	RET

// func vsAddAVX512(dst, x *float32, s float32, n int)
// dst[i] = x[i] + s.
TEXT ·vsAddAVX512(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ x+8(FP), SI
	VBROADCASTSS s+16(FP), Z1
	MOVQ n+24(FP), CX
	SHRQ $4, CX
	JZ   done
loop:
	VMOVUPS (SI), Z0
	VADDPS Z1, Z0, Z2
	VMOVUPS Z2, (DI)
	ADDQ $64, SI
	ADDQ $64, DI
	DECQ CX
	JNZ  loop
	VZEROUPPER
done:
	RET

// func vsSubAVX512(dst, x *float32, s float32, n int)
// dst[i] = x[i] − s.
TEXT ·vsSubAVX512(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ x+8(FP), SI
	VBROADCASTSS s+16(FP), Z1
	MOVQ n+24(FP), CX
	SHRQ $4, CX
	JZ   done
loop:
	VMOVUPS (SI), Z0
	VSUBPS Z1, Z0, Z2
	VMOVUPS Z2, (DI)
	ADDQ $64, SI
	ADDQ $64, DI
	DECQ CX
	JNZ  loop
	VZEROUPPER
done:
	RET

// func vsSubSwapAVX512(dst, x *float32, s float32, n int)
// dst[i] = s − x[i].
TEXT ·vsSubSwapAVX512(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ x+8(FP), SI
	VBROADCASTSS s+16(FP), Z1
	MOVQ n+24(FP), CX
	SHRQ $4, CX
	JZ   done
loop:
	VMOVUPS (SI), Z0
	VSUBPS Z0, Z1, Z2
	VMOVUPS Z2, (DI)
	ADDQ $64, SI
	ADDQ $64, DI
	DECQ CX
	JNZ  loop
	VZEROUPPER
done:
	RET

// func vsMulAVX512(dst, x *float32, s float32, n int)
// dst[i] = x[i] · s.
TEXT ·vsMulAVX512(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ x+8(FP), SI
	VBROADCASTSS s+16(FP), Z1
	MOVQ n+24(FP), CX
	SHRQ $4, CX
	JZ   done
loop:
	VMOVUPS (SI), Z0
	VMULPS Z1, Z0, Z2
	VMOVUPS Z2, (DI)
	ADDQ $64, SI
	ADDQ $64, DI
	DECQ CX
	JNZ  loop
	VZEROUPPER
done:
	RET

// func vsDivAVX512(dst, x *float32, s float32, n int)
// dst[i] = x[i] / s.
TEXT ·vsDivAVX512(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ x+8(FP), SI
	VBROADCASTSS s+16(FP), Z1
	MOVQ n+24(FP), CX
	SHRQ $4, CX
	JZ   done
loop:
	VMOVUPS (SI), Z0
	VDIVPS Z1, Z0, Z2
	VMOVUPS Z2, (DI)
	ADDQ $64, SI
	ADDQ $64, DI
	DECQ CX
	JNZ  loop
	VZEROUPPER
done:
	RET

// func vsDivSwapAVX512(dst, x *float32, s float32, n int)
// dst[i] = s / x[i].
TEXT ·vsDivSwapAVX512(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ x+8(FP), SI
	VBROADCASTSS s+16(FP), Z1
	MOVQ n+24(FP), CX
	SHRQ $4, CX
	JZ   done
loop:
	VMOVUPS (SI), Z0
	VDIVPS Z0, Z1, Z2
	VMOVUPS Z2, (DI)
	ADDQ $64, SI
	ADDQ $64, DI
	DECQ CX
	JNZ  loop
	VZEROUPPER
done:
	RET
