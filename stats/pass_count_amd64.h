// COUNT8(o) increments, for the 8 bins stored at o(R8)…o+28(R8), count
// table k (of 8, histStride·4 = 544 bytes apart, at DI) at bin k: the
// k-th value of a run of 8 goes to table k. AX is clobbered.
#define COUNT8(o) \
	MOVL (o)+0(R8), AX; INCL 0(DI)(AX*4); \
	MOVL (o)+4(R8), AX; INCL 544(DI)(AX*4); \
	MOVL (o)+8(R8), AX; INCL 1088(DI)(AX*4); \
	MOVL (o)+12(R8), AX; INCL 1632(DI)(AX*4); \
	MOVL (o)+16(R8), AX; INCL 2176(DI)(AX*4); \
	MOVL (o)+20(R8), AX; INCL 2720(DI)(AX*4); \
	MOVL (o)+24(R8), AX; INCL 3264(DI)(AX*4); \
	MOVL (o)+28(R8), AX; INCL 3808(DI)(AX*4)
