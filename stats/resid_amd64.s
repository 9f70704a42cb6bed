#include "textflag.h"

// DRAIN16 increments, for the 16 bins stored at (R15), h0 at the even
// ones and h1 at the odd ones (AX clobbered).
#define DRAIN16 \
	MOVL 0(R15), AX; INCQ (R8)(AX*8); \
	MOVL 4(R15), AX; INCQ (R9)(AX*8); \
	MOVL 8(R15), AX; INCQ (R8)(AX*8); \
	MOVL 12(R15), AX; INCQ (R9)(AX*8); \
	MOVL 16(R15), AX; INCQ (R8)(AX*8); \
	MOVL 20(R15), AX; INCQ (R9)(AX*8); \
	MOVL 24(R15), AX; INCQ (R8)(AX*8); \
	MOVL 28(R15), AX; INCQ (R9)(AX*8); \
	MOVL 32(R15), AX; INCQ (R8)(AX*8); \
	MOVL 36(R15), AX; INCQ (R9)(AX*8); \
	MOVL 40(R15), AX; INCQ (R8)(AX*8); \
	MOVL 44(R15), AX; INCQ (R9)(AX*8); \
	MOVL 48(R15), AX; INCQ (R8)(AX*8); \
	MOVL 52(R15), AX; INCQ (R9)(AX*8); \
	MOVL 56(R15), AX; INCQ (R8)(AX*8); \
	MOVL 60(R15), AX; INCQ (R9)(AX*8)

// func residAVX512(x []float32, D, d0 int, h0, h1 *int64, over *uint32, mx *uint32) int
//
// residGo's loop over groups of 16 values (D a multiple of 16, x starting
// at feature d0, len(x) a multiple of 16): |v|'s bits b, the running
// maximum of b (VPMAXUD, into *mx), over[d] += 1 where b ≥ bits(6), and
// one increment of the |x| histogram at b>>17 per value, the even values of
// a group into h0 and the odd ones into h1. A group's bins are stored in
// one of two frame slots and counted during the next group (read back
// after the store has long completed, not through store forwarding). It
// stops before the first group holding a NaN or ±Inf and returns the
// number of values done.
TEXT ·residAVX512(SB), NOSPLIT, $128-80
	MOVQ x_base+0(FP), SI
	MOVQ x_len+8(FP), CX
	MOVQ D+24(FP), R11
	MOVQ d0+32(FP), R12
	MOVQ h0+40(FP), R8
	MOVQ h1+48(FP), R9
	MOVQ over+56(FP), R10
	MOVQ mx+64(FP), DX
	SHRQ $4, CX
	XORQ BX, BX                  // values done
	XORQ DI, DI                  // 1 when the slot at R15 holds bins not yet counted
	LEAQ 0(SP), R14              // slot for this group's bins
	LEAQ 64(SP), R15             // slot of the group before
	VPBROADCASTD (DX), Z7        // running maximum of |v|'s bits
	MOVL $0x7fffffff, AX
	VPBROADCASTD AX, Z4
	MOVL $0x7f800000, AX
	VPBROADCASTD AX, Z5
	MOVL $0x40c00000, AX         // bits of 6
	VPBROADCASTD AX, Z6
	MOVL $1, AX
	VPBROADCASTD AX, Z3
	TESTQ CX, CX
	JZ   done

loop:
	VPANDD (SI)(BX*4), Z4, Z1    // |v|'s bits
	VPCMPUD $5, Z5, Z1, K1       // NaN/±Inf: bits ≥ 0x7f800000
	KORTESTW K1, K1
	JNZ  done
	VPMAXUD Z1, Z7, Z7
	VPCMPUD $5, Z6, Z1, K2       // |v| ≥ 6
	KORTESTW K2, K2
	JZ   bins
	VMOVDQU32 (R10)(R12*4), Z2
	VPADDD Z3, Z2, K2, Z2
	VMOVDQU32 Z2, (R10)(R12*4)

