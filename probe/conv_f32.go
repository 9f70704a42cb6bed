package probe

import (
	"runtime"

	"github.com/vitals-health/vitals/gemm"
	"github.com/vitals-health/vitals/tensor"
)

// Float32 convolution fast paths, W packed once per initializer:
//
//   - channel-wise (depthwise) 2-D convolutions (Cg == 1): a direct kernel
//     over output planes in conv_dw_f32.go; no GEMM (the work is memory bound);
//   - 1×1, unit-stride, unpadded convolutions of large planes (any rank):
//     C = W·X with X read in place as the column matrix (convDirect), whole
//     images per core;
//   - other 2-D convolutions: implicit GEMM (conv_implicit_f32.go);
//   - other ranks: per image and group, C = W·cols with the columns built by
//     im2col (convWalk) in a scratch buffer, split across cores by channel.
//
// Where a bias is not folded into the product, it is written into Y first
// and the product accumulates onto it (beta = 1): no separate bias pass.

// convFastColBudget bounds the im2col block of one product (elements).
const convFastColBudget = 1 << 20

type convF32Args struct {
	c              *Call
	w              *tensor.Tensor
	xd, wd, bd, yd []float32
	wConst         bool // w is an initializer, or cropped from one once (its packings can be cached)
	N, C, M, group int
	Cg, Mg, K, P   int
	inSize         int
	g              *convGeom
	direct         bool
	// act, if set, is a fused activation: the paths that support it (the
	// implicit GEMM, convDirect) also write act(Y) into actOut, block by block
	act    func(dst, src []float32)
	actOut []float32
}

func convFastF32(a *convF32Args) {
	g := a.g
	nd := len(g.in)
	if convIsDepthwise(a) {
		convDepthwise2D(a) // conv_dw_f32.go
		return
	}
	if convGroupedFits(a) {
		convGrouped(a) // conv_grouped_f32.go
		return
	}
	implicit := convIsImplicit(a)
	// bias first: the products accumulate onto it (convImplicit2D and
	// convDirect place it themselves)
	if a.bd != nil && !implicit && !a.direct {
		for n := 0; n < a.N; n++ {
			fillRows(a.yd[n*a.M*a.P:], a.P, a.bd)
		}
	}
	beta := float32(0)
	if a.bd != nil {
		beta = 1
	}
	if implicit {
		convImplicit2D(a)
		return
	}
	kg := a.Cg * a.K
	var packs []*gemm.PackedA
	if a.wConst && kg > 0 && packRoom(a.w) {
		packs = packedConvWeights(a.w, a.wd, a.group, a.Mg, kg)
	}
	if convPointwiseFits(a, packs) {
		convPointwise(a, packs, beta) // conv_pointwise_f32.go
		return
	}
	if a.direct {
		convDirect(a, packs, beta)
		return
	}

	inner := g.out[nd-1]
	segTotal := a.P / max(inner, 1)
	chunk := max(1, min(segTotal, convFastColBudget/max(1, kg*inner)))
	var colBuf *[]float32
	if !a.direct && a.P > 0 {
		colBuf = getF32(kg * chunk * inner)
		defer putF32(colBuf)
	}
	for n := 0; n < a.N; n++ {
		for gi := 0; gi < a.group; gi++ {
			xg := a.xd[(n*a.C+gi*a.Cg)*a.inSize : (n*a.C+(gi+1)*a.Cg)*a.inSize]
			yg := a.yd[(n*a.M+gi*a.Mg)*a.P:]
			for s0 := 0; s0 < segTotal; s0 += chunk {
				sn := min(chunk, segTotal-s0)
				cols := (*colBuf)[:kg*sn*inner]
				convIm2col(cols, xg, a.Cg, g, s0, sn)
				convProduct(a, packs, gi, sn*inner, cols, max(sn*inner, 1), beta, yg[s0*inner:])
			}
		}
	}
}

