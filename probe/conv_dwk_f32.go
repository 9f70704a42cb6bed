package probe

import "unsafe"

// Depthwise planes of any window up to dwMaxTaps taps (5×5, 7×7, …), any
// stride, dilation and padding, as one long row of tap sums:
//
//	y[oh, ow] = bias + Σ_{kh,kw} w[kh,kw] · x[oh·sh − pt + kh·dh, ow·sw − pl + kw·dw]
//
// The plane is copied once, zero-padded and split into sh·sw phase planes
// (padded row r, column c goes to phase (r mod sh, c mod sw) at
// (⌊r/sh⌋, ⌊c/sw⌋)), each Hq × Wq. Output (oh, ow) then reads, for tap
// (kh, kw), phase ((kh·dh) mod sh, (kw·dw) mod sw) at (oh + ⌊kh·dh/sh⌋,
// ow + ⌊kw·dw/sw⌋): flattened with row pitch Wq, every tap is one stride-1
// run over all outputs at once (with Wq − OW unused values between rows).
// dwTaps sums the runs, 64 outputs at a time in registers (AVX-512) or in
// Go, and the rows are copied out. Taps in the padding add w·0.

// dwMaxTaps bounds the taps of one window (7×7).
const dwMaxTaps = 49

// dwTapsDims returns the phase plane size Hq × Wq of dwTapsPlane.
func dwTapsDims(g *convGeom) (Hq, Wq int) {
	Hq = g.out[0] + (g.k[0]-1)*g.dil[0]/g.strides[0] + 1
	Wq = g.out[1] + (g.k[1]-1)*g.dil[1]/g.strides[1] + 1
	return
}

// dwTapsScratch is the per-worker scratch of dwTapsPlane: the phase planes,
// then the flat output.
func dwTapsScratch(g *convGeom) int {
	Hq, Wq := dwTapsDims(g)
	return g.strides[0]*g.strides[1]*Hq*Wq + g.out[0]*Wq
}

// dwTapsPlane writes one output plane (see above); scratch holds
// dwTapsScratch(g) values.
func dwTapsPlane(y, x, w []float32, bias float32, H, W, OH, OW, KH, KW int, g *convGeom, scratch []float32) {
	sh, sw := g.strides[0], g.strides[1]
	dh, dw := g.dil[0], g.dil[1]
	pt, pl := g.padBeg[0], g.padBeg[1]
	Hq, Wq := dwTapsDims(g)
	plane := Hq * Wq
	phases := scratch[:sh*sw*plane]
	if sh == 1 && sw == 1 {
		dwPadPlane(phases, x, H, W, Hq, Wq, pt, pl)
	} else {
		dwPhasePlanes(phases, x, H, W, Hq, Wq, sh, sw, pt, pl)
	}
	n := (OH-1)*Wq + OW
	out := scratch[sh*sw*plane : sh*sw*plane+n]
	var srcs [dwMaxTaps][]float32
	var ptrs [dwMaxTaps]unsafe.Pointer
	taps := 0
	for kh := 0; kh < KH; kh++ {
		for kw := 0; kw < KW; kw++ {
			a, b := kh*dh, kw*dw
			at := ((a%sh)*sw+b%sw)*plane + (a/sh)*Wq + b/sw
			srcs[taps] = phases[at : at+n]
			taps++
		}
	}
	dwTaps(out, srcs[:taps], w[:taps], bias, ptrs[:taps])
	for oh := 0; oh < OH; oh++ {
		copy(y[oh*OW:(oh+1)*OW], out[oh*Wq:oh*Wq+OW])
	}
}

// dwPadPlane writes the zero-padded Hq × Wq copy of the H × W plane x
// (unit strides: one phase), every value once.
func dwPadPlane(pad, x []float32, H, W, Hq, Wq, pt, pl int) {
	for r := 0; r < Hq; r++ {
		row := pad[r*Wq : (r+1)*Wq]
		ih := r - pt
		if ih < 0 || ih >= H {
			clear(row)
			continue
		}
		c0 := min(pl, Wq)
		clear(row[:c0])
		n := copy(row[c0:], x[ih*W:(ih+1)*W])
		clear(row[c0+n:])
	}
}

// dwPhasePlanes writes the sh·sw zero-padded phase planes of the plane x
// (see above).
func dwPhasePlanes(phases, x []float32, H, W, Hq, Wq, sh, sw, pt, pl int) {
	plane := Hq * Wq
	clear(phases)
	for ih := 0; ih < H; ih++ {
		r := ih + pt
		if r/sh >= Hq {
			break
		}
		row := x[ih*W : (ih+1)*W]
		for ph := 0; ph < sw; ph++ {
			// columns c = iw + pl ≡ ph (mod sw), from the first such iw ≥ 0
			iw := ((ph-pl)%sw + sw) % sw
			base := ((r%sh)*sw+ph)*plane + (r/sh)*Wq + (iw+pl)/sw
			n := min((W-iw+sw-1)/sw, Wq-(iw+pl)/sw)
			if n <= 0 {
				continue // (pads wider than the window) no column of this phase is read
			}
			if sw == 1 {
				copy(phases[base:base+n], row[iw:iw+n])
				continue
			}
			dst := phases[base : base+n]
			for k := range dst {
				dst[k] = row[iw+k*sw]
			}
		}
	}
}

// dwTaps sets dst[j] = bias + Σ_i w[i]·srcs[i][j], in vector registers
// where it can.
func dwTaps(dst []float32, srcs [][]float32, w []float32, bias float32, ptrs []unsafe.Pointer) {
	if dwTapsVec(dst, srcs, w, bias, ptrs) {
		return
	}
	dwTapsGo(dst, srcs, w, bias)
}

// dwTapsGo is dwTaps in Go (the fallback and the vector kernel's reference).
func dwTapsGo(dst []float32, srcs [][]float32, w []float32, bias float32) {
	for j := range dst {
		dst[j] = bias
	}
	for i, src := range srcs {
		wv := w[i]
		src = src[:len(dst)]
		for j, v := range src {
			dst[j] += wv * v
		}
	}
}
