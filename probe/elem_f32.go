package probe

import (
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Float32 elementwise fast paths: slice kernels with the operation chosen
// once per call (no per-element closure or interface call), split across
// cores for large tensors in fixed contiguous chunks (parFor), so results do
// not depend on the number of workers.

// elemChunk is the smallest share of a parallel elementwise loop.
const elemChunk = 1 << 15

// f32Map runs k over (dst, src) in parallel chunks.
func f32Map(dst, src []float32, k func(dst, src []float32)) {
	dst = dst[:len(src)]
	parFor(len(src), elemChunk, func(lo, hi int) { k(dst[lo:hi], src[lo:hi]) })
}

// reluF32 is max(x, 0); NaN stays NaN.
func reluF32(dst, src []float32) {
	clipF32(dst, src, 0, float32(math.Inf(1)))
}

// leakyReluF32 is y = x for x >= 0, alpha·x otherwise (NaN stays NaN). The
// float32 product equals the float64 one of the same values rounded to
// float32 (the float64 product of two float32 values is exact).
func leakyReluF32(dst, src []float32, alpha float32) {
	dst = dst[:len(src)]
	for i, v := range src {
		if v < 0 {
			v = alpha * v
		}
		dst[i] = v
	}
}

// clipF32 is min(max(x, lo), hi); NaN stays NaN (bounds must not be NaN).
// On amd64 it runs as AVX min/max (clip_amd64.s): the scalar comparisons
// mispredict on data that crosses the bounds at random.
func clipF32(dst, src []float32, lo, hi float32) {
	dst = dst[:len(src)]
	if clipVec(dst, src, lo, hi) {
		return
	}
	clipScalar(dst, src, lo, hi)
}

func clipScalar(dst, src []float32, lo, hi float32) {
	for i, v := range src {
		if v < lo {
			v = lo
		}
		if v > hi {
			v = hi
		}
		dst[i] = v
	}
}

// unaryF32Kernel is a float kernel whose float32 case runs the slice kernel
// k32 (which must compute exactly float32(g(float64(x)))) and whose other
// cases go through mapFloat with g.
func unaryF32Kernel(g func(float64) float64, k32 func(dst, src []float32)) Kernel {
	slow := unaryFloat(elemVia64(g), g)
	return func(c *Call) error {
		if err := c.Need(1); err != nil {
			return err
		}
		x := c.In[0]
		if d, ok := x.Data.([]float32); ok {
			out := c.Arena().NewUninit(tensor.Float32, x.Shape) // f32Map writes every element
			f32Map(out.F32(), d, k32)
			c.Set(0, out)
			return nil
		}
		return slow(c)
	}
}

// Binary arithmetic.

// vvF32: dst = x op y elementwise (same length).
func vvF32(op opID, dst, x, y []float32) {
	dst, y = dst[:len(x)], y[:len(x)]
	if k := vvVec(op, dst, x, y); k > 0 {
		dst, x, y = dst[k:], x[k:], y[k:]
	}
	switch op {
	case addT:
		for i := range x {
			dst[i] = x[i] + y[i]
		}
	case subT:
		for i := range x {
			dst[i] = x[i] - y[i]
		}
	case mulT:
		for i := range x {
			dst[i] = x[i] * y[i]
		}
	case divT:
		for i := range x {
			dst[i] = x[i] / y[i]
		}
	}
}

// vsF32: dst = x op s, or s op x when swap.
func vsF32(op opID, dst, x []float32, s float32, swap bool) {
	dst = dst[:len(x)]
	if k := vsVec(op, dst, x, s, swap); k > 0 {
		dst, x = dst[k:], x[k:]
	}
	switch {
	case op == addT:
		for i, v := range x {
			dst[i] = v + s
		}
	case op == mulT:
		for i, v := range x {
			dst[i] = v * s
		}
	case op == subT && !swap:
		for i, v := range x {
			dst[i] = v - s
		}
	case op == subT:
		for i, v := range x {
			dst[i] = s - v
		}
	case op == divT && !swap:
		for i, v := range x {
			dst[i] = v / s
		}
	case op == divT:
		for i, v := range x {
			dst[i] = s / v
		}
	}
}

// arithF32Fast computes out = a op b for float32 when one operand has the
// output's shape and the other (small) one varies along one contiguous
// block of axes only (a scalar, a per-channel [C,1,1] or a trailing bias
// [D]); it reports false for every other broadcast, left to binaryLoop.
func arithF32Fast(op opID, out []float32, os []int, a []float32, as []int, b []float32, bs []int) bool {
	n := len(out)
	if n == 0 {
		return false
	}
	if len(a) == n && len(b) == n {
		parFor(n, elemChunk, func(lo, hi int) { vvF32(op, out[lo:hi], a[lo:hi], b[lo:hi]) })
		return true
	}
	full, small, ss, swap := a, b, bs, false
	if len(a) != n {
		if len(b) != n {
			return false
		}
		full, small, ss, swap = b, a, as, true
	}
	if len(small) == 1 {
		s := small[0]
		parFor(n, elemChunk, func(lo, hi int) { vsF32(op, out[lo:hi], full[lo:hi], s, swap) })
		return true
	}
	// out = [outer, B, inner], small varies along B only
	rank := len(os)
	sh := make([]int, rank)
	for i := range sh {
		sh[i] = 1
	}
	copy(sh[rank-len(ss):], ss)
	p, q := -1, -1
	for i, d := range sh {
		if d != 1 {
			if p < 0 {
				p = i
			} else if q >= 0 {
				return false // two separate blocks
			}
			if d != os[i] {
				return false
			}
		} else if p >= 0 && q < 0 {
			q = i
		}
	}
	if p < 0 {
		return false
	}
	if q < 0 {
		q = rank
	}
	for i := q; i < rank; i++ {
		if sh[i] != 1 {
			return false
		}
	}
	B, inner := len(small), 1
	for _, d := range os[q:] {
		inner *= d
	}
	if inner == 1 {
		// rows of B elements: dst row = full row op small
		rows := n / B
		parFor(rows, max(1, elemChunk/B), func(lo, hi int) {
			for r := lo; r < hi; r++ {
				d, f := out[r*B:(r+1)*B], full[r*B:(r+1)*B]
				if swap {
					vvF32(op, d, small, f)
				} else {
					vvF32(op, d, f, small)
				}
			}
		})
		return true
	}
	blocks := n / inner
	parFor(blocks, max(1, elemChunk/inner), func(lo, hi int) {
		for r := lo; r < hi; r++ {
			vsF32(op, out[r*inner:(r+1)*inner], full[r*inner:(r+1)*inner], small[r%B], swap)
		}
	})
	return true
}

// poolMaxColsS1 sets, for column stride 1, the outputs whose window lies in
// the row: yr[ow] = max_kw tmp[ow − pl + kw·dw] for ow in [lo, hi), one
// shifted row at a time (maxRowsVec, then Go for the rest), and returns
// [lo, hi).
func poolMaxColsS1(yr, tmp []float32, KW, dw, pl int) (lo, hi int) {
	lo, hi = convValidRange(len(yr), 1, -pl, len(tmp)-(KW-1)*dw)
	if hi-lo < 16 {
		return 0, 0 // short rows: the tap loop
	}
	dst := yr[lo:hi]
	copy(dst, tmp[lo-pl:])
	for kw := 1; kw < KW; kw++ {
		src := tmp[lo-pl+kw*dw:][:len(dst)]
		for i := maxRowsVec(dst, dst, src); i < len(dst); i++ {
			dst[i] = max(dst[i], src[i])
		}
	}
	return lo, hi
}

// poolAvg2DF32 is poolAvgRun for 2-D float32 windows, separably: for each
// output row the sum of the window's input rows inside the image (vector
// adds), then for each output column the sum of that row's taps inside the
// image, divided by their count (or, with count_include_pad, the count of
// taps inside the padded input, as poolWindowsOf counts them); a window
// with no tap gives NaN, as in poolAvgRun. The sums are taken in another
// order than poolAvgRun's, so results agree to float32 rounding.
func poolAvg2DF32(y, x []float32, planes int, g *convGeom, includePad bool) {
	H, W := g.in[0], g.in[1]
	OH, OW := g.out[0], g.out[1]
	KH, KW := g.k[0], g.k[1]
	sh, sw, dh, dw := g.strides[0], g.strides[1], g.dil[0], g.dil[1]
	pt, pl := g.padBeg[0], g.padBeg[1]
	// per output column: taps inside the image and inside the padded extent
	colIn, colPad := make([]int, OW), make([]int, OW)
	for ow := range colIn {
		for kw := 0; kw < KW; kw++ {
			iw := ow*sw - pl + kw*dw
			if iw >= 0 && iw < W {
				colIn[ow]++
			}
			if iw < W+g.padEnd[1] {
				colPad[ow]++
			}
		}
	}
	same := poolSamePlaneOK && sh == 1 && sw == 1 && dh == 1 && dw == 1 && pt < KH && g.padEnd[0] < KH && pl < KW && g.padEnd[1] < KW
	parFor(planes, max(1, elemChunk/max(1, OH*OW*4)), func(p0, p1 int) {
		tmp := make([]float32, W)
		var vbuf, zbuf []float32
		if same {
			vbuf = make([]float32, OH*W)
			if OW != W {
				zbuf = make([]float32, OH*W)
			}
		}
		for pl0 := p0; pl0 < p1; pl0++ {
			xp := x[pl0*H*W : (pl0+1)*H*W]
			yp := y[pl0*OH*OW : (pl0+1)*OH*OW]
			if same {
				poolAvgSamePlane(yp, xp, vbuf, zbuf, g, includePad, colIn, colPad)
				continue
			}
			for oh := 0; oh < OH; oh++ {
				rows, rowsPad := 0, 0
				for kh := 0; kh < KH; kh++ {
					ih := oh*sh - pt + kh*dh
					if ih < H+g.padEnd[0] {
						rowsPad++
					}
					if ih < 0 || ih >= H {
						continue
					}
					src := xp[ih*W : (ih+1)*W]
					if rows == 0 {
						copy(tmp, src)
					} else {
						vvF32(addT, tmp, tmp, src)
					}
					rows++
				}
				yr := yp[oh*OW : (oh+1)*OW]
				for ow := range yr {
					n := rows * colIn[ow]
					if includePad {
						n = rowsPad * colPad[ow]
					}
					if rows == 0 || colIn[ow] == 0 || n == 0 {
						if n == 0 {
							yr[ow] = float32(math.NaN())
						} else {
							yr[ow] = 0 // only padding in the window: a sum of nothing
						}
						continue
					}
					var s float32
					base := ow*sw - pl
					for kw := 0; kw < KW; kw++ {
						if iw := base + kw*dw; iw >= 0 && iw < W {
							s += tmp[iw]
						}
					}
					yr[ow] = s / float32(n)
				}
			}
		}
	})
}

// poolMaxF32 is poolMaxRun for float32 without indices, planes split across
// cores. The maximum propagates NaN as poolMaxRun does.
// poolMax2DF32 is poolMaxF32 for 2-D windows, separably: for each output
// row the element-wise max of the window's input rows inside the image,
// then for each output column the max of that row's taps inside the image.
// Go's max is commutative and associative (NaN wins, +0 beats −0), so the
// result equals the max over the window's taps in any order; outputs whose
// window holds no input value are left as they are (0), as in poolMaxF32.
func poolMax2DF32(y, x []float32, planes int, g *convGeom) {
	H, W := g.in[0], g.in[1]
	OH, OW := g.out[0], g.out[1]
	KH, KW := g.k[0], g.k[1]
	sh, sw, dh, dw := g.strides[0], g.strides[1], g.dil[0], g.dil[1]
	pt, pl := g.padBeg[0], g.padBeg[1]
	// stride 1, every window holding image values: the whole plane at once
	// (poolMaxSamePlane)
	same := poolSamePlaneOK && sh == 1 && sw == 1 && dh == 1 && dw == 1 && pt < KH && g.padEnd[0] < KH && pl < KW && g.padEnd[1] < KW
	// the 2- and 3-wide stride-2 column kernels run over whole vectors of 16
	// outputs into ys, reading the row max from tmpPad, whose values past
	// the row are −Inf (no window's maximum changes: every output window
	// holds an image value, and max(v, −Inf) = v, NaN included)
	s2 := (KW == 3 && (pl == 0 || pl == 1) || KW == 2 && pl == 0) && sw == 2 && dw == 1 && havePoolVec
	parFor(planes, max(1, elemChunk/max(1, OH*OW*4)), func(p0, p1 int) {
		tmpPad := make([]float32, W+40)
		for i := W; i < len(tmpPad); i++ {
			tmpPad[i] = float32(math.Inf(-1))
		}
		tmp := tmpPad[:W]
		var ys []float32
		if s2 {
			ys = make([]float32, OW+16)
		}
		var vbuf, zbuf []float32
		if same {
			vbuf = make([]float32, OH*W)
			if OW != W {
				zbuf = make([]float32, OH*W)
			}
		}
		for pl0 := p0; pl0 < p1; pl0++ {
			xp := x[pl0*H*W : (pl0+1)*H*W]
			yp := y[pl0*OH*OW : (pl0+1)*OH*OW]
			if same {
				poolMaxSamePlane(yp, xp, vbuf, zbuf, g)
				continue
			}
			for oh := 0; oh < OH; oh++ {
				rows := 0
				for kh := 0; kh < KH; kh++ {
					ih := oh*sh - pt + kh*dh
					if ih < 0 || ih >= H {
						continue
					}
					src := xp[ih*W : (ih+1)*W]
					if rows == 0 {
						copy(tmp, src)
					} else {
						for i := maxRowsVec(tmp, tmp, src); i < len(src); i++ {
							tmp[i] = max(tmp[i], src[i])
						}
					}
					rows++
				}
				if rows == 0 {
					continue
				}
				yr := yp[oh*OW : (oh+1)*OW]
				vec0, vec1 := 0, 0 // outputs [vec0, vec1) done by the vector kernel
				if s2 && KW == 2 && 2*dwTapsRound(OW) <= len(tmpPad) {
					// y[o] = max(tmp[2o], tmp[2o+1]), reading tmpPad[0 .. 2n−1]
					n := dwTapsRound(OW)
					maxCols2s2Whole(ys[:n], tmpPad)
					copy(yr, ys[:OW])
					vec0, vec1 = 0, OW
				} else if s2 && KW == 3 && pl == 0 && 2*dwTapsRound(OW) < len(tmpPad) {
					// y[o] = max(tmp[2o], tmp[2o+1], tmp[2o+2]), reading tmpPad[0 .. 2n]
					n := dwTapsRound(OW)
					maxCols3s2Whole(ys[:n], tmpPad[1:])
					copy(yr, ys[:OW])
					vec0, vec1 = 0, OW
				} else if s2 && KW == 3 && pl == 1 && OW > 1 && 2*dwTapsRound(OW-1)+1 < len(tmpPad) {
					// outputs 1 … OW−1: max(tmp[2o−1], tmp[2o], tmp[2o+1]), reading tmpPad[1 .. 2n+1]
					n := dwTapsRound(OW - 1)
					maxCols3s2Whole(ys[1:1+n], tmpPad[2:])
					copy(yr[1:], ys[1:OW])
					vec0, vec1 = 1, OW
				} else if sw == 1 {
					vec0, vec1 = poolMaxColsS1(yr, tmp, KW, dw, pl)
				}
				for ow := range yr {
					if ow >= vec0 && ow < vec1 {
						continue
					}
					base := ow*sw - pl
					first := true
					var best float32
					for kw := 0; kw < KW; kw++ {
						iw := base + kw*dw
						if iw < 0 || iw >= W {
							continue
						}
						if first {
							best, first = tmp[iw], false
						} else {
							best = max(best, tmp[iw])
						}
					}
					if !first {
						yr[ow] = best
					}
				}
			}
		}
	})
}

// poolMaxSamePlane is one plane of poolMax2DF32 for stride 1 and
// dilation 1 with left and right paddings below KW and top and bottom
// paddings below KH (every window holds an image value), on whole planes
// instead of row by row (a 14×14 plane's rows are too short for per-row
// calls to pay): first v[oh] = the maximum of the window's input rows
// (poolRowsInto), then, on the flattened rows of v, z[j] = max over
// k < KW of v[j + k], the output whose window starts at column j mod W of
// its row unless the window wraps around the row's end: the outputs whose
// window lies inside the row are read from z (z is y itself when OW = W,
// the "same" pooling of GoogLeNet's and Inception's branches), the others
// are redone with their taps inside the row. Go's max is commutative and
// associative (NaN wins, +0 beats −0), so the bits are those of the
// row-by-row path. zbuf holds OH·W values (used when OW ≠ W).
func poolMaxSamePlane(y, x, v, zbuf []float32, g *convGeom) {
	H, W, OH, OW := g.in[0], g.in[1], g.out[0], g.out[1]
	KH, KW, pt, pl := g.k[0], g.k[1], g.padBeg[0], g.padBeg[1]
	poolRowsInto(v, x, H, W, OH, KH, pt, maxInto)
	span := OH*W - (KW - 1)
	lo, hi := pl, min(OW, W-KW+pl+1) // output columns whose window is inside the row
	if span > 0 && lo < hi {
		z := poolZ(y, zbuf, W, OW, pl, span)
		copy(z, v[:span])
		for k := 1; k < KW; k++ {
			maxInto(z, v[k:][:span])
		}
		poolCopyOut(y, z, W, OH, OW, pl, lo, hi)
	} else {
		lo, hi = 0, 0
	}
	for oh := 0; oh < OH; oh++ {
		row, yr := v[oh*W:(oh+1)*W], y[oh*OW:(oh+1)*OW]
		for ow := 0; ow < OW; ow++ {
			if ow == lo && lo < hi {
				ow = hi - 1 // read from z
				continue
			}
			c0, c1 := max(0, ow-pl), min(W, ow-pl+KW)
			best := row[c0]
			for _, u := range row[c0+1 : c1] {
				best = max(best, u)
			}
			yr[ow] = best
		}
	}
}

// poolRowsInto sets v[oh] (OH rows of W) to the combination (f: maxInto or
// addInto) of the input rows oh − pt … oh − pt + KH − 1 that lie in the
// image, in that order: the rows whose window is inside the image in
// KH − 1 long runs over all of them at once, the others row by row.
func poolRowsInto(v, x []float32, H, W, OH, KH, pt int, f func(dst, src []float32)) {
	a, b := max(0, pt), min(OH, H-KH+1+pt)
	if a < b {
		dst := v[a*W : b*W]
		copy(dst, x[(a-pt)*W:])
		for k := 1; k < KH; k++ {
			f(dst, x[(a-pt+k)*W:][:len(dst)])
		}
	}
	for oh := 0; oh < OH; oh++ {
		if oh >= a && oh < b {
			continue
		}
		r0, r1 := max(0, oh-pt), min(H, oh-pt+KH)
		dst := v[oh*W : (oh+1)*W]
		copy(dst, x[r0*W:])
		for r := r0 + 1; r < r1; r++ {
			f(dst, x[r*W:][:W])
		}
	}
}

// poolZ is where the window results of the flattened rows go: y itself,
// shifted by pl, when the output rows are as wide as the input rows, else
// zbuf.
func poolZ(y, zbuf []float32, W, OW, pl, span int) []float32 {
	if OW == W {
		return y[pl : pl+span]
	}
	return zbuf[:span]
}

// poolCopyOut copies output columns [lo, hi) of every row from z into y
// (nothing to do when z is y).
func poolCopyOut(y, z []float32, W, OH, OW, pl, lo, hi int) {
	if OW == W {
		return
	}
	for oh := 0; oh < OH; oh++ {
		copy(y[oh*OW+lo:oh*OW+hi], z[oh*W+lo-pl:])
	}
}

// poolSamePlaneOK lets poolMax2DF32 and poolAvg2DF32 take whole planes
// (poolMaxSamePlane, poolAvgSamePlane); tests clear it to compare with the
// row-by-row paths.
var poolSamePlaneOK = true

// poolAvgSamePlane is one plane of poolAvg2DF32 for the windows of
// poolMaxSamePlane, with the same additions in the same order, so the same
// bits: v[oh] = the window's input rows added in order (poolRowsInto); on
// the flattened rows each window's sum starts at +0 and adds its KW taps in
// order, the sums of the rows whose window holds KH image rows are divided
// by KH·KW in one vector pass and copied out where the window lies inside
// its row; the other outputs (the rows and columns that the window clips)
// are redone as poolAvg2DF32's row loop computes them.
func poolAvgSamePlane(y, x, v, zbuf []float32, g *convGeom, includePad bool, colIn, colPad []int) {
	H, W, OH, OW := g.in[0], g.in[1], g.out[0], g.out[1]
	KH, KW, pt, pl := g.k[0], g.k[1], g.padBeg[0], g.padBeg[1]
	poolRowsInto(v, x, H, W, OH, KH, pt, addInto)
	a, b := max(0, pt), min(OH, H-KH+1+pt) // rows whose window holds KH image rows
	span := OH*W - (KW - 1)
	lo, hi := pl, min(OW, W-KW+pl+1)
	if span > 0 && lo < hi && a < b {
		z := poolZ(y, zbuf, W, OW, pl, span)
		clear(z)
		for k := 0; k < KW; k++ {
			addInto(z, v[k:][:span])
		}
		full := z[a*W : min(span, b*W)]
		vsF32(divT, full, full, float32(KH*KW), false)
		poolCopyOut(y[:b*OW], z, W, b, OW, pl, lo, hi) // rows below b are redone below
	} else {
		lo, hi = 0, 0
	}
	for oh := 0; oh < OH; oh++ {
		r0, r1 := max(0, oh-pt), min(H, oh-pt+KH)
		rows, rowsPad := r1-r0, 0
		for kh := 0; kh < KH; kh++ {
			if oh-pt+kh < H+g.padEnd[0] {
				rowsPad++
			}
		}
		full := oh >= a && oh < b
		row, yr := v[oh*W:(oh+1)*W], y[oh*OW:(oh+1)*OW]
		for ow := 0; ow < OW; ow++ {
			if full && ow == lo && lo < hi {
				ow = hi - 1 // from z
				continue
			}
			cnt := rows * colIn[ow]
			if includePad {
				cnt = rowsPad * colPad[ow]
			}
			var s float32
			for kw := 0; kw < KW; kw++ {
				if iw := ow - pl + kw; iw >= 0 && iw < W {
					s += row[iw]
				}
			}
			yr[ow] = s / float32(cnt)
		}
	}
}

// addInto sets dst[i] += src[i].
func addInto(dst, src []float32) { vvF32(addT, dst, dst, src) }

// maxInto sets dst[i] = max(dst[i], src[i]) (Go's max).
func maxInto(dst, src []float32) {
	for i := maxRowsVec(dst, dst, src); i < len(dst); i++ {
		dst[i] = max(dst[i], src[i])
	}
}

func poolMaxF32(y, x []float32, planes int, w *poolWindows) {
	parFor(planes, max(1, elemChunk/max(1, w.outSize*4)), func(p0, p1 int) {
		for pl := p0; pl < p1; pl++ {
			xp := x[pl*w.inSize : (pl+1)*w.inSize]
			yp := y[pl*w.outSize : (pl+1)*w.outSize]
			for p := range yp {
				offs := w.offs[w.start[p]:w.start[p+1]]
				if len(offs) == 0 {
					continue
				}
				best := xp[offs[0]]
				for _, o := range offs[1:] {
					best = max(best, xp[o])
				}
				yp[p] = best
			}
		}
	})
}
