#include "textflag.h"

// func padBlocks8AVX(dst *float32, at *int, C int, src *float32, I int, nc int)
//
// padChannelLast's 8×8 blocks for one run of 8 input positions: for each
// block of 8 channels c0 = 0, 8, …, nc−8, the rows src[(c0+c)·I : +8]
// (c = 0..7) transposed by unpack, shuffle and lane permutes, position k's
// 8 channels stored at dst[at[k]·C + c0 : +8].
TEXT ·padBlocks8AVX(SB), NOSPLIT, $0-48
	MOVQ dst+0(FP), DI
	MOVQ at+8(FP), R8
	MOVQ C+16(FP), R9
	MOVQ src+24(FP), SI
	MOVQ I+32(FP), R10
	MOVQ nc+40(FP), CX
	SHLQ $2, R10                 // row stride in bytes
	SHLQ $2, R9                  // C in bytes
	// the 8 destinations of the run: at[k]·C·4, in R11..R15, AX, BX, DX
	MOVQ 0(R8), R11
	IMULQ R9, R11
	MOVQ 8(R8), R12
	IMULQ R9, R12
	MOVQ 16(R8), R13
	IMULQ R9, R13
	MOVQ 24(R8), R14
	IMULQ R9, R14
	MOVQ 32(R8), R15
	IMULQ R9, R15
	MOVQ 40(R8), AX
	IMULQ R9, AX
	MOVQ 48(R8), BX
	IMULQ R9, BX
	MOVQ 56(R8), DX
	IMULQ R9, DX
	SHRQ $3, CX
	JZ   done
loop:
	MOVQ SI, R9
	VMOVUPS (R9), Y0
	ADDQ R10, R9
	VMOVUPS (R9), Y1
	ADDQ R10, R9
	VMOVUPS (R9), Y2
	ADDQ R10, R9
	VMOVUPS (R9), Y3
	ADDQ R10, R9
	VMOVUPS (R9), Y4
	ADDQ R10, R9
	VMOVUPS (R9), Y5
	ADDQ R10, R9
	VMOVUPS (R9), Y6
	ADDQ R10, R9
	VMOVUPS (R9), Y7
	ADDQ R10, R9
	MOVQ R9, SI                  // the next 8 channels' rows
	VUNPCKLPS Y1, Y0, Y8
	VUNPCKHPS Y1, Y0, Y9
	VUNPCKLPS Y3, Y2, Y10
	VUNPCKHPS Y3, Y2, Y11
	VUNPCKLPS Y5, Y4, Y12
	VUNPCKHPS Y5, Y4, Y13
	VUNPCKLPS Y7, Y6, Y14
	VUNPCKHPS Y7, Y6, Y15
	VSHUFPS $0x44, Y10, Y8, Y0
	VSHUFPS $0xEE, Y10, Y8, Y1
	VSHUFPS $0x44, Y11, Y9, Y2
	VSHUFPS $0xEE, Y11, Y9, Y3
	VSHUFPS $0x44, Y14, Y12, Y4
	VSHUFPS $0xEE, Y14, Y12, Y5
	VSHUFPS $0x44, Y15, Y13, Y6
	VSHUFPS $0xEE, Y15, Y13, Y7
	VPERM2F128 $0x20, Y4, Y0, Y8
	VPERM2F128 $0x20, Y5, Y1, Y9
	VPERM2F128 $0x20, Y6, Y2, Y10
	VPERM2F128 $0x20, Y7, Y3, Y11
	VPERM2F128 $0x31, Y4, Y0, Y12
	VPERM2F128 $0x31, Y5, Y1, Y13
	VPERM2F128 $0x31, Y6, Y2, Y14
	VPERM2F128 $0x31, Y7, Y3, Y15
	VMOVUPS Y8, (DI)(R11*1)
	VMOVUPS Y9, (DI)(R12*1)
	VMOVUPS Y10, (DI)(R13*1)
	VMOVUPS Y11, (DI)(R14*1)
	VMOVUPS Y12, (DI)(R15*1)
	VMOVUPS Y13, (DI)(AX*1)
	VMOVUPS Y14, (DI)(BX*1)
	VMOVUPS Y15, (DI)(DX*1)
	ADDQ $32, DI                 // the next 8 channels of each position
	DECQ CX
	JNZ  loop
done:
	VZEROUPPER
	RET
