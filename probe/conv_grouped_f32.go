package probe

import "github.com/vitals-health/vitals/gemm"

// Grouped 2-D convolutions with several input channels per group (RegNet's
// and ResNeXt's 3×3 convolutions, group width 8–64), per image and group
// as C = W_g·B with B never built:
//
//	Y[n, g·Mg + m, oh, ow] = b[g·Mg + m] + Σ_p W_g[m, p] · xp[rowOff[p] + oh·Wq + ow]
//
// xp the image's zero-padded, phase-split planes (im2colPanels.padRange)
// and rowOff[p] the offset of tap p = (c, kh, kw) in them. Computed at row
// pitch Wq (the padded width) instead of OW, every row of B is one
// contiguous run of xp, which gemm.SgemmPackedAOffsets reads in place: the
// implicit GEMM's panel packing (as much work as the product itself when a
// group has 8–16 output channels) is skipped, at the price of the Wq − OW
// unused columns per output row, dropped when the rows are copied into Y
// with the bias (and the fused activation applied to them).

// convGroupedFits reports whether convFastF32 takes convGrouped.
func convGroupedFits(a *convF32Args) bool {
	if !convGroupedOn || len(a.g.in) != 2 || a.Cg <= 1 || a.direct || a.P <= 0 || !a.wConst || !packRoom(a.w) {
		return false
	}
	return a.group > 1 || (a.Mg <= convRowTableMaxM && a.g.out[1] >= convRowTableMinOW)
}

// Ungrouped convolutions with few output channels (DenseNet's 3×3 layers,
// 32 channels) take the row table too: the implicit GEMM's panel packing
// is then about as much work as the product. Rows narrower than 14 outputs
// waste too many columns at the padded pitch (7×7: 22%; the implicit GEMM
// batches such planes across images instead).
const (
	convRowTableMaxM  = 64
	convRowTableMinOW = 14
)

// convGroupedOn enables convGrouped (tests turn it off for the implicit GEMM).
var convGroupedOn = true

// convGrouped computes Y (and act(Y) into actOut), whole images per core.
func convGrouped(a *convF32Args) {
	g := a.g
	kg := a.Cg * a.K
	packs := packedConvWeights(a.w, a.wd, a.group, a.Mg, kg)
	q0 := newIm2colPanels(g, a.C, a.Cg)
	OH, OW := g.out[0], g.out[1]
	n := (OH-1)*q0.Wq + OW
	parFor(a.N, 1, func(n0, n1 int) {
		padded := getF32(q0.imgStride)
		defer putF32(padded)
		flat := getF32(a.Mg * n)
		defer putF32(flat)
		for img := n0; img < n1; img++ {
			q0.padRange(*padded, a.xd[img*a.C*a.inSize:], 0, a.C, g)
			for gi := 0; gi < a.group; gi++ {
				xp := q0.groupPlanes(*padded, gi, a.Cg)
				gemm.SgemmPackedAOffsets(n, packs[gi], xp, q0.rowOff, *flat, n)
				o := (img*a.M + gi*a.Mg) * a.P
				for m := 0; m < a.Mg; m++ {
					bias := float32(0)
					if a.bd != nil {
						bias = a.bd[gi*a.Mg+m]
					}
					src := (*flat)[m*n:]
					y := a.yd[o+m*a.P : o+(m+1)*a.P]
					for oh := 0; oh < OH; oh++ {
						row := src[oh*q0.Wq : oh*q0.Wq+OW]
						dst := y[oh*OW : (oh+1)*OW]
						for i, v := range row {
							dst[i] = v + bias
						}
					}
				}
				if a.act != nil {
					a.act(a.actOut[o:o+a.Mg*a.P], a.yd[o:o+a.Mg*a.P])
				}
			}
		}
	})
}
