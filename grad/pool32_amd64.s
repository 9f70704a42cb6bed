#include "textflag.h"

// Index tables for VPERMT2PS over two 16-lane tables (0..15 the first,
// 16..31 the second): even and odd lanes of a 32-value row, and the
// interleaving of two 16-lane vectors (low and high halves).
DATA poolIdx<>+0(SB)/4, $0
DATA poolIdx<>+4(SB)/4, $2
DATA poolIdx<>+8(SB)/4, $4
DATA poolIdx<>+12(SB)/4, $6
DATA poolIdx<>+16(SB)/4, $8
DATA poolIdx<>+20(SB)/4, $10
DATA poolIdx<>+24(SB)/4, $12
DATA poolIdx<>+28(SB)/4, $14
DATA poolIdx<>+32(SB)/4, $16
DATA poolIdx<>+36(SB)/4, $18
DATA poolIdx<>+40(SB)/4, $20
DATA poolIdx<>+44(SB)/4, $22
DATA poolIdx<>+48(SB)/4, $24
DATA poolIdx<>+52(SB)/4, $26
DATA poolIdx<>+56(SB)/4, $28
DATA poolIdx<>+60(SB)/4, $30
DATA poolIdx<>+64(SB)/4, $1
DATA poolIdx<>+68(SB)/4, $3
DATA poolIdx<>+72(SB)/4, $5
DATA poolIdx<>+76(SB)/4, $7
DATA poolIdx<>+80(SB)/4, $9
DATA poolIdx<>+84(SB)/4, $11
DATA poolIdx<>+88(SB)/4, $13
DATA poolIdx<>+92(SB)/4, $15
DATA poolIdx<>+96(SB)/4, $17
DATA poolIdx<>+100(SB)/4, $19
DATA poolIdx<>+104(SB)/4, $21
DATA poolIdx<>+108(SB)/4, $23
DATA poolIdx<>+112(SB)/4, $25
DATA poolIdx<>+116(SB)/4, $27
DATA poolIdx<>+120(SB)/4, $29
DATA poolIdx<>+124(SB)/4, $31
DATA poolIdx<>+128(SB)/4, $0
DATA poolIdx<>+132(SB)/4, $16
DATA poolIdx<>+136(SB)/4, $1
DATA poolIdx<>+140(SB)/4, $17
DATA poolIdx<>+144(SB)/4, $2
DATA poolIdx<>+148(SB)/4, $18
DATA poolIdx<>+152(SB)/4, $3
DATA poolIdx<>+156(SB)/4, $19
DATA poolIdx<>+160(SB)/4, $4
DATA poolIdx<>+164(SB)/4, $20
DATA poolIdx<>+168(SB)/4, $5
DATA poolIdx<>+172(SB)/4, $21
DATA poolIdx<>+176(SB)/4, $6
DATA poolIdx<>+180(SB)/4, $22
DATA poolIdx<>+184(SB)/4, $7
DATA poolIdx<>+188(SB)/4, $23
DATA poolIdx<>+192(SB)/4, $8
DATA poolIdx<>+196(SB)/4, $24
DATA poolIdx<>+200(SB)/4, $9
DATA poolIdx<>+204(SB)/4, $25
DATA poolIdx<>+208(SB)/4, $10
DATA poolIdx<>+212(SB)/4, $26
DATA poolIdx<>+216(SB)/4, $11
DATA poolIdx<>+220(SB)/4, $27
DATA poolIdx<>+224(SB)/4, $12
DATA poolIdx<>+228(SB)/4, $28
DATA poolIdx<>+232(SB)/4, $13
DATA poolIdx<>+236(SB)/4, $29
DATA poolIdx<>+240(SB)/4, $14
DATA poolIdx<>+244(SB)/4, $30
DATA poolIdx<>+248(SB)/4, $15
DATA poolIdx<>+252(SB)/4, $31
GLOBL poolIdx<>(SB), RODATA, $256

