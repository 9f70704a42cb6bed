package probe

import (
	"slices"

	"github.com/vitals-health/vitals/gemm"
)

// Implicit-GEMM 2-D convolution (float32).
//
// One group's convolution is C = W·B, W the Mg×(Cg·KH·KW) weights and B the
// im2col matrix: row p = (c·KH + kh)·KW + kw, column j = img·P + oh·OW + ow,
//
//	B[p][j] = X[img][c][oh·sh − pt + kh·dh][ow·sw − pl + kw·dw]  (0 outside the image).
//
// B is never materialised: the GEMM workers call im2colPanels.pack for each
// kc×NR panel just before the micro-kernel reads it, so the columns are
// built in cache, split across cores with the product, and no K×P buffer is
// written and read back. Small output planes (P < convBatchMinP, e.g. the
// 14×14 and 7×7 stages of a residual network, where one image's P columns
// would fill the last NR-wide panel poorly) put all images of the batch
// side by side in one product and scatter the result into Y; larger planes
// run whole images per core, each image's product on one core.

// convBatchMinP is the output plane size (OH·OW) from which each image gets
// its own product instead of sharing one with the rest of the batch.
const convBatchMinP = 2048

// convBatchScratch bounds the scratch C of a shared product (elements; a
// variable so that tests can make batches share products in runs).
var convBatchScratch = 1 << 22

// im2colPanels writes panels of B for a run of images of one group, read
// from a zero-padded, phase-split copy of the images (padImages), so every
// run of B is a contiguous copy and no bounds logic remains per value.
//
// Padded coordinates (r, c) hold input (r − pt, c − pl), zero outside. With
// strides (sh, sw) they are split into sh·sw phase planes: phase (a, b) holds
// the padded values at rows r ≡ a (mod sh) and columns c ≡ b (mod sw), at
// (r / sh, c / sw). Tap (kh, kw) of output (oh, ow) reads padded
// (oh·sh + kh·dh, ow·sw + kw·dw), that is phase (kh·dh mod sh, kw·dw mod sw)
// at (oh + ⌊kh·dh/sh⌋, ow + ⌊kw·dw/sw⌋): consecutive outputs of a row read
// consecutive values, whatever the stride.
type im2colPanels struct {
	xp        []float32 // phase planes: image i, channel c, phase (a, b), row r, column q at xp[i·imgStride + ((c·sh + a)·sw + b)·Hq·Wq + r·Wq + q]
	imgStride int       // C·sh·sw·Hq·Wq
	Hq, Wq    int       // rows and columns of one phase plane
	OH, OW    int
	sh, sw    int
	rowOff    []int // offset of B row p = (c, kh, kw) in an image's planes (c within the group)
	ones      bool  // B has one more row, all ones (for a bias column in A)
}

// newIm2colPanels sizes the phase planes and the row offsets for one
// group's Cg channels (geometry g; the planes hold all C channels).
func newIm2colPanels(g *convGeom, C, Cg int) *im2colPanels {
	KH, KW := g.k[0], g.k[1]
	sh, sw := g.strides[0], g.strides[1]
	// the padded rows and columns the windows read
	Hp := (g.out[0]-1)*sh + (KH-1)*g.dil[0] + 1
	Wp := (g.out[1]-1)*sw + (KW-1)*g.dil[1] + 1
	q := &im2colPanels{OH: g.out[0], OW: g.out[1], sh: sh, sw: sw, Hq: (Hp + sh - 1) / sh, Wq: (Wp + sw - 1) / sw}
	plane := q.Hq * q.Wq
	q.imgStride = C * sh * sw * plane
	q.rowOff = make([]int, 0, Cg*KH*KW)
	for c := 0; c < Cg; c++ {
		for kh := 0; kh < KH; kh++ {
			for kw := 0; kw < KW; kw++ {
				dr, dc := kh*g.dil[0], kw*g.dil[1]
				phase := (c*sh+dr%sh)*sw + dc%sw
				q.rowOff = append(q.rowOff, phase*plane+(dr/sh)*q.Wq+dc/sw)
			}
		}
	}
	return q
}

