#include "textflag.h"
#include "pass_count_amd64.h"

// func passAVX512(x []float32, p *passParams, tabs *uint32, l *passLanes)
//
// passGo for len(x) a multiple of 16, 16 values per step. Lane layout:
// Z0/Z1 Σd (values 0..7 / 8..15 of each group), Z2/Z3 Σd², Z4 min, Z5 max,
// Z6 ±0 count (the histogram loop counts ±0 per block instead, 16·groups
// less the bins it packed, in the frame word at 8320), Z7 −0 count, Z8
// non-finite count, Z9 saturated count (skipped with noSat).
// passParams: sh 0, lo 8, inv 16, satLo 24, satHi 28, noHist 32, f32 33,
// histOnly 34, noSat 35, scale 36, binLo 40, binHi 44, base 48, tiny 52, top 56. With f32 the bin
// is taken in float32 (passParams.binF32: Z30 scale, Z29 binLo, Z26 binHi,
// Z25 base), and by the float64 formula (bin64, its constants read from p)
// for a group holding a nonzero value below tiny; without, always by bin64.
// passLanes: s 0, q 128, mn 256, mx 320, zeros 384, negz 448, nonfin 512, sat 576.
// Count tables: histTables=8 tables of histStride=136 uint32 (544 bytes);
// the k-th nonzero value of a block increments table k mod 8. Zeros are
// not counted here (chunkPass adds them to the bin of 0). The frame holds
// the bins of one block of 64 groups (4096 bytes and 64 bytes of slack for
// the last full-width store). Two such frames alternate: the increments of
// one block's bins are interleaved with the vector work of the next (16 per
// group), so the scalar increments and the vector arithmetic overlap.
TEXT ·passAVX512(SB), $8328-48
	MOVQ x_base+0(FP), SI
	MOVQ x_len+8(FP), CX
	MOVQ p+24(FP), DX
	MOVQ tabs+32(FP), DI
	MOVQ l+40(FP), BX
	SHRQ $4, CX
	JZ   done
	VBROADCASTSD 0(DX), Z31      // shift
	VBROADCASTSS 24(DX), Z28     // satLo
	VBROADCASTSS 28(DX), Z27     // satHi
	MOVL $128, AX
	VPBROADCASTD AX, Z24
	MOVL $1, AX
	VPBROADCASTD AX, Z23
	MOVL $0x7fffffff, AX
	VPBROADCASTD AX, Z22
	MOVL $0x80000000, AX
	VPBROADCASTD AX, Z21
	MOVL $0x7f800000, AX
	VPBROADCASTD AX, Z20
	VMOVUPD 0(BX), Z0
	VMOVUPD 64(BX), Z1
	VMOVUPD 128(BX), Z2
	VMOVUPD 192(BX), Z3
	VMOVUPS 256(BX), Z4
	VMOVUPS 320(BX), Z5
	VMOVDQU32 384(BX), Z6
	VMOVDQU32 448(BX), Z7
	VMOVDQU32 512(BX), Z8
	VMOVDQU32 576(BX), Z9
	MOVBQZX 33(DX), R15          // bit 0: bins in float32 (passParams.binF32)
	MOVBQZX 34(DX), AX           // bit 1: histogram only (histOnly)
	SHLQ $1, AX
	ORQ  AX, R15
	MOVBQZX 35(DX), AX           // bit 2: no saturation rule (noSat)
	SHLQ $2, AX
	ORQ  AX, R15
	MOVQ $0, 8320(SP)            // ±0 count of the histogram loop
	CMPB 32(DX), $0
	JNE  nohist
	VBROADCASTSS 36(DX), Z30     // scale
	VBROADCASTSS 40(DX), Z29     // binLo
	VBROADCASTSS 44(DX), Z26     // binHi
	VPBROADCASTD 48(DX), Z25     // base
	LEAQ 0(SP), R13              // frame of the block being read
	LEAQ 4160(SP), R14           // frame of the block before it
	MOVQ R14, R8                 // R8..R10: bins still to count (none yet)
	MOVQ R14, R10