// func maxPool2x2AVX512(x0, x1, y, gp, d0, d1 *float32, n int) bool
//
// One row of n 2×2 windows of maxPool2x2Planes, 16 windows per step:
// input rows x0, x1 (2n values each), the recorded maxima y and their
// gradients gp (n each); writes d0, d1 (2n values each): the gradient at
// the first of the taps (x0[2i], x0[2i+1], x1[2i], x1[2i+1]) equal to y[i]
// (ordered compare: −0 = +0), 0 at the others. The last 1..15 windows go
// through load and store masks. It returns false, having written part of
// the row, when some window has no tap equal to its maximum (NaN): the
// caller redoes the row.
TEXT ·maxPool2x2AVX512(SB), NOSPLIT, $0-57
	MOVQ x0+0(FP), SI
	MOVQ x1+8(FP), R8
	MOVQ y+16(FP), R9
	MOVQ gp+24(FP), R10
	MOVQ d0+32(FP), DI
	MOVQ d1+40(FP), R11
	MOVQ n+48(FP), R12
	VMOVUPS poolIdx<>+0(SB), Z20   // even lanes
	VMOVUPS poolIdx<>+64(SB), Z21  // odd lanes
	VMOVUPS poolIdx<>+128(SB), Z22 // interleave, low half
	VMOVUPS poolIdx<>+192(SB), Z23 // interleave, high half
	VPXORD Z31, Z31, Z31
loop:
	TESTQ R12, R12
	JLE   ok
	MOVQ  R12, CX
	CMPQ  CX, $16
	JLE   masks
	MOVQ  $16, CX
masks:
	MOVQ $1, AX                  // window mask: (1 << c) − 1
	SHLQ CX, AX
	DECQ AX
	MOVQ AX, R13
	KMOVW AX, K1
	SHLQ $1, CX                  // row masks: (1 << 2c) − 1, low and high 16 bits
	MOVQ $1, AX
	SHLQ CX, AX
	DECQ AX
	SHRQ $1, CX
	KMOVW AX, K6
	SHRQ $16, AX
	KMOVW AX, K7
	VMOVUPS.Z (R9), K1, Z0       // y
	VMOVUPS.Z (R10), K1, Z1      // G
	VMOVUPS.Z (SI), K6, Z2       // row 0, values 0..15
	VMOVUPS.Z 64(SI), K7, Z3     // values 16..31
	VMOVAPS Z2, Z4
	VPERMT2PS Z3, Z20, Z4        // tap 0: even
	VPERMT2PS Z3, Z21, Z2        // tap 1: odd
	VMOVUPS.Z (R8), K6, Z5       // row 1
	VMOVUPS.Z 64(R8), K7, Z6
	VMOVAPS Z5, Z7
	VPERMT2PS Z6, Z20, Z7        // tap 2
	VPERMT2PS Z6, Z21, Z5        // tap 3
	VCMPPS $0, Z0, Z4, K2        // tap 0 = y
	VCMPPS $0, Z0, Z2, K3        // tap 1 = y
	VCMPPS $0, Z0, Z7, K4        // tap 2 = y
	VCMPPS $0, Z0, Z5, K5        // tap 3 = y
	KORW K2, K3, K0
	KORW K4, K0, K0
	KORW K5, K0, K0
	KMOVW K0, AX
	ANDQ R13, AX
	CMPQ AX, R13
	JNE  bad                     // a window without its maximum
	// the gradient at the first equal tap: later taps first, earlier
	// ones overriding (merge masks)
	VMOVAPS Z1, Z8               // tap 3 by default
	VMOVAPS Z31, Z9
	VMOVAPS Z31, Z10
	VMOVAPS Z31, Z11
	VMOVAPS Z1, K4, Z9           // tap 2
	VMOVAPS Z31, K4, Z8
	VMOVAPS Z1, K3, Z10          // tap 1
	VMOVAPS Z31, K3, Z9
	VMOVAPS Z31, K3, Z8
	VMOVAPS Z1, K2, Z11          // tap 0
	VMOVAPS Z31, K2, Z10
	VMOVAPS Z31, K2, Z9
	VMOVAPS Z31, K2, Z8
	// rows back in order: row 0 = taps 0, 1 interleaved, row 1 = taps 2, 3
	VMOVAPS Z11, Z12
	VPERMT2PS Z10, Z22, Z12
	VPERMT2PS Z10, Z23, Z11
	VMOVUPS Z12, K6, (DI)
	VMOVUPS Z11, K7, 64(DI)
	VMOVAPS Z9, Z13
	VPERMT2PS Z8, Z22, Z13
	VPERMT2PS Z8, Z23, Z9
	VMOVUPS Z13, K6, (R11)
	VMOVUPS Z9, K7, 64(R11)
	ADDQ $128, SI
	ADDQ $128, R8
	ADDQ $64, R9
	ADDQ $64, R10
	ADDQ $128, DI
	ADDQ $128, R11
	SUBQ $16, R12
	JMP  loop
ok:
	MOVB $1, ret+56(FP)
	VZEROUPPER
	RET
bad:
	MOVB $0, ret+56(FP)
	VZEROUPPER
	RET
