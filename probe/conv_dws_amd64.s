#include "textflag.h"

// Even lane indices for VPERMT2PS: lanes 0, 2, …, 30 of two vectors.
DATA dwsEven<>+0(SB)/4, $0
DATA dwsEven<>+4(SB)/4, $2
DATA dwsEven<>+8(SB)/4, $4
DATA dwsEven<>+12(SB)/4, $6
DATA dwsEven<>+16(SB)/4, $8
DATA dwsEven<>+20(SB)/4, $10
DATA dwsEven<>+24(SB)/4, $12
DATA dwsEven<>+28(SB)/4, $14
DATA dwsEven<>+32(SB)/4, $16
DATA dwsEven<>+36(SB)/4, $18
DATA dwsEven<>+40(SB)/4, $20
DATA dwsEven<>+44(SB)/4, $22
DATA dwsEven<>+48(SB)/4, $24
DATA dwsEven<>+52(SB)/4, $26
DATA dwsEven<>+56(SB)/4, $28
DATA dwsEven<>+60(SB)/4, $30
GLOBL dwsEven<>(SB), RODATA|NOPTR, $64

// ROW1(d, P, acc): acc += Z8 · (the input row whose pointer is at d(R13),
// from column R10, lanes under K1). ROW2: the same at stride 2 (32 values
// under K1|K2, the even ones kept).
#define ROW1(d, P, acc) MOVQ d(R13), P; VMOVUPS.Z (P)(R10*4), K1, Z9; VFMADD231PS Z8, Z9, acc
#define ROW2(d, P, acc) MOVQ d(R13), P; VMOVUPS.Z (P)(R10*4), K1, Z9; VMOVUPS.Z 64(P)(R10*4), K2, Z10; VPERMT2PS Z10, Z29, Z9; VFMADD231PS Z8, Z9, acc

// func dwSmallAVX512(y, x *float32, a *dwSmallArgs)
//
// dwSmallArgs: w 0, h 8, wd 16, oh 24, ow 32, kh 40, kw 48, pt 56, sh 64,
// sw 72, bias 80, outMask 84, offs 88 (7 × 8), masks 144 (7 × 4), zero 176.
// First a table of input row pointers on the stack, entry t for row
// r = t − pt (the zero row outside the image), for t < ⌈OH/8⌉·8·sh + KH.
// Then eight output rows oh0 … oh0+7 at a time in Z0–Z7 (starting at the
// bias): for each window row kh, row i reads table entry (oh0 + i)·sh + kh;
// for each tap kw the values under masks[kw] from column offs[kw] (stride
// 2: 32 values, the even ones kept by VPERMT2PS), times the broadcast
// weight, added by FMA. Masked loads do not fault on the lanes they leave
// out, which may lie before or after the plane. Rows below OH are computed
// from zero rows and not stored; the others are stored under outMask.
TEXT ·dwSmallAVX512(SB), $1088-24
	MOVQ y+0(FP), DI
	MOVQ x+8(FP), SI
	MOVQ a+16(FP), DX
	VBROADCASTSS 80(DX), Z31     // bias
	VMOVDQU32 dwsEven<>(SB), Z29
	KMOVW 84(DX), K7             // lanes j < OW

	// the row table
	MOVQ 16(DX), R8
	SHLQ $2, R8                  // row pitch in bytes
	MOVQ 24(DX), AX
	ADDQ $7, AX
	ANDQ $-8, AX
	IMULQ 64(DX), AX
	ADDQ 40(DX), AX              // entries
	MOVQ 176(DX), R12            // zero row
	XORQ CX, CX                  // t
	MOVQ CX, BX
	SUBQ 56(DX), BX              // r = t − pt

fill:
	CMPQ CX, AX
	JGE  filled
	MOVQ BX, R10
	IMULQ R8, R10
	ADDQ SI, R10
	CMPQ BX, 8(DX)               // r < H, unsigned (a negative r is large)
	CMOVQCC R12, R10
	MOVQ R10, 0(SP)(CX*8)
	INCQ CX
	INCQ BX
	JMP  fill

filled:
	XORQ R9, R9                  // oh0

group:
	CMPQ R9, 24(DX)
	JGE  done
	VMOVAPS Z31, Z0
	VMOVAPS Z31, Z1
	VMOVAPS Z31, Z2
	VMOVAPS Z31, Z3
	VMOVAPS Z31, Z4
	VMOVAPS Z31, Z5
	VMOVAPS Z31, Z6
	VMOVAPS Z31, Z7
	MOVQ R9, R13
	IMULQ 64(DX), R13
	LEAQ 0(SP)(R13*8), R13       // &table[oh0·sh], advanced by 8 per kh
	MOVQ 0(DX), R11              // weights, in tap order
	XORQ R12, R12                // kh