block:
	// a block of up to 64 groups: the bins of its nonzero values packed
	// into the frame, then the table increments (reading the bins back
	// once the stores have long completed, not through store forwarding)
	MOVQ $64, R11
	CMPQ CX, R11
	CMOVQLT CX, R11              // R11 = groups in this block
	SUBQ R11, CX
	MOVQ R13, R9
	MOVQ R11, R12

loop:
	VMOVUPS (SI), Z10
	VPANDD Z22, Z10, Z19         // |v|'s bits
	VPTESTNMD Z19, Z19, K1       // ±0: |v| == 0 (counted per block)
	VPCMPUD $5, Z20, Z19, K3     // NaN/±Inf: |v|'s bits ≥ 0x7f800000
	KNOTW K1, K6                 // the nonzero values
	TESTQ $2, R15
	JNZ  bins                    // histOnly: no moments, extremes or other counts
	VMINPS Z10, Z4, Z4           // mn = mn < v ? mn : v
	VMAXPS Z10, Z5, Z5           // mx = mx > v ? mx : v
	VPCMPEQD Z21, Z10, K2        // −0: bits == 0x80000000
	VPADDD Z23, Z7, K2, Z7
	VPADDD Z23, Z8, K3, Z8
	TESTQ $4, R15
	JNZ  nosat
	VCMPPS $0x12, Z28, Z10, K4   // v <= satLo (ordered: false for NaN)
	VCMPPS $0x1d, Z27, Z10, K5   // v >= satHi
	KORW K4, K5, K4
	VPADDD Z23, Z9, K4, Z9

nosat:
	VCVTPS2PD 0(SI), Z11         // values 0..7 as float64
	VCVTPS2PD 32(SI), Z12        // values 8..15 (from memory: no shuffle)
	VSUBPD Z31, Z11, Z13         // d = v − shift
	VSUBPD Z31, Z12, Z14
	VADDPD Z13, Z0, Z0           // Σd
	VADDPD Z14, Z1, Z1
	VFMADD231PD Z13, Z13, Z2     // Σd²
	VFMADD231PD Z14, Z14, Z3

bins:
	TESTQ $1, R15
	JZ   bin64
	VMULPS Z30, Z10, Z15         // y = v·inv (exact)
	VMAXPS Z29, Z15, Z15         // clamped to [base, base+127]
	VMINPS Z26, Z15, Z15
	VCVTPS2DQ.RD_SAE Z15, Z17    // ⌊y⌋
	VPSUBD Z25, Z17, Z17         // bin = ⌊y⌋ − base
	VPCMPUD.BCST $1, 52(DX), Z19, K6, K7 // 0 < |v| < tiny (as bits): float64 formula
	KORTESTW K7, K7
	JZ   binned

bin64:
	VCVTPS2PD 0(SI), Z11         // (again: histOnly skipped the moments)
	VCVTPS2PD 32(SI), Z12
	VPXORD Z19, Z19, Z19
	VSUBPD.BCST 8(DX), Z11, Z15  // t = (v − lo)·inv
	VSUBPD.BCST 8(DX), Z12, Z16
	VMULPD.BCST 16(DX), Z15, Z15
	VMULPD.BCST 16(DX), Z16, Z16
	VMAXPD Z19, Z15, Z15         // t > 0 ? t : 0 (NaN → 0)
	VMAXPD Z19, Z16, Z16
	VMINPD.BCST 56(DX), Z15, Z15 // t < 127 ? t : 127
	VMINPD.BCST 56(DX), Z16, Z16
	VCVTTPD2DQ Z15, Y17          // bin = trunc(t)
	VCVTTPD2DQ Z16, Y18
	VINSERTI64X4 $1, Y18, Z17, Z17

