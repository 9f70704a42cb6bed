package probe

import "unsafe"

// Depthwise planes of any window up to dwMaxTaps taps (5×5, 7×7, …), any
// stride, dilation and padding, as rows of tap sums:
//
//	y[oh, ow] = bias + Σ_{kh,kw} w[kh,kw] · x[oh·sh − pt + kh·dh, ow·sw − pl + kw·dw]
//
// For the interior columns (every tap inside the row) and each output row,
// each tap is a stride-1 run of inputs: with sw = 1 a slice of the input
// row; with sw > 1 a slice of one of sw phase planes (column c of the input
// goes to phase c mod sw at index ⌊c/sw⌋), copied once per plane. dwTaps
// then sums the runs, 64 outputs at a time in registers (AVX-512) or in Go;
// the border columns and rows leave out the taps outside the image.

// dwMaxTaps bounds the taps of one output row (7×7).
const dwMaxTaps = 49

// dwTapsScratch is the per-worker scratch of dwTapsPlane: the phase planes
// (none for sw = 1).
func dwTapsScratch(H, W, sw int) int {
	if sw == 1 {
		return 0
	}
	return sw * H * ((W + sw - 1) / sw)
}

// dwTapsPlane writes one output plane (see above); scratch holds
// dwTapsScratch(H, W, sw) values.
func dwTapsPlane(y, x, w []float32, bias float32, H, W, OH, OW, KH, KW int, g *convGeom, scratch []float32) {
	sh, sw := g.strides[0], g.strides[1]
	dh, dw := g.dil[0], g.dil[1]
	pt, pl := g.padBeg[0], g.padBeg[1]
	clo, chi := convValidRange(OW, sw, -pl, W-(KW-1)*dw)
	Wq := (W + sw - 1) / sw
	if sw > 1 && clo < chi {
		for r := 0; r < H; r++ {
			row := x[r*W : (r+1)*W]
			for c, v := range row {
				scratch[((c%sw)*H+r)*Wq+c/sw] = v
			}
		}
	}
	var srcs [dwMaxTaps][]float32
	var ws [dwMaxTaps]float32
	var ptrs [dwMaxTaps]unsafe.Pointer
	for oh := 0; oh < OH; oh++ {
		dst := y[oh*OW : (oh+1)*OW]
		ih0 := oh*sh - pt
		// border columns, tap by tap
		for ow := 0; ow < OW; ow++ {
			if ow == clo && clo < chi {
				ow = chi - 1
				continue
			}
			s := bias
			for kh := 0; kh < KH; kh++ {
				ih := ih0 + kh*dh
				if ih < 0 || ih >= H {
					continue
				}
				for kw := 0; kw < KW; kw++ {
					if iw := ow*sw - pl + kw*dw; iw >= 0 && iw < W {
						s += w[kh*KW+kw] * x[ih*W+iw]
					}
				}
			}
			dst[ow] = s
		}
		if clo >= chi {
			continue
		}
		n := 0
		for kh := 0; kh < KH; kh++ {
			ih := ih0 + kh*dh
			if ih < 0 || ih >= H {
				continue
			}
			for kw := 0; kw < KW; kw++ {
				c0 := clo*sw - pl + kw*dw // input column of output clo, ≥ 0
				if sw == 1 {
					srcs[n] = x[ih*W+c0 : ih*W+c0+chi-clo]
				} else {
					at := ((c0%sw)*H+ih)*Wq + c0/sw
					srcs[n] = scratch[at : at+chi-clo]
				}
				ws[n] = w[kh*KW+kw]
				n++
			}
		}
		dwTaps(dst[clo:chi], srcs[:n], ws[:n], bias, ptrs[:n])
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
