package probe

import "github.com/vitals-health/vitals/gemm"

// Pointwise (1×1, unit-stride, unpadded) convolutions of small planes over
// the whole batch: per group, one product Y_n = W·X_n + b for all images n
// at once (gemm.SgemmPackedAImages), the images' [Cg, P] planes side by
// side as the columns, read and written in place. One product per image
// (convDirect) leaves its last 48-wide column tile mostly empty on small
// planes (a 7×7 plane is 49 columns: two tiles; eight images side by side
// are 392 columns: nine tiles instead of sixteen) and reads W once per
// image; the 1×1 planes of squeeze-excitation blocks fill 1 column of 48.

// pointwiseMaxP is the plane size (pixels) below which pointwise
// convolutions run batched: from 56×56 = 3136 up, a per-image product's
// partial last tile is ≤ 1% of its columns.
const pointwiseMaxP = 1024

// pointwiseActBudget bounds the output (floats, both cores) of the images
// batched in one product when a fused activation follows, so the
// activation reads Y from cache (common practice: half the 2 × 1 MiB L2).
const pointwiseActBudget = 1 << 18

// convPointwiseOn enables convPointwise (tests turn it off for convDirect).
var convPointwiseOn = true

// convPointwiseFits reports whether convDirect's work goes to convPointwise.
func convPointwiseFits(a *convF32Args, packs []*gemm.PackedA) bool {
	return convPointwiseOn && a.direct && packs != nil && a.N >= 2 && a.P > 0 && a.P < pointwiseMaxP
}

// convPointwise computes Y (and act(Y) into actOut) for a batched pointwise
// convolution; the bias, if any, rides in the product's registers.
func convPointwise(a *convF32Args, packs []*gemm.PackedA, beta float32) {
	imgs := a.N
	if a.act != nil {
		imgs = max(1, min(a.N, pointwiseActBudget/max(1, a.M*a.P)))
	}
	img := a.M * a.P
	for n0 := 0; n0 < a.N; n0 += imgs {
		nb := min(imgs, a.N-n0)
		for gi := 0; gi < a.group; gi++ {
			x := a.xd[(n0*a.C+gi*a.Cg)*a.inSize:]
			y := a.yd[(n0*a.M+gi*a.Mg)*a.P:]
			var bias []float32
			if beta != 0 {
				bias = a.bd[gi*a.Mg : (gi+1)*a.Mg]
			}
			gemm.SgemmPackedAImages(nb, a.P, packs[gi], x, a.P, a.C*a.inSize, bias, 0, y, a.P, img)
		}
		if a.act != nil {
			f32Map(a.actOut[n0*img:(n0+nb)*img], a.yd[n0*img:(n0+nb)*img], a.act)
		}
	}
}
