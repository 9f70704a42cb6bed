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
	parFor(planes, max(1, elemChunk/max(1, OH*OW*4)), func(p0, p1 int) {
		tmp := make([]float32, W)
		for pl0 := p0; pl0 < p1; pl0++ {
			xp := x[pl0*H*W : (pl0+1)*H*W]
			yp := y[pl0*OH*OW : (pl0+1)*OH*OW]
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
	// stride 1 with the output as wide as the input ("same" columns): the
	// whole plane at once (poolMaxSamePlane)
	same := sh == 1 && sw == 1 && dh == 1 && dw == 1 && OW == W && pt < KH && g.padEnd[0] < KH
	parFor(planes, max(1, elemChunk/max(1, OH*OW*4)), func(p0, p1 int) {
		tmp := make([]float32, W)
		var vbuf []float32
		if same {
			vbuf = make([]float32, OH*W)
		}
		for pl0 := p0; pl0 < p1; pl0++ {
			xp := x[pl0*H*W : (pl0+1)*H*W]
			yp := y[pl0*OH*OW : (pl0+1)*OH*OW]
			if same {
				poolMaxSamePlane(yp, xp, vbuf, H, W, OH, KH, KW, pt, pl)
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
				if KW == 3 && sw == 2 && dw == 1 && pl == 1 {
					vec0 = 1
					vec1 = 1 + maxCols3s2Vec(yr, tmp)
				} else if KW == 3 && sw == 2 && dw == 1 && pl == 0 {
					vec1 = maxCols3s2Vec0(yr, tmp)
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

// poolMaxSamePlane is one plane of poolMax2DF32 for stride 1, dilation 1,
// OW = W (the left and right paddings add up to KW − 1) and top and bottom
// paddings below KH (every window holds an image row), on whole planes
// instead of row by row (a 14×14 plane's rows are too short for per-row
// calls to pay): first v[oh] = the maximum of the window's input rows
// (the rows whose window lies inside the image in KH − 1 long vector
// maxima over all of them at once), then, on the flattened plane,
// y[i] = max over k < KW of v[i − pl + k], which is each output's window
// except where it wraps around a row end: the first pl and the last
// KW − 1 − pl columns of each row are redone with their taps inside the
// row. Go's max is commutative and associative (NaN wins, +0 beats −0), so
// the bits are those of the row-by-row path.
func poolMaxSamePlane(y, x, v []float32, H, W, OH, KH, KW, pt, pl int) {
	a, b := max(0, pt), min(OH, H-KH+1+pt) // output rows whose window is inside the image
	if a < b {
		dst := v[a*W : b*W]
		copy(dst, x[(a-pt)*W:])
		for k := 1; k < KH; k++ {
			maxInto(dst, x[(a-pt+k)*W:][:len(dst)])
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
			maxInto(dst, x[r*W:][:W])
		}
	}
	n := OH * W
	pr := KW - 1 - pl
	if pl < n-pr {
		mid := y[pl : n-pr]
		copy(mid, v)
		for k := 1; k < KW; k++ {
			maxInto(mid, v[k:][:len(mid)])
		}
	}
	for oh := 0; oh < OH; oh++ {
		row, yr := v[oh*W:(oh+1)*W], y[oh*W:(oh+1)*W]
		for c := 0; c < W; c++ {
			if c == pl && c < W-pr {
				c = W - pr - 1 // the columns between were right
				continue
			}
			lo, hi := max(0, c-pl), min(W, c-pl+KW)
			best := row[lo]
			for _, u := range row[lo+1 : hi] {
				best = max(best, u)
			}
			yr[c] = best
		}
	}
}

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
