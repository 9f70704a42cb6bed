#include "textflag.h"

// func dwRunsAVX512(gp, x, dx *float32, runs *run, nruns int, wt float32, lanes *[16]float32)
//
// One tap of a depthwise convolution's rule over one plane (depthwise32):
// for every run of unit step and off ≥ 0 (others are left to the caller),
// lanes += G[p+i]·x[off+i] in 16 float32 lanes, and, when dx is not nil,
// dx[off+i] += wt·G[p+i] (a fused multiply-add in float32). A run's last
// 1..15 elements go through a load mask (zeroed lanes: nothing beyond the
// run is read into a sum or written). run is {p, off, n, step int}.
TEXT ·dwRunsAVX512(SB), NOSPLIT, $0-56
	MOVQ gp+0(FP), SI
	MOVQ x+8(FP), R9
	MOVQ dx+16(FP), DI
	MOVQ runs+24(FP), R10
	MOVQ nruns+32(FP), R11
	VBROADCASTSS wt+40(FP), Z30
	MOVQ lanes+48(FP), BX
	VMOVUPS (BX), Z0
	TESTQ R11, R11
	JZ    done
runloop:
	MOVQ 8(R10), AX              // off
	TESTQ AX, AX
	JS    next                   // padding
	CMPQ 24(R10), $1             // step
	JNE   next
	MOVQ 0(R10), DX              // p
	MOVQ 16(R10), CX             // n
	LEAQ (SI)(DX*4), R12         // G + p
	LEAQ (R9)(AX*4), R13         // x + off
	LEAQ (DI)(AX*4), R14         // dx + off (used only when dx is not nil)
vloop:
	CMPQ CX, $16
	JLT  tail
	VMOVUPS (R12), Z1
	VFMADD231PS (R13), Z1, Z0    // lanes += G·x
	TESTQ DI, DI
	JZ    nodx
	VMOVUPS (R14), Z2
	VFMADD231PS Z30, Z1, Z2      // dx += wt·G
	VMOVUPS Z2, (R14)
nodx:
	ADDQ $64, R12
	ADDQ $64, R13
	ADDQ $64, R14
	SUBQ $16, CX
	JMP  vloop
tail:
	TESTQ CX, CX
	JZ    next
	MOVL $1, AX
	SHLL CX, AX
	DECL AX
	KMOVW AX, K1
	VMOVUPS.Z (R12), K1, Z1
	VMOVUPS.Z (R13), K1, Z3
	VFMADD231PS Z3, Z1, Z0
	TESTQ DI, DI
	JZ    next
	VMOVUPS.Z (R14), K1, Z2
	VFMADD231PS Z30, Z1, Z2
	VMOVUPS Z2, K1, (R14)
next:
	ADDQ $32, R10
	DECQ R11
	JNZ  runloop
done:
	VMOVUPS Z0, (BX)
	VZEROUPPER
	RET
