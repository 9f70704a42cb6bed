#include "textflag.h"

// func clipAVX(dst, src []float32, lo, hi float32)
// dst[i] = min(hi, max(lo, src[i])) for the first len(src)&^7 elements.
// The source value is the second operand of VMAXPS/VMINPS, which return it
// when it is NaN, so NaN passes through as in the scalar loop.
TEXT ·clipAVX(SB), NOSPLIT, $0-56
	MOVQ dst_base+0(FP), DI
	MOVQ src_base+24(FP), SI
	MOVQ src_len+32(FP), CX
	VBROADCASTSS lo+48(FP), Y1
	VBROADCASTSS hi+52(FP), Y2
	SHRQ $3, CX
	JZ   done
loop:
	VMOVUPS (SI), Y0
	VMAXPS  Y0, Y1, Y3
	VMINPS  Y3, Y2, Y3
	VMOVUPS Y3, (DI)
	ADDQ $32, SI
	ADDQ $32, DI
	DECQ CX
	JNZ  loop
done:
	VZEROUPPER
	RET