// padImages writes images x[0:n] (C×H×W each) into dst as phase planes (see
// im2colPanels), zero where the padded position lies outside the input.
func (q *im2colPanels) padImages(dst, x []float32, n, C int, g *convGeom) {
	parFor(n*C, 8, func(lo, hi int) { q.padRange(dst, x, lo, hi, g) })
}

// padRange is padImages for the (image, channel) planes [lo, hi), on the calling goroutine.
func (q *im2colPanels) padRange(dst, x []float32, lo, hi int, g *convGeom) {
	H, W, pt, pl := g.in[0], g.in[1], g.padBeg[0], g.padBeg[1]
	sh, sw := q.sh, q.sw
	plane := q.Hq * q.Wq
	for ic := lo; ic < hi; ic++ {
		src := x[ic*H*W : (ic+1)*H*W]
		for a := 0; a < sh; a++ {
			if sw == 2 && padPairsOn {
				q.padPairs(dst[(ic*sh+a)*2*plane:(ic*sh+a+1)*2*plane], src, a, g)
				continue
			}
			for b := 0; b < sw; b++ {
				d := dst[((ic*sh+a)*sw+b)*plane : ((ic*sh+a)*sw+b+1)*plane]
				// phase columns whose input column b + q·sw − pl lies in [0, W)
				c0, c1 := convValidRange(q.Wq, sw, b-pl, W)
				for r := 0; r < q.Hq; r++ {
					row := d[r*q.Wq : (r+1)*q.Wq]
					ih := r*sh + a - pt
					if ih < 0 || ih >= H || c0 >= c1 {
						clear(row)
						continue
					}
					clear(row[:c0])
					clear(row[c1:])
					in := src[ih*W : (ih+1)*W]
					if sw == 1 {
						copy(row[c0:c1], in[c0+b-pl:c1+b-pl])
						continue
					}
					iw := c0*sw + b - pl
					for j := c0; j < c1; j++ {
						row[j] = in[iw]
						iw += sw
					}
				}
			}
		}
	}
}

// colRun is a run of consecutive output columns in one output row: panel
// columns [d, d+n) read the n values from plane offset base + rowOff[p] on.
type colRun struct {
	base, n, d int
}

// pack is a gemm.PackBFunc over the phase planes (group offset in xp).
func (q *im2colPanels) pack(nr int, dst []float32, p0, kc, j0, cols int) {
	P := q.OH * q.OW
	runs := make([]colRun, 0, nr+1)
	offs := q.rowOff[p0:min(p0+kc, len(q.rowOff))]
	lo, hi := 0, 0
	if len(offs) > 0 {
		lo, hi = slices.Min(offs), slices.Max(offs)
	}
	for c0 := 0; c0 < cols; c0 += nr {
		nv := min(nr, cols-c0)
		panel := dst[c0*kc : c0*kc+nr*kc]
		if len(offs) < kc { // the row of ones (see ones) is the slice's last
			last := panel[(kc-1)*nr : kc*nr]
			fillF32(last[:nv], 1)
			clear(last[nv:])
		}
		runs = runs[:0]
		for d, j := 0, j0+c0; d < nv; {
			img, r := j/P, j%P
			oh, ow := r/q.OW, r%q.OW
			n := min(q.OW-ow, nv-d)
			runs = append(runs, colRun{img*q.imgStride + oh*q.Wq + ow, n, d})
			d += n
			j += n
		}
		if nv < nr {
			for p := range offs {
				clear(panel[p*nr+nv : (p+1)*nr])
			}
		}
		for _, r := range runs {
			if packRun(panel, q.xp, offs, lo, hi, r.base, r.n, r.d, nr) {
				continue
			}
			if r.n >= 16 {
				for p, o := range offs {
					copy(panel[p*nr+r.d:p*nr+r.d+r.n], q.xp[r.base+o:r.base+o+r.n])
				}
				continue
			}
			for p, o := range offs {
				d := panel[p*nr+r.d : p*nr+r.d+r.n]
				s := q.xp[r.base+o : r.base+o+len(d)]
				for i := range d {
					d[i] = s[i]
				}
			}
		}
	}
}

