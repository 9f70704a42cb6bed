package probe

// Float32 depthwise (channel-wise) 2-D convolution: every output channel m
// reads only input channel m/Mg (Cg == 1), so each output plane is
//
//	Y[n,m,oh,ow] = B[m] + Σ_{kh,kw} W[m,0,kh,kw] · X[n, m/Mg, oh·sh − pt + kh·dh, ow·sw − pl + kw·dw]
//
// with taps outside the image left out. The work is memory bound (9
// multiply-adds per output for 3×3), so there is no GEMM: whole planes go to
// a worker, the bias is the accumulator's start value (every element of Y is
// written, none read first), and a fused activation (Call.fuse) is applied
// to the plane while it is still in cache. Planes whose output rows fit one
// vector (OW ≤ 16, windows up to 7×7, strides 1 or 2) run dwSmallPlane
// (AVX-512); other 3×3 undilated windows with stride
// 1 or 2 run a row kernel (AVX-512 or AVX2+FMA on amd64, dw3RowGo
// elsewhere); other windows go tap by tap through dwGenericPlane.

// convIsDepthwise reports whether convFastF32 takes the depthwise path.
func convIsDepthwise(a *convF32Args) bool {
	return a.Cg == 1 && len(a.g.in) == 2 && a.P > 0
}

// dwZeroRow stands in for input rows above and below the image (with zero
// weights), so border rows run the same row kernel as interior ones.
var dwZeroRow [4096]float32

// convDepthwise2D computes Y (and the fused activation's output, if any)
// plane by plane, whole planes per worker.
func convDepthwise2D(a *convF32Args) {
	g := a.g
	H, W := g.in[0], g.in[1]
	OH, OW := g.out[0], g.out[1]
	KH, KW := g.k[0], g.k[1]
	planes := a.N * a.M
	var act func(dst, src []float32)
	var ad []float32
	if f := a.c.fuse; f != nil && f.out != nil {
		act, ad = f.f32, f.out.F32()
	}
	small := dwSmallOK(g) && !dwTapsCheaper(g)
	var sa dwSmallArgs
	if small {
		sa = newDwSmallArgs(g)
	}
	row3 := !small && KH == 3 && KW == 3 && g.dil[0] == 1 && g.dil[1] == 1 && (g.strides[1] == 1 || g.strides[1] == 2) && W <= len(dwZeroRow)
	flat := row3 && g.strides[0] == 1 && g.strides[1] == 1 && OW < dwFlatWidth
	taps := !small && !row3 && KH*KW <= dwMaxTaps
	var offs []int
	if taps {
		offs = dwTapOffsets(g)
	}
	parFor(planes, max(1, 4096/max(1, a.P)), func(p0, p1 int) {
		var scratch *[]float32
		var tw *dwTapsWork
		if flat {
			scratch = getF32(dwFlatScratch(OH, OW))
			defer putF32(scratch)
		} else if taps {
			scratch = getF32(dwTapsScratch(g))
			defer putF32(scratch)
			tw = new(dwTapsWork)
			tw.init(g, offs, *scratch)
		}
		sa := sa // each worker its own copy (dwSmallPlane sets w and bias)
		for p := p0; p < p1; p++ {
			n, m := p/a.M, p%a.M
			ci := m / a.Mg // input channel (Cg == 1)
			x := a.xd[(n*a.C+ci)*H*W : (n*a.C+ci+1)*H*W]
			w := a.wd[m*KH*KW : (m+1)*KH*KW]
			y := a.yd[p*a.P : (p+1)*a.P]
			bias := float32(0)
			if a.bd != nil {
				bias = a.bd[m]
			}
			if small {
				dwSmallPlane(y, x, w, bias, &sa)
			} else if flat {
				dw3x3FlatPlane(y, x, w, bias, H, W, OH, OW, g.padBeg[0], g.padBeg[1], *scratch, p > p0)
			} else if row3 {
				dw3x3Plane(y, x, w, bias, H, W, OH, OW, g.strides[0], g.strides[1], g.padBeg[0], g.padBeg[1])
			} else if taps {
				tw.plane(y, x, w, bias, H, W, OH, OW)
			} else {
				for i := range y {
					y[i] = bias
				}
				dwGenericPlane(y, x, w, H, W, OH, OW, KH, KW, g, 0, OH, 0, OW)
			}
			if act != nil {
				act(ad[p*a.P:(p+1)*a.P], y)
			}
		}
	})
}

