#include "textflag.h"

// func dwTapsAVX512(dst *float32, n int, srcs *unsafe.Pointer, w *float32, taps int, bias float32)
//
// dst[j] = bias + Σ_{i<taps} w[i]·srcs[i][j] for j < n, the taps added in
// order with fused multiply-adds: 64 outputs at a time in four accumulators
// (independent chains), then 16, then the last < 16 under a lane mask
// (masked loads read nothing past the end).
TEXT ·dwTapsAVX512(SB), NOSPLIT, $0-44
	MOVQ dst+0(FP), DI
	MOVQ n+8(FP), CX
	MOVQ srcs+16(FP), SI
	MOVQ w+24(FP), DX
	MOVQ taps+32(FP), R8
	VBROADCASTSS bias+40(FP), Z31
	XORQ AX, AX // outputs done

loop64:
	CMPQ CX, $64
	JLT  loop16
	VMOVAPS Z31, Z0
	VMOVAPS Z31, Z1
	VMOVAPS Z31, Z2
	VMOVAPS Z31, Z3
	XORQ R9, R9

tap64:
	MOVQ (SI)(R9*8), R10
	VBROADCASTSS (DX)(R9*4), Z4
	VFMADD231PS (R10)(AX*4), Z4, Z0
	VFMADD231PS 64(R10)(AX*4), Z4, Z1
	VFMADD231PS 128(R10)(AX*4), Z4, Z2
	VFMADD231PS 192(R10)(AX*4), Z4, Z3
	INCQ R9
	CMPQ R9, R8
	JLT  tap64
	VMOVUPS Z0, (DI)(AX*4)
	VMOVUPS Z1, 64(DI)(AX*4)
	VMOVUPS Z2, 128(DI)(AX*4)
	VMOVUPS Z3, 192(DI)(AX*4)
	ADDQ $64, AX
	SUBQ $64, CX
	JMP  loop64

loop16:
	CMPQ CX, $16
	JLT  tail
	VMOVAPS Z31, Z0
	XORQ R9, R9

tap16:
	MOVQ (SI)(R9*8), R10
	VBROADCASTSS (DX)(R9*4), Z4
	VFMADD231PS (R10)(AX*4), Z4, Z0
	INCQ R9
	CMPQ R9, R8
	JLT  tap16
	VMOVUPS Z0, (DI)(AX*4)
	ADDQ $16, AX
	SUBQ $16, CX
	JMP  loop16

tail:
	TESTQ CX, CX
	JZ    done
	MOVQ $1, R11
	SHLQ CX, R11
	DECQ R11
	KMOVW R11, K1
	VMOVAPS Z31, Z0
	XORQ R9, R9

tapTail:
	MOVQ (SI)(R9*8), R10
	VBROADCASTSS (DX)(R9*4), Z4
	VMOVUPS.Z (R10)(AX*4), K1, Z5
	VFMADD231PS Z5, Z4, Z0
	INCQ R9
	CMPQ R9, R8
	JLT  tapTail
	VMOVUPS Z0, K1, (DI)(AX*4)

done:
	VZEROUPPER
	RET