binned:
	VMOVDQA32 Z24, K3, Z17       // non-finite → junk bin 128
	VPCOMPRESSD Z17, K6, Z18     // the bins of the nonzero values, packed (zeros are counted apart)
	VMOVDQU32 Z18, (R9)
	KMOVW K6, AX
	POPCNTL AX, AX
	LEAQ (R9)(AX*4), R9
	ADDQ $64, SI
	LEAQ 64(R8), AX              // 16 bins of the block before left?
	CMPQ AX, R10
	JA   nodrain
	COUNT8(0)
	COUNT8(32)
	ADDQ $64, R8

nodrain:
	DECQ R12
	JNZ  loop

drainrest:                           // the block before's last bins
	CMPQ R8, R10
	JAE  swap
	MOVL 0(R8), AX
	INCL 0(DI)(AX*4)
	ADDQ $4, R8
	JMP  drainrest

swap:
	MOVQ R9, AX                  // ±0 in this block: 16·groups − bins packed
	SUBQ R13, AX
	SHRQ $2, AX
	MOVQ R11, R12
	SHLQ $4, R12
	SUBQ AX, R12
	ADDQ R12, 8320(SP)
	MOVQ R13, R8                 // this block's bins, counted during the next
	MOVQ R9, R10
	XCHGQ R13, R14
	TESTQ CX, CX
	JNZ  block

	MOVQ R10, R11                // the last block's bins
	SUBQ R8, R11
	SHRQ $2, R11
	MOVQ R11, R12
	SHRQ $3, R12                 // 8 per step
	JZ   rest

count:
	COUNT8(0)
	ADDQ $32, R8
	DECQ R12
	JNZ  count

rest:
	ANDQ $7, R11
	JZ   next

rest1:
	MOVL 0(R8), AX
	INCL 0(DI)(AX*4)
	ADDQ $4, R8
	DECQ R11
	JNZ  rest1

next:
	JMP  store

nohist:
	VMOVUPS (SI), Z10
	VMINPS Z10, Z4, Z4           // mn = mn < v ? mn : v
	VMAXPS Z10, Z5, Z5           // mx = mx > v ? mx : v
	VPTESTNMD Z22, Z10, K1       // ±0: (bits & 0x7fffffff) == 0
	VPADDD Z23, Z6, K1, Z6
	VPCMPEQD Z21, Z10, K2        // −0: bits == 0x80000000
	VPADDD Z23, Z7, K2, Z7
	VPANDD Z20, Z10, Z19         // NaN/±Inf: exponent bits all ones
	VPCMPEQD Z20, Z19, K3
	VPADDD Z23, Z8, K3, Z8
	TESTQ $4, R15
	JNZ  nohistnosat
	VCMPPS $0x12, Z28, Z10, K4   // v <= satLo (ordered: false for NaN)
	VCMPPS $0x1d, Z27, Z10, K5   // v >= satHi
	KORW K4, K5, K4
	VPADDD Z23, Z9, K4, Z9

nohistnosat:
	VCVTPS2PD 0(SI), Z11         // values 0..7 as float64
	VCVTPS2PD 32(SI), Z12        // values 8..15 (from memory: no shuffle)
	VSUBPD Z31, Z11, Z13         // d = v − shift
	VSUBPD Z31, Z12, Z14
	VADDPD Z13, Z0, Z0           // Σd
	VADDPD Z14, Z1, Z1
	VFMADD231PD Z13, Z13, Z2     // Σd²
	VFMADD231PD Z14, Z14, Z3
	ADDQ $64, SI
	DECQ CX
	JNZ  nohist

store:
	VMOVUPD Z0, 0(BX)
	VMOVUPD Z1, 64(BX)
	VMOVUPD Z2, 128(BX)
	VMOVUPD Z3, 192(BX)
	VMOVUPS Z4, 256(BX)
	VMOVUPS Z5, 320(BX)
	VMOVDQU32 Z6, 384(BX)
	MOVQ 8320(SP), AX            // and the histogram loop's ±0 count
	ADDL AX, 384(BX)
	VMOVDQU32 Z7, 448(BX)
	VMOVDQU32 Z8, 512(BX)
	VMOVDQU32 Z9, 576(BX)
	VZEROUPPER

done:
	RET