khrow:
	CMPQ R12, 40(DX)
	JGE  store
	XORQ R15, R15                // kw
	CMPQ 64(DX), $2
	JEQ  sh2
	CMPQ 72(DX), $2
	JEQ  s12
	JMP  s11

sh2:
	CMPQ 72(DX), $2
	JEQ  s22
	JMP  s21

s11:
	MOVQ 88(DX)(R15*8), R10
	KMOVW 144(DX)(R15*4), K1
	VBROADCASTSS (R11), Z8
	ROW1(0, AX, Z0)
	ROW1(8, BX, Z1)
	ROW1(16, AX, Z2)
	ROW1(24, BX, Z3)
	ROW1(32, AX, Z4)
	ROW1(40, BX, Z5)
	ROW1(48, AX, Z6)
	ROW1(56, BX, Z7)
	ADDQ $4, R11
	INCQ R15
	CMPQ R15, 48(DX)
	JLT  s11
	JMP  nextkh
s12:
	MOVQ 88(DX)(R15*8), R10
	KMOVD 144(DX)(R15*4), K1
	KSHIFTRD $16, K1, K2
	VBROADCASTSS (R11), Z8
	ROW2(0, AX, Z0)
	ROW2(8, BX, Z1)
	ROW2(16, AX, Z2)
	ROW2(24, BX, Z3)
	ROW2(32, AX, Z4)
	ROW2(40, BX, Z5)
	ROW2(48, AX, Z6)
	ROW2(56, BX, Z7)
	ADDQ $4, R11
	INCQ R15
	CMPQ R15, 48(DX)
	JLT  s12
	JMP  nextkh
s21:
	MOVQ 88(DX)(R15*8), R10
	KMOVW 144(DX)(R15*4), K1
	VBROADCASTSS (R11), Z8
	ROW1(0, AX, Z0)
	ROW1(16, BX, Z1)
	ROW1(32, AX, Z2)
	ROW1(48, BX, Z3)
	ROW1(64, AX, Z4)
	ROW1(80, BX, Z5)
	ROW1(96, AX, Z6)
	ROW1(112, BX, Z7)
	ADDQ $4, R11
	INCQ R15
	CMPQ R15, 48(DX)
	JLT  s21
	JMP  nextkh
s22:
	MOVQ 88(DX)(R15*8), R10
	KMOVD 144(DX)(R15*4), K1
	KSHIFTRD $16, K1, K2
	VBROADCASTSS (R11), Z8
	ROW2(0, AX, Z0)
	ROW2(16, BX, Z1)
	ROW2(32, AX, Z2)
	ROW2(48, BX, Z3)
	ROW2(64, AX, Z4)
	ROW2(80, BX, Z5)
	ROW2(96, AX, Z6)
	ROW2(112, BX, Z7)
	ADDQ $4, R11
	INCQ R15
	CMPQ R15, 48(DX)
	JLT  s22
	JMP  nextkh
nextkh:
	ADDQ $8, R13
	INCQ R12
	JMP  khrow

store:
	MOVQ 24(DX), CX
	SUBQ R9, CX                  // rows left in the plane
	MOVQ R9, AX
	IMULQ 32(DX), AX
	LEAQ (DI)(AX*4), AX          // &y[oh0·OW]
	MOVQ 32(DX), BX
	SHLQ $2, BX                  // OW in bytes
	VMOVUPS Z0, K7, (AX)
	DECQ CX
	JZ   next
	ADDQ BX, AX
	VMOVUPS Z1, K7, (AX)
	DECQ CX
	JZ   next
	ADDQ BX, AX
	VMOVUPS Z2, K7, (AX)
	DECQ CX
	JZ   next
	ADDQ BX, AX
	VMOVUPS Z3, K7, (AX)
	DECQ CX
	JZ   next
	ADDQ BX, AX
	VMOVUPS Z4, K7, (AX)
	DECQ CX
	JZ   next
	ADDQ BX, AX
	VMOVUPS Z5, K7, (AX)
	DECQ CX
	JZ   next
	ADDQ BX, AX
	VMOVUPS Z6, K7, (AX)
	DECQ CX
	JZ   next
	ADDQ BX, AX
	VMOVUPS Z7, K7, (AX)

next:
	ADDQ $8, R9
	JMP  group

done:
	VZEROUPPER
	RET