// padPairsOn enables padPairs (benchmarks compare).
var padPairsOn = true

// padPairs is padRange's row phase a of one channel for column stride 2:
// both column phases (even and odd padded columns, planes d[:plane] and
// d[plane:]) filled in one pass over each input row.
func (q *im2colPanels) padPairs(d, src []float32, a int, g *convGeom) {
	H, W, pt, pl := g.in[0], g.in[1], g.padBeg[0], g.padBeg[1]
	plane := q.Hq * q.Wq
	e0, e1 := convValidRange(q.Wq, 2, -pl, W)  // phase 0 columns: input 2j − pl
	o0, o1 := convValidRange(q.Wq, 2, 1-pl, W) // phase 1 columns: input 2j + 1 − pl
	for r := 0; r < q.Hq; r++ {
		r0 := d[r*q.Wq : (r+1)*q.Wq]
		r1 := d[plane+r*q.Wq : plane+(r+1)*q.Wq]
		ih := r*q.sh + a - pt
		if ih < 0 || ih >= H {
			clear(r0)
			clear(r1)
			continue
		}
		clear(r0[:e0])
		clear(r0[e1:])
		clear(r1[:o0])
		clear(r1[o1:])
		phasePairs(r0, r1, src[ih*W:(ih+1)*W], pl)
	}
}

// convIsImplicit reports whether convFastF32 takes the implicit-GEMM path:
// 2-D and not depthwise, except 1×1 unit-stride unpadded convolutions,
// which read X in place as the column matrix (convDirect), whatever the
// plane size: for small planes the implicit path's padded copy, panel
// packing and scatter of shared products cost more than the partly filled
// last panel of a per-image product (MobileNetV2 at batch 8, bench/hookcost:
// 8.9–9.9 against 6.9–7.3 ms per image).
func convIsImplicit(a *convF32Args) bool {
	return len(a.g.in) == 2 && a.P > 0 && !convIsDepthwise(a) && !a.direct
}