// dwGenericPlane accumulates the window sums of output rows [oh0, oh1) and
// columns [ow0, ow1) of one plane into y, tap by tap (any window, stride,
// dilation and padding; the reference for the row kernels).
func dwGenericPlane(y, x, w []float32, H, W, OH, OW, KH, KW int, g *convGeom, oh0, oh1, ow0, ow1 int) {
	sh, sw := g.strides[0], g.strides[1]
	dh, dw := g.dil[0], g.dil[1]
	pt, pl := g.padBeg[0], g.padBeg[1]
	for kh := 0; kh < KH; kh++ {
		for kw := 0; kw < KW; kw++ {
			wv := w[kh*KW+kw]
			off := kw*dw - pl
			lo, hi := convValidRange(OW, sw, off, W)
			lo, hi = max(lo, ow0), min(hi, ow1)
			if lo >= hi {
				continue
			}
			for oh := oh0; oh < oh1; oh++ {
				ih := oh*sh - pt + kh*dh
				if ih < 0 || ih >= H {
					continue
				}
				src := x[ih*W : (ih+1)*W]
				dst := y[oh*OW : (oh+1)*OW]
				p := lo*sw + off
				for j := lo; j < hi; j++ {
					dst[j] += wv * src[p]
					p += sw
				}
			}
		}
	}
}

// dw3x3Plane writes one output plane of a 3×3 undilated window with column
// stride sw ∈ {1, 2} (any row stride and padding): y = bias + window sum.
// Rows outside the image are dwZeroRow with zero weights (they add +0);
// the columns whose window leaves the image are summed tap by tap.
func dw3x3Plane(y, x, w []float32, bias float32, H, W, OH, OW, sh, sw, pt, pl int) {
	// interior columns: ow·sw − pl ≥ 0 and ow·sw − pl + 2 < W
	clo, chi := convValidRange(OW, sw, -pl, W-2)
	rhiStart := max(clo, chi)
	var full, part [10]float32 // 9 weights, then the bias
	copy(full[:9], w[:9])
	full[9] = bias
	var rows [3][]float32
	for oh := 0; oh < OH; oh++ {
		ih := oh*sh - pt
		wb := &full
		if ih < 0 || ih+2 >= H {
			part = full
			wb = &part
		}
		for k := 0; k < 3; k++ {
			if r := ih + k; r >= 0 && r < H {
				rows[k] = x[r*W : (r+1)*W]
			} else {
				rows[k] = dwZeroRow[:W]
				part[3*k], part[3*k+1], part[3*k+2] = 0, 0, 0
			}
		}
		dst := y[oh*OW : (oh+1)*OW]
		dw3Edge(dst, &rows, wb, 0, clo, sw, pl, W)
		dw3Edge(dst, &rows, wb, rhiStart, OW, sw, pl, W)
		if clo < chi {
			base := clo*sw - pl
			dw3Row(dst[clo:chi], rows[0][base:], rows[1][base:], rows[2][base:], wb, sw)
		}
	}
}

// dwFlatWidth: stride-1 planes with rows shorter than this many outputs
// run dw3x3FlatPlane (per-row work would cost more than the arithmetic).
const dwFlatWidth = 32

// dwFlatScratch is the scratch size (elements) of dw3x3FlatPlane: the
// bordered image, (OH+2)·(OW+2), then the flat output, OH·(OW+2), and 16
// more (the output row rounded up to whole vectors).
func dwFlatScratch(OH, OW int) int { return (2*OH+2)*(OW+2) + 16 }

// dw3x3FlatPlane writes one stride-1 3×3 plane through a zero-bordered copy
// of the image of width Wp = OW + 2, whose column c and row r hold input
// column c − pl and row r − pt. Output (oh, ow) reads bordered rows oh..oh+2,
// columns ow..ow+2, so on the flattened copy all outputs form one row of
// (OH−1)·Wp + OW values at stride 1 (two unused values between image rows)
// for dw3Row, then copied out row by row. With zeroed, the border of the
// copy is already zero (a previous plane of the same geometry left it so) and
// only the image is copied. The row is rounded up to a multiple of 16, so
// that the vector kernel needs no masked tail (masked loads of the copy just
// written wait for it to reach the cache); the extra outputs read past the
// copy into the output (inside scratch, within its capacity) and are not
// copied out.
func dw3x3FlatPlane(y, x, w []float32, bias float32, H, W, OH, OW, pt, pl int, scratch []float32, zeroed bool) {
	Wp, Hp := OW+2, OH+2
	pad, out := scratch[:Hp*Wp], scratch[Hp*Wp:]
	if !zeroed {
		clear(pad)
	}
	c0, c1 := max(0, pl), min(Wp, W+pl) // bordered columns holding image values
	for r := max(0, pt); r < min(Hp, H+pt); r++ {
		if c0 < c1 {
			src := x[(r-pt)*W:]
			copy(pad[r*Wp+c0:r*Wp+c1], src[c0-pl:c1-pl])
		}
	}
	var wb [10]float32
	copy(wb[:9], w[:9])
	wb[9] = bias
	n := ((OH-1)*Wp + OW + 15) &^ 15
	dw3Row(out[:n], pad, pad[Wp:], pad[2*Wp:], &wb, 1)
	for oh := 0; oh < OH; oh++ {
		copy(y[oh*OW:(oh+1)*OW], out[oh*Wp:oh*Wp+OW])
	}
}