// convDirect runs 1×1, unit-stride, unpadded convolutions, whose column
// matrix is X itself (read in place), with whole images per core when there
// are several (each product on one core: no hand-off per product) and the
// fused activation, if any, applied to each image right after its products.
func convDirect(a *convF32Args, packs []*gemm.PackedA, beta float32) {
	kg := a.Cg * a.K
	img := a.M * a.P
	workers := min(runtime.GOMAXPROCS(0), a.N)
	parFor(a.N, 1, func(n0, n1 int) {
		serial := workers > 1
		for n := n0; n < n1; n++ {
			for gi := 0; gi < a.group; gi++ {
				xg := a.xd[(n*a.C+gi*a.Cg)*a.inSize : (n*a.C+(gi+1)*a.Cg)*a.inSize]
				o := (n*a.M + gi*a.Mg) * a.P
				yg := a.yd[o : o+a.Mg*a.P]
				ld := max(a.P, 1)
				if beta != 0 && packs != nil {
					// the bias is added by the product (in registers)
					bias := a.bd[gi*a.Mg : (gi+1)*a.Mg]
					if serial {
						gemm.SgemmPackedABiasSerial(a.P, packs[gi], false, xg, ld, bias, yg, ld)
					} else {
						gemm.SgemmPackedABias(a.P, packs[gi], false, xg, ld, bias, yg, ld)
					}
					continue
				}
				if beta != 0 {
					fillRows(yg, a.P, a.bd[gi*a.Mg:(gi+1)*a.Mg])
				}
				switch {
				case packs != nil && serial:
					gemm.SgemmPackedASerial(a.P, 1, packs[gi], false, xg, ld, beta, yg, ld)
				case packs != nil:
					gemm.SgemmPackedA(a.P, 1, packs[gi], false, xg, ld, beta, yg, ld)
				case serial:
					gemm.SgemmSerial(false, false, a.Mg, a.P, kg, 1, a.wd[gi*a.Mg*kg:], max(kg, 1), xg, ld, beta, yg, ld)
				default:
					gemm.Sgemm(false, false, a.Mg, a.P, kg, 1, a.wd[gi*a.Mg*kg:], max(kg, 1), xg, ld, beta, yg, ld)
				}
			}
			if a.act != nil {
				if serial {
					a.act(a.actOut[n*img:(n+1)*img], a.yd[n*img:(n+1)*img])
				} else {
					f32Map(a.actOut[n*img:(n+1)*img], a.yd[n*img:(n+1)*img], a.act)
				}
			}
		}
	})
}

// convProduct computes y (Mg×ncols, row stride P) (+)= W_gi · cols.
func convProduct(a *convF32Args, packs []*gemm.PackedA, gi, ncols int, cols []float32, ldb int, beta float32, y []float32) {
	kg := a.Cg * a.K
	if packs != nil {
		gemm.SgemmPackedA(ncols, 1, packs[gi], false, cols, ldb, beta, y, max(a.P, 1))
		return
	}
	gemm.Sgemm(false, false, a.Mg, ncols, kg, 1, a.wd[gi*a.Mg*kg:], max(kg, 1), cols, ldb, beta, y, max(a.P, 1))
}

// convIm2col fills cols ([channels·K][segs·inner]) for output segments
// [seg0, seg0+segs) of one group's image, split across cores by channel.
func convIm2col(cols, img []float32, channels int, g *convGeom, seg0, segs int) {
	K := 1
	for _, k := range g.k {
		K *= k
	}
	inner := g.out[len(g.out)-1]
	rowLen := segs * inner
	imgSize := 1
	for _, d := range g.in {
		imgSize *= d
	}
	minCh := max(1, (1<<14)/max(1, K*rowLen))
	parFor(channels, minCh, func(c0, c1 int) {
		dst := cols[c0*K*rowLen : c1*K*rowLen]
		src := img[c0*imgSize : c1*imgSize]
		convWalk(dst, src, c1-c0, g, g.in, g.out, false, seg0, segs)
	})
}

// convValidRange is the range [lo, hi) of output positions o in [0, n) whose
// input coordinate o·s + off lies in [0, size).
func convValidRange(n, s, off, size int) (lo, hi int) {
	// o·s + off >= 0  ⇔  o >= ceil(−off / s)
	if off < 0 {
		lo = (-off + s - 1) / s
	}
	// o·s + off < size  ⇔  o < ceil((size − off) / s)
	if size-off <= 0 {
		return min(lo, n), min(lo, n)
	}
	hi = min(n, (size-off+s-1)/s)
	lo = min(lo, hi)
	return lo, hi
}
