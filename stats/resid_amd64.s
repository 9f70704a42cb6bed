#include "textflag.h"

// func residAVX512(x []float32, D, d0 int, h0, h1 *int64, over *uint32, mx *uint32) int
//
// residGo's loop over groups of 16 values (D a multiple of 16, x starting
// at feature d0, len(x) a multiple of 16): |v|'s bits b, the running
// maximum of b (VPMAXUD, into *mx), over[d] += 1 where b ≥ bits(6), and
// one increment of the |x| histogram at b>>17 per value, the even values of
// a group into h0 and the odd ones into h1. It stops before the first group
// holding a NaN or ±Inf and returns the number of values done.
TEXT ·residAVX512(SB), NOSPLIT, $64-80
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
	VMOVDQU32 Z1, 0(SP)
	MOVL 0(SP), AX
	INCQ (R8)(AX*8)
	MOVL 4(SP), AX
	INCQ (R9)(AX*8)
	MOVL 8(SP), AX
	INCQ (R8)(AX*8)
	MOVL 12(SP), AX
	INCQ (R9)(AX*8)
	MOVL 16(SP), AX
	INCQ (R8)(AX*8)
	MOVL 20(SP), AX
	INCQ (R9)(AX*8)
	MOVL 24(SP), AX
	INCQ (R8)(AX*8)
	MOVL 28(SP), AX
	INCQ (R9)(AX*8)
	MOVL 32(SP), AX
	INCQ (R8)(AX*8)
	MOVL 36(SP), AX
	INCQ (R9)(AX*8)
	MOVL 40(SP), AX
	INCQ (R8)(AX*8)
	MOVL 44(SP), AX
	INCQ (R9)(AX*8)
	MOVL 48(SP), AX
	INCQ (R8)(AX*8)
	MOVL 52(SP), AX
	INCQ (R9)(AX*8)
	MOVL 56(SP), AX
	INCQ (R8)(AX*8)
	MOVL 60(SP), AX
	INCQ (R9)(AX*8)
	ADDQ $16, BX
	ADDQ $16, R12
	CMPQ R12, R11
	JB   nowrap
	XORQ R12, R12

nowrap:
	DECQ CX
	JNZ  loop

done:
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