// dw3Edge writes output columns [o0, o1) of one row, leaving out the taps
// whose input column ow·sw − pl + kw lies outside [0, W).
func dw3Edge(dst []float32, rows *[3][]float32, wb *[10]float32, o0, o1, sw, pl, W int) {
	for ow := o0; ow < o1; ow++ {
		i0 := ow*sw - pl
		kl, kh := max(0, -i0), min(3, W-i0)
		s := wb[9]
		for k := 0; k < 3; k++ {
			r, wk := rows[k], wb[3*k:3*k+3]
			for kw := kl; kw < kh; kw++ {
				s += wk[kw] * r[i0+kw]
			}
		}
		dst[ow] = s
	}
}

// dw3Row writes dst[j] = wb[9] + Σ_{k,t<3} wb[3k+t] · r_k[j·sw + t] for
// every j < len(dst); each r_k must hold (len(dst)−1)·sw + 3 values. The
// vector kernels (dw3RowVec) take what they can, dw3RowGo the rest.
func dw3Row(dst, r0, r1, r2 []float32, wb *[10]float32, sw int) {
	n := len(dst)
	need := (n-1)*sw + 3
	r0, r1, r2 = r0[:need], r1[:need], r2[:need]
	done := dw3RowVec(dst, r0, r1, r2, wb, sw)
	if done < n {
		dw3RowGo(dst[done:], r0[done*sw:], r1[done*sw:], r2[done*sw:], wb, sw)
	}
}

// dw3RowGo is dw3Row in plain Go (fallback for the vector kernels' tails
// and other CPUs, and their test reference).
func dw3RowGo(dst, r0, r1, r2 []float32, wb *[10]float32, sw int) {
	if len(dst) == 0 {
		return
	}
	w0, w1, w2, w3, w4, w5, w6, w7, w8, bias := wb[0], wb[1], wb[2], wb[3], wb[4], wb[5], wb[6], wb[7], wb[8], wb[9]
	need := (len(dst)-1)*sw + 3
	r0, r1, r2 = r0[:need], r1[:need], r2[:need]
	for j := range dst {
		p := j * sw
		s := bias
		s += w0 * r0[p]
		s += w1 * r0[p+1]
		s += w2 * r0[p+2]
		s += w3 * r1[p]
		s += w4 * r1[p+1]
		s += w5 * r1[p+2]
		s += w6 * r2[p]
		s += w7 * r2[p+1]
		s += w8 * r2[p+2]
		dst[j] = s
	}
}

// convF32WithAct runs convFastF32 and, when the plan fused an activation
// onto this Conv (Call.fuse), computes the activation's output too: the
// depthwise path plane by plane, the GEMM paths image by image, each right
// after that image's output is written (still in cache, not a second pass
// over the whole batch).
func convF32WithAct(a *convF32Args, shape []int) {
	f := a.c.fuse
	if f == nil {
		convFastF32(a)
		return
	}
	f.alloc(a.c.Arena(), shape) // every element written below
	if convIsDepthwise(a) {
		convFastF32(a) // convDepthwise2D applies f per plane
		return
	}
	ad := f.out.F32()
	if convIsImplicit(a) || a.direct || convGroupedFits(a) {
		// convImplicit2D and convDirect apply f to each finished block of Y
		a.act, a.actOut = f.f32, ad
		convFastF32(a)
		return
	}
	img := a.M * a.P
	one := *a
	one.N = 1
	for n := 0; n < a.N; n++ {
		one.xd = a.xd[n*a.C*a.inSize : (n+1)*a.C*a.inSize]
		one.yd = a.yd[n*img : (n+1)*img]
		convFastF32(&one)
		f32Map(ad[n*img:(n+1)*img], one.yd, f.f32)
	}
}
