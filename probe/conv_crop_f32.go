package probe

import (
	"slices"

	"github.com/vitals-health/vitals/tensor"
)

// Kernel taps that never meet the image. With a large dilation on a small
// map (atrous pyramids: dilation 36 on a 28×28 map) whole rows and columns
// of the window fall in the padding for every output position, and add
// nothing but zeros. Along axis d, tap t reads input positions
// o·s − padBeg + t·dil for o in [0, out), an interval; the taps whose
// interval meets [0, in) form a range [a, b]. Cropping the window to [a, b]
// with padBeg' = padBeg − a·dil and padEnd' = padEnd − (k−1−b)·dil keeps
// the output size (padBeg' + padEnd' − dil·(k'−1) is unchanged) and every
// output value but for the order of the zero terms, and may turn the
// convolution into a 1×1 (the direct GEMM path).

// convCropTaps returns the cropped geometry and weights ([M, Cg, k'…]) when
// some axis has dead taps and the cropped pads stay non-negative, else ok=false.
// Weights that are initializers are cropped once (cached with the packings).
func convCropTaps(c *Call, w *tensor.Tensor, g *convGeom) (convGeom, *tensor.Tensor, bool) {
	nd := len(g.k)
	lo, hi := make([]int, nd), make([]int, nd)
	crop := false
	for d := 0; d < nd; d++ {
		lo[d], hi[d] = -1, -1
		for t := 0; t < g.k[d]; t++ {
			first := -g.padBeg[d] + t*g.dil[d]
			last := (g.out[d]-1)*g.strides[d] + first
			if last >= 0 && first < g.in[d] {
				if lo[d] < 0 {
					lo[d] = t
				}
				hi[d] = t
			}
		}
		if lo[d] < 0 {
			return *g, nil, false // no tap meets the image: leave it to the usual path
		}
		if g.padBeg[d]-lo[d]*g.dil[d] < 0 || g.padEnd[d]-(g.k[d]-1-hi[d])*g.dil[d] < 0 {
			return *g, nil, false
		}
		crop = crop || lo[d] > 0 || hi[d] < g.k[d]-1
	}
	if !crop || len(g.out) != nd {
		return *g, nil, false
	}
	ng := *g
	ng.k, ng.padBeg, ng.padEnd = make([]int, nd), make([]int, nd), make([]int, nd)
	key := 0
	for d := 0; d < nd; d++ {
		ng.k[d] = hi[d] - lo[d] + 1
		ng.padBeg[d] = g.padBeg[d] - lo[d]*g.dil[d]
		ng.padEnd[d] = g.padEnd[d] - (g.k[d]-1-hi[d])*g.dil[d]
		key = key*64 + lo[d]*8 + hi[d]
	}
	build := func() *tensor.Tensor { return convCropWeights(w, g.k, lo, ng.k) }
	if c.isInitializer(1) && nd <= 3 && slices.Max(g.k) <= 8 {
		return ng, cachedPack(w, nil, 'c', false, key, build), true
	}
	return ng, build(), true
}

// convCropWeights copies the window [lo, lo+nk) of every kernel of w.
func convCropWeights(w *tensor.Tensor, k, lo, nk []int) *tensor.Tensor {
	shape := append([]int{w.Shape[0], w.Shape[1]}, nk...)
	out := tensor.New(tensor.Float32, shape)
	src, dst := w.F32(), out.F32()
	K, NK := 1, 1
	for d := range k {
		K *= k[d]
		NK *= nk[d]
	}
	sst := tensor.Strides(k)
	idx := make([]int, len(nk))
	for m := 0; m < w.Shape[0]*w.Shape[1]; m++ {
		for i := range idx {
			idx[i] = 0
		}
		for j := 0; j < NK; j++ {
			off := 0
			for d := range nk {
				off += (lo[d] + idx[d]) * sst[d]
			}
			dst[m*NK+j] = src[m*K+off]
			for d := len(nk) - 1; d >= 0; d-- {
				idx[d]++
				if idx[d] < nk[d] {
					break
				}
				idx[d] = 0
			}
		}
	}
	return out
}