bins:
	VPSRLD $17, Z1, Z1           // bin: the top 14 bits of |v|
	VMOVDQU32 Z1, (R14)
	TESTQ DI, DI
	JZ   first
	DRAIN16                      // the group before's bins

first:
	MOVQ $1, DI
	XCHGQ R14, R15
	ADDQ $16, BX
	ADDQ $16, R12
	CMPQ R12, R11
	JB   nowrap
	XORQ R12, R12

nowrap:
	DECQ CX
	JNZ  loop

done:
	TESTQ DI, DI                 // the last group's bins
	JZ   maxout
	DRAIN16

maxout:
	// horizontal maximum of Z7
	VEXTRACTI64X4 $1, Z7, Y2
	VPMAXUD Y2, Y7, Y7
	VEXTRACTI128 $1, Y7, X2
	VPMAXUD X2, X7, X7
	VPSHUFD $0x4e, X7, X2
	VPMAXUD X2, X7, X7
	VPSHUFD $0xb1, X7, X2
	VPMAXUD X2, X7, X7
	VMOVD X7, (DX)
	MOVQ BX, ret+72(FP)
	VZEROUPPER
	RET

// func addRows4AVX512(u *float64, n int, r0, r1, r2, r3 *float32, inv *[4]float64)
//
// u[d] = (((u[d] + r0[d]·inv[0]) + r1[d]·inv[1]) + r2[d]·inv[2]) + r3[d]·inv[3]
// for d < n (n a multiple of 8), each product and sum rounded to float64
// in that order (no fused multiply-add): the additions of the loop in
// residAcc.similarity.
TEXT ·addRows4AVX512(SB), NOSPLIT, $0-56
	MOVQ u+0(FP), DI
	MOVQ n+8(FP), CX
	MOVQ r0+16(FP), R8
	MOVQ r1+24(FP), R9
	MOVQ r2+32(FP), R10
	MOVQ r3+40(FP), R11
	MOVQ inv+48(FP), DX
	VBROADCASTSD 0(DX), Z4
	VBROADCASTSD 8(DX), Z5
	VBROADCASTSD 16(DX), Z6
	VBROADCASTSD 24(DX), Z7
	XORQ AX, AX
	SHRQ $3, CX
	JZ   addend

addloop:
	VMOVUPD (DI)(AX*8), Z0
	VCVTPS2PD (R8)(AX*4), Z1
	VMULPD Z4, Z1, Z1
	VADDPD Z1, Z0, Z0
	VCVTPS2PD (R9)(AX*4), Z2
	VMULPD Z5, Z2, Z2
	VADDPD Z2, Z0, Z0
	VCVTPS2PD (R10)(AX*4), Z1
	VMULPD Z6, Z1, Z1
	VADDPD Z1, Z0, Z0
	VCVTPS2PD (R11)(AX*4), Z2
	VMULPD Z7, Z2, Z2
	VADDPD Z2, Z0, Z0
	VMOVUPD Z0, (DI)(AX*8)
	ADDQ $8, AX
	DECQ CX
	JNZ  addloop

addend:
	VZEROUPPER
	RET

