package probe

import "golang.org/x/sys/cpu"

// Vector row kernels of dw3Row (conv_dw_amd64.s). Each writes the first n
// outputs (n a multiple of the vector width) of
// dst[j] = wb[9] + Σ_{k,t<3} wb[3k+t] · r_k[j·s + t], s = 1 or 2, adding
// the taps in that order with fused multiply-adds.

//go:noescape
func dw3s1AVX512(dst, r0, r1, r2 *float32, wb *[10]float32, n int)

//go:noescape
func dw3s2AVX512(dst, r0, r1, r2 *float32, wb *[10]float32, n int)

//go:noescape
func dw3s1TailAVX512(dst, r0, r1, r2 *float32, wb *[10]float32, mask uint64)

//go:noescape
func dw3s2TailAVX512(dst, r0, r1, r2 *float32, wb *[10]float32, masks, maskB1 uint64)

//go:noescape
func dw3s1AVX2(dst, r0, r1, r2 *float32, wb *[10]float32, n int)

//go:noescape
func dw3s2AVX2(dst, r0, r1, r2 *float32, wb *[10]float32, n int)

// dwVecLevel picks the row kernel: 2 AVX-512, 1 AVX2+FMA, 0 none (Go only).
// Tests lower it to check each level against dw3RowGo.
var dwVecLevel = func() int {
	switch {
	case cpu.X86.HasAVX512F:
		return 2
	case cpu.X86.HasAVX2 && cpu.X86.HasFMA:
		return 1
	}
	return 0
}()

// dw3RowVec runs the widest available kernel over dst and returns how many
// outputs it wrote: all of them with AVX-512 (the last partial vector under
// a lane mask), the whole vectors with AVX2. Every block reads r_k only up to
// index j·s + 2 of its last output j, inside dw3Row's required length.
func dw3RowVec(dst, r0, r1, r2 []float32, wb *[10]float32, sw int) int {
	width := 8
	if dwVecLevel == 2 {
		width = 16
	}
	n := len(dst) &^ (width - 1)
	if dwVecLevel == 0 || len(dst) == 0 || sw != 1 && sw != 2 {
		return 0
	}
	if n > 0 {
		switch {
		case dwVecLevel == 2 && sw == 1:
			dw3s1AVX512(&dst[0], &r0[0], &r1[0], &r2[0], wb, n)
		case dwVecLevel == 2:
			dw3s2AVX512(&dst[0], &r0[0], &r1[0], &r2[0], wb, n)
		case sw == 1:
			dw3s1AVX2(&dst[0], &r0[0], &r1[0], &r2[0], wb, n)
		default:
			dw3s2AVX2(&dst[0], &r0[0], &r1[0], &r2[0], wb, n)
		}
	}
	rem := len(dst) - n
	if dwVecLevel != 2 || rem == 0 {
		return n
	}
	lanes := func(k int) uint64 { return uint64(1)<<min(16, max(0, k)) - 1 }
	p := n * sw
	if sw == 1 {
		// lanes i < rem read r[n+i+t], t ≤ 2: the last index is len(dst)+1
		dw3s1TailAVX512(&dst[n], &r0[p], &r1[p], &r2[p], wb, lanes(rem))
		return len(dst)
	}
	// stride 2: inputs p+0 .. p+2·rem exist (2·rem+1 values from p)
	// (masks: outputs; loads of p[0..15], p[16..31], p[1..16]; p[17..32])
	m := lanes(rem) | lanes(2*rem+1)<<16 | lanes(2*rem+1-16)<<32 | lanes(2*rem)<<48
	dw3s2TailAVX512(&dst[n], &r0[p], &r1[p], &r2[p], wb, m, lanes(2*rem-16))
	return len(dst)
}
