package grad

import (
	"fmt"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// dL/dX of a float32 Conv as a forward convolution of the output gradient.
// With y[o] = Σ_{c,t} W[m, c, t]·x[o·s − pb + t·d] per spatial axis, the
// gradient spread to the input is
//
//	dX[c, i] = Σ_{m,t} W[m, c, t]·G↑[m, i + pb − t·d],
//
// G↑ being G with s − 1 zeros between neighbours (G↑[o·s] = G[o]). That is a
// stride-1 convolution of G↑ with the taps reversed (t → K−1−t on every
// axis) and input and output channels swapped within each group,
// W̃[g·Cg + c, m, K−1−t] = W[g·Mg + m, c, t], dilation d and pads
// pb' = (k−1)·d − pb before, pe' = in − up − pb' + (k−1)·d after (up: the
// length of G↑), so that its output has the input's size. It runs through
// the forward pass's own float32 convolution (implicit GEMM with k = Mg·K),
// instead of a product with k = Mg followed by folding Cg·K column rows
// back onto the image.

// convDX is the transposed convolution of one Conv node, kept per tape.
type convDX struct {
	node *loader.Node   // the stride-1 Conv computing dX
	w    *tensor.Tensor // the forward weight it was made from
	wt   *tensor.Tensor // W̃ [C, Mg, k...]
	up   []int          // spatial size of G↑
	s    []int          // strides of the forward Conv
	run  probe.Kernel   // the Conv kernel
}

// newConvDX prepares dX's convolution, or returns nil when its padding
// would be negative (padding of a whole window span or more).
func newConvDX(win *window, W *tensor.Tensor, w []float32, C, M, G int, opset int) *convDX {
	nd := len(win.in)
	run, ok := probe.Lookup("", "Conv", opset)
	if !ok {
		return nil
	}
	pads := make([]int64, 2*nd)
	up := make([]int, nd)
	for d := 0; d < nd; d++ {
		span := (win.k[d]-1)*win.dil[d] + 1
		up[d] = (win.out[d]-1)*win.stride[d] + 1
		pb := span - 1 - win.padBeg[d]
		pe := win.in[d] - up[d] - pb + span - 1
		if win.out[d] < 1 || pb < 0 || pe < 0 {
			return nil
		}
		pads[d], pads[nd+d] = int64(pb), int64(pe)
	}
	Cg, Mg, K := C/G, M/G, win.K
	wt := make([]float32, C*Mg*K)
	for grp := 0; grp < G; grp++ {
		for m := 0; m < Mg; m++ {
			for c := 0; c < Cg; c++ {
				src := w[((grp*Mg+m)*Cg+c)*K:][:K]
				dst := wt[((grp*Cg+c)*Mg+m)*K:][:K]
				for t, v := range src {
					dst[K-1-t] = v
				}
			}
		}
	}
	ints := func(v []int) []int64 {
		out := make([]int64, len(v))
		for i, x := range v {
			out[i] = int64(x)
		}
		return out
	}
	node := &loader.Node{Name: "dX", OpType: "Conv", Inputs: []string{"G", "W"}, Outputs: []string{"dX"}, Attrs: map[string]*loader.Attr{
		"kernel_shape": {Name: "kernel_shape", Kind: loader.AttrInts, Ints: ints(win.k)},
		"dilations":    {Name: "dilations", Kind: loader.AttrInts, Ints: ints(win.dil)},
		"strides":      {Name: "strides", Kind: loader.AttrInts, Ints: ints(ones(nd))},
		"pads":         {Name: "pads", Kind: loader.AttrInts, Ints: pads},
		"group":        {Name: "group", Kind: loader.AttrInt, I: int64(G)},
	}}
	return &convDX{node: node, w: W, wt: tensor.From(wt, append([]int{C, Mg}, win.k...)...), up: up, s: win.stride, run: run}
}

// apply writes dX = conv(G↑, W̃) into gx (every element), G being the
// float64 output gradient [N, M, out...].
func (cd *convDX) apply(win *window, N, C, M int, g, gx []float64) error {
	upP := prod(cd.up)
	gu := scratch(N * M * upP)
	defer release(gu)
	if upP == win.P {
		split(len(g), func(lo, hi int) {
			for i := lo; i < hi; i++ {
				gu[i] = float32(g[i])
			}
		})
	} else {
		clear(gu)
		// position o of the output lands at Σ o_d·s_d·stride_d(up)
		nd := len(win.out)
		idx := make([]int, nd)
		offs := make([]int, win.P)
		for p := 0; p < win.P; p++ {
			off := 0
			for d := 0; d < nd; d++ {
				off = off*cd.up[d] + idx[d]*cd.s[d]
			}
			offs[p] = off
			incr(idx, win.out)
		}
		for pl := 0; pl < N*M; pl++ {
			src, dst := g[pl*win.P:(pl+1)*win.P], gu[pl*upP:(pl+1)*upP]
			for p, v := range src {
				dst[offs[p]] = float32(v)
			}
		}
	}
	gt := tensor.From(gu, append([]int{N, M}, cd.up...)...)
	c := &probe.Call{Node: cd.node, In: []*tensor.Tensor{gt, cd.wt}, Out: make([]*tensor.Tensor, 1), Opset: 11}
	if err := cd.run(c); err != nil {
		return err
	}
	y := c.Out[0].F32()
	if len(y) != len(gx) || len(y) != N*C*win.I {
		return fmt.Errorf("Conv gradient: transposed convolution gave %v, want %d values", c.Out[0].Shape, len(gx))
	}
	split(len(gx), func(lo, hi int) {
		for i := lo; i < hi; i++ {
			gx[i] = float64(y[i])
		}
	})
	return nil
}