// convImplicit2D runs every group's product of a non-depthwise 2-D
// convolution, the bias (if any) written first and accumulated onto.
func convImplicit2D(a *convF32Args) {
	beta := float32(0)
	if a.bd != nil {
		beta = 1
	}
	g := a.g
	kg := a.Cg * a.K
	q := newIm2colPanels(g, a.C, a.Cg)
	var packs []*gemm.PackedA
	switch {
	case !a.wConst || kg == 0 || !packRoom(a.w):
	case a.bd != nil && a.c.isInitializer(2):
		// the bias rides in the product as a column of A times a row of ones
		packs = packedConvWeightsBias(a.w, a.c.In[2], a.wd, a.bd, a.group, a.Mg, kg)
		q.ones = true
		beta = 0
	default:
		packs = packedConvWeights(a.w, a.wd, a.group, a.Mg, kg)
	}
	imgs := 1
	if a.P < convBatchMinP {
		imgs = max(1, min(a.N, convBatchScratch/max(1, a.Mg*a.P)))
	}
	if imgs == 1 && packs != nil && a.N >= 2 {
		// whole images per core: no hand-off per product
		convImagesParallel(a, q, packs, beta)
		return
	}
	var scratch *[]float32
	if imgs > 1 {
		scratch = getF32(a.Mg * imgs * a.P)
		defer putF32(scratch)
	}
	padded := getF32(imgs * q.imgStride)
	defer putF32(padded)
	product := func(gi, ncols int, c []float32, ldc int) {
		if packs != nil {
			gemm.SgemmPackedAFunc(ncols, 1, packs[gi], q.pack, beta, c, ldc)
			return
		}
		gemm.SgemmFunc(false, a.Mg, ncols, kg, 1, a.wd[gi*a.Mg*kg:], max(kg, 1), q.pack, beta, c, ldc)
	}
	for n0 := 0; n0 < a.N; n0 += imgs {
		nb := min(imgs, a.N-n0)
		q.padImages(*padded, a.xd[n0*a.C*a.inSize:], nb, a.C, g)
		for gi := 0; gi < a.group; gi++ {
			q.xp = q.groupPlanes(*padded, gi, a.Cg)
			if imgs == 1 {
				y := a.yd[(n0*a.M+gi*a.Mg)*a.P : (n0*a.M+(gi+1)*a.Mg)*a.P]
				if beta != 0 {
					fillRows(y, a.P, a.bd[gi*a.Mg:(gi+1)*a.Mg])
				}
				product(gi, a.P, y, a.P)
				if a.act != nil {
					o := (n0*a.M + gi*a.Mg) * a.P
					f32Map(a.actOut[o:o+len(y)], y, a.act)
				}
				continue
			}
			// C is Mg × (nb·P): row m holds channel gi·Mg+m of images n0…n0+nb−1
			cs := (*scratch)[:a.Mg*nb*a.P]
			ld := nb * a.P
			if beta != 0 {
				fillRows(cs, ld, a.bd[gi*a.Mg:(gi+1)*a.Mg])
			}
			product(gi, ld, cs, ld)
			// scatter rows to Y (and the fused activation, on rows in cache)
			parFor(a.Mg, max(1, elemChunk/max(1, nb*a.P)), func(m0, m1 int) {
				for m := m0; m < m1; m++ {
					for i := 0; i < nb; i++ {
						o := ((n0+i)*a.M + gi*a.Mg + m) * a.P
						y := a.yd[o : o+a.P]
						copy(y, cs[m*ld+i*a.P:m*ld+(i+1)*a.P])
						if a.act != nil {
							a.act(a.actOut[o:o+a.P], y)
						}
					}
				}
			})
		}
	}
}

// convImagesParallel is convImplicit2D's one-product-per-image path with
// the images split across cores, each core padding its images into its own
// buffer and running their products alone (serial GEMM), so no product is
// handed between cores; Y's layout and values are those of the split
// products (each C element is one dot product whichever core computes it).
func convImagesParallel(a *convF32Args, q0 *im2colPanels, packs []*gemm.PackedA, beta float32) {
	g := a.g
	parFor(a.N, 1, func(n0, n1 int) {
		q := *q0 // own plane pointer
		padded := getF32(q.imgStride)
		defer putF32(padded)
		for n := n0; n < n1; n++ {
			q.padRange(*padded, a.xd[n*a.C*a.inSize:], 0, a.C, g)
			for gi := 0; gi < a.group; gi++ {
				q.xp = q.groupPlanes(*padded, gi, a.Cg)
				o := (n*a.M + gi*a.Mg) * a.P
				y := a.yd[o : o+a.Mg*a.P]
				if beta != 0 {
					fillRows(y, a.P, a.bd[gi*a.Mg:(gi+1)*a.Mg])
				}
				gemm.SgemmPackedAFuncSerial(a.P, 1, packs[gi], q.pack, beta, y, a.P)
				if a.act != nil {
					a.act(a.actOut[o:o+len(y)], y)
				}
			}
		}
	})
}

// groupPlanes is the part of padded images (padImages' layout) that starts
// at group gi's first channel (groups of Cg channels).
func (q *im2colPanels) groupPlanes(padded []float32, gi, Cg int) []float32 {
	return padded[gi*Cg*q.sh*q.sw*q.Hq*q.Wq:]
}

// fillRows sets row m of c (rows of ld elements) to v[m], for every m of v:
// a bias written ahead of a product that accumulates onto it.
func fillRows(c []float32, ld int, v []float32) {
	for m, b := range v {
		fillF32(c[m*ld:(m+1)*ld], b)
	}
}

// fillF32 sets every element of s to v.
func fillF32(s []float32, v float32) {
	for i := range s {
		s[i] = v
	}
}
