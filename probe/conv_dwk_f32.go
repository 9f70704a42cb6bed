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
// then the flat output rounded up to whole vectors of 16 (see dwTapsWork).
func dwTapsScratch(g *convGeom) int {
	Hq, Wq := dwTapsDims(g)
	return g.strides[0]*g.strides[1]*Hq*Wq + dwTapsRound(g.out[0]*Wq)
}

// dwTapsRound is n rounded up to a multiple of 16.
func dwTapsRound(n int) int { return (n + 15) &^ 15 }

// dwTapOffsets is, for each tap (kh, kw) in order, the offset of its run in
// dwTapsPlane's phase planes: computed once per Conv node, not per plane.
func dwTapOffsets(g *convGeom) []int {
	sh, sw := g.strides[0], g.strides[1]
	Hq, Wq := dwTapsDims(g)
	plane := Hq * Wq
	offs := make([]int, 0, g.k[0]*g.k[1])
	for kh := 0; kh < g.k[0]; kh++ {
		for kw := 0; kw < g.k[1]; kw++ {
			a, b := kh*g.dil[0], kw*g.dil[1]
			offs = append(offs, ((a%sh)*sw+b%sw)*plane+(a/sh)*Wq+b/sw)
		}
	}
	return offs
}

// dwTapsPlane writes one output plane (see above); scratch holds
// dwTapsScratch(g) values, offs is dwTapOffsets(g).
func dwTapsPlane(y, x, w []float32, bias float32, H, W, OH, OW int, offs []int, g *convGeom, scratch []float32) {
	var t dwTapsWork
	t.init(g, offs, scratch)
	t.plane(y, x, w, bias, H, W, OH, OW)
}

// dwTapsWork is dwTapsPlane for a run of planes of one node on one worker:
// the phase planes' padding is cleared once (every plane writes the same
// interior positions, so the rest stays zero) and the taps' run pointers,
// which depend only on the scratch and the geometry, are set once.
type dwTapsWork struct {
	g        *convGeom
	Hq, Wq   int
	phases   []float32
	out      []float32
	taps     int
	srcs     [dwMaxTaps][]float32
	ptrs     [dwMaxTaps]unsafe.Pointer
	vec      bool // ptrs hold the runs for dwTapsRun
	cleared  bool // the padding of phases is zero
	unitStep bool
}

// init prepares t for planes of geometry g in scratch (dwTapsScratch(g)
// values), offs being dwTapOffsets(g).
func (t *dwTapsWork) init(g *convGeom, offs []int, scratch []float32) {
	t.g = g
	t.Hq, t.Wq = dwTapsDims(g)
	sh, sw := g.strides[0], g.strides[1]
	plane := t.Hq * t.Wq
	t.phases = scratch[:sh*sw*plane]
	// the runs are rounded up to whole vectors, so that the vector kernel
	// needs no masked loads or stores (which wait for the plane just written
	// to reach the cache instead of forwarding it): the extra outputs read
	// past the phase planes into the output (still inside scratch) and are
	// not copied out
	n := dwTapsRound((g.out[0]-1)*t.Wq + g.out[1])
	t.out = scratch[sh*sw*plane : sh*sw*plane+n]
	t.taps = len(offs)
	for i, at := range offs {
		t.srcs[i] = scratch[at : at+n]
	}
	t.vec = dwTapsPtrs(t.out, t.srcs[:t.taps], t.ptrs[:t.taps])
	t.cleared = false
	t.unitStep = sh == 1 && sw == 1
}

// plane writes one output plane of the H × W plane x (see dwTapsPlane).
func (t *dwTapsWork) plane(y, x, w []float32, bias float32, H, W, OH, OW int) {
	g := t.g
	pt, pl := g.padBeg[0], g.padBeg[1]
	if !t.cleared {
		clear(t.phases)
		t.cleared = true
	}
	if t.unitStep {
		dwPadPlane(t.phases, x, H, W, t.Hq, t.Wq, pt, pl, true)
	} else {
		dwPhasePlanes(t.phases, x, H, W, t.Hq, t.Wq, g.strides[0], g.strides[1], pt, pl, true)
	}
	if !t.vec || !dwTapsRun(t.out, t.ptrs[:t.taps], w[:t.taps], bias) {
		dwTapsGo(t.out, t.srcs[:t.taps], w[:t.taps], bias)
	}
	Wq := t.Wq
	for oh := 0; oh < OH; oh++ {
		copy(y[oh*OW:(oh+1)*OW], t.out[oh*Wq:oh*Wq+OW])
	}
}

// dwPadPlane writes the zero-padded Hq × Wq copy of the H × W plane x
// (unit strides: one phase), every value once; with zeroed, the padding
// of pad is already zero and only the interior is written.
func dwPadPlane(pad, x []float32, H, W, Hq, Wq, pt, pl int, zeroed bool) {
	for r := 0; r < Hq; r++ {
		row := pad[r*Wq : (r+1)*Wq]
		ih := r - pt
		if ih < 0 || ih >= H {
			if !zeroed {
				clear(row)
			}
			continue
		}
		c0 := min(pl, Wq)
		n := copy(row[c0:], x[ih*W:(ih+1)*W])
		if !zeroed {
			clear(row[:c0])
			clear(row[c0+n:])
		}
	}
}

// dwPhasePlanes writes the sh·sw zero-padded phase planes of the plane x
// (see above); with zeroed, everything but the positions this writes (the
// same for every plane of a geometry) is already zero.
func dwPhasePlanes(phases, x []float32, H, W, Hq, Wq, sh, sw, pt, pl int, zeroed bool) {
	plane := Hq * Wq
	if !zeroed {
		clear(phases)
	}
	for ih := 0; ih < H; ih++ {
		r := ih + pt
		if r/sh >= Hq {
			break
		}
		row := x[ih*W : (ih+1)*W]
		if sw == 2 {
			base := (r%sh)*2*plane + (r/sh)*Wq
			phasePairs(phases[base:base+Wq], phases[base+plane:base+plane+Wq], row, pl)
			continue
		}
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

// phasePairs writes one input row into its two column phases for column
// stride 2 (padded column c = iw + pl goes to even[c/2] for even c,
// odd[c/2] for odd c, none past Wq = len(even)), reading the row once; the
// other columns are left as they are (the depthwise planes and the
// implicit GEMM's padded planes, padPairs, both use it).
func phasePairs(even, odd, row []float32, pl int) {
	Wq, W := len(even), len(row)
	iw := 0
	if pl%2 == 1 {
		if pl/2 < Wq && W > 0 {
			odd[pl/2] = row[0]
		}
		iw = 1
	}
	j0 := (iw + pl) / 2
	n := max(0, min((W-iw)/2, Wq-j0))
	if n > 0 {
		src := row[iw : iw+2*n]
		e, o := even[j0:j0+n], odd[j0:j0+n]
		for j := range e {
			e[j], o[j] = src[2*j], src[2*j+1]
		}
	}
	iw += 2 * n
	if iw < W && (iw+pl)/2 < Wq {
		even[(iw+pl)/2] = row[iw]
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