// TRANSPOSE8 transposes the 8×8 float32 block in Y0..Y7 (row r in Yr) into
// columns (column k in Yk), Y8..Y15 clobbered.
#define TRANSPOSE8 \
	VUNPCKLPS Y1, Y0, Y8; \
	VUNPCKHPS Y1, Y0, Y9; \
	VUNPCKLPS Y3, Y2, Y10; \
	VUNPCKHPS Y3, Y2, Y11; \
	VUNPCKLPS Y5, Y4, Y12; \
	VUNPCKHPS Y5, Y4, Y13; \
	VUNPCKLPS Y7, Y6, Y14; \
	VUNPCKHPS Y7, Y6, Y15; \
	VSHUFPS $0x44, Y10, Y8, Y0; \
	VSHUFPS $0xee, Y10, Y8, Y1; \
	VSHUFPS $0x44, Y11, Y9, Y2; \
	VSHUFPS $0xee, Y11, Y9, Y3; \
	VSHUFPS $0x44, Y14, Y12, Y4; \
	VSHUFPS $0xee, Y14, Y12, Y5; \
	VSHUFPS $0x44, Y15, Y13, Y6; \
	VSHUFPS $0xee, Y15, Y13, Y7; \
	VPERM2F128 $0x20, Y4, Y0, Y8; \
	VPERM2F128 $0x20, Y5, Y1, Y9; \
	VPERM2F128 $0x20, Y6, Y2, Y10; \
	VPERM2F128 $0x20, Y7, Y3, Y11; \
	VPERM2F128 $0x31, Y4, Y0, Y12; \
	VPERM2F128 $0x31, Y5, Y1, Y13; \
	VPERM2F128 $0x31, Y6, Y2, Y14; \
	VPERM2F128 $0x31, Y7, Y3, Y15

// SQADD(y, acc) adds float64(y)² to acc per lane (product, then sum, each
// rounded; Z16 clobbered).
#define SQADD(y, acc) \
	VCVTPS2PD y, Z16; \
	VMULPD Z16, Z16, Z16; \
	VADDPD Z16, acc, acc

// LOAD8(a, b) loads 8 values of the 8 rows at a (rows 0..3, stride BX,
// R9 = 3·BX) and b (rows 4..7) into Y0..Y7.
#define LOAD8(a, b) \
	VMOVUPS (a), Y0; \
	VMOVUPS (a)(BX*1), Y1; \
	VMOVUPS (a)(BX*2), Y2; \
	VMOVUPS (a)(R9*1), Y3; \
	VMOVUPS (b), Y4; \
	VMOVUPS (b)(BX*1), Y5; \
	VMOVUPS (b)(BX*2), Y6; \
	VMOVUPS (b)(R9*1), Y7

// SUM8(acc) transposes Y0..Y7 and adds the squares of the 8 columns, in
// column order, to acc (one lane per row).
#define SUM8(acc) \
	TRANSPOSE8; \
	SQADD(Y8, acc); \
	SQADD(Y9, acc); \
	SQADD(Y10, acc); \
	SQADD(Y11, acc); \
	SQADD(Y12, acc); \
	SQADD(Y13, acc); \
	SQADD(Y14, acc); \
	SQADD(Y15, acc)

// func sumSquares16AVX512(x *float32, D int, q *float64)
//
// q[s] = Σ_d x[s·D+d]² for the 16 rows s of D values at x (D a multiple
// of 8), each row summed in float64 in order of d, product and sum rounded
// (sumSquares' additions): two blocks of 8 rows, one row per float64 lane,
// 8×8 blocks transposed so that a lane takes its row's values in order.
TEXT ·sumSquares16AVX512(SB), NOSPLIT, $0-24
	MOVQ x+0(FP), SI
	MOVQ D+8(FP), CX
	MOVQ q+16(FP), DI
	LEAQ (CX*4), BX              // row stride in bytes
	LEAQ (BX)(BX*2), R9          // 3 rows
	LEAQ (SI)(BX*4), R8          // row 4
	LEAQ (R8)(BX*4), R10         // row 8
	LEAQ (R10)(BX*4), R11        // row 12
	VXORPD Z30, Z30, Z30
	VXORPD Z31, Z31, Z31
	SHRQ $3, CX
	JZ   sqend

sqloop:
	LOAD8(SI, R8)
	SUM8(Z30)
	LOAD8(R10, R11)
	SUM8(Z31)
	ADDQ $32, SI
	ADDQ $32, R8
	ADDQ $32, R10
	ADDQ $32, R11
	DECQ CX
	JNZ  sqloop

sqend:
	VMOVUPD Z30, 0(DI)
	VMOVUPD Z31, 64(DI)
	VZEROUPPER
	RET
