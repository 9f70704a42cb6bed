package grad

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// ConvTranspose is the adjoint of Conv in its input: x position i, tap t
// adds x[n, c, i]·w[c, m, t] to y[n, m, i·stride − padBegin + t·dilation].
// With colsG[m·K+t, i] = G[n, m, that position] (0 outside y), per sample
// and group: dL/dx = W·colsG, dL/dW = X·colsGᵀ, dL/db = Σ G.

func init() { register("ConvTranspose", convTransposeVJP) }

func convTransposeVJP(o *Op) error {
	if err := o.Need(2); err != nil {
		return err
	}
	X, W, Y := o.In[0], o.In[1], o.Out[0]
	if X.Rank() < 3 || W.Rank() != X.Rank() || Y.Rank() != X.Rank() {
		return fmt.Errorf("ConvTranspose shapes %v, %v, %v do not fit", X.Shape, W.Shape, Y.Shape)
	}
	N, C := X.Shape[0], X.Shape[1]
	G := int(o.Int("group", 1))
	if G < 1 || C%G != 0 || W.Shape[0] != C || Y.Shape[1] != W.Shape[1]*G {
		return fmt.Errorf("ConvTranspose group %d does not fit input %v, weight %v, output %v", G, X.Shape, W.Shape, Y.Shape)
	}
	nd := X.Rank() - 2
	win := &window{in: Y.Shape[2:], out: X.Shape[2:], k: W.Shape[2:]}
	if ks := o.Ints("kernel_shape"); ks != nil {
		win.k = ks
	}
	win.stride, win.dil = o.Ints("strides"), o.Ints("dilations")
	if win.stride == nil {
		win.stride = ones(nd)
	}
	if win.dil == nil {
		win.dil = ones(nd)
	}
	pads, outPad := o.Ints("pads"), o.Ints("output_padding")
	if outPad == nil {
		outPad = make([]int, nd)
	}
	auto := o.Str("auto_pad", "NOTSET")
	win.padBeg = make([]int, nd)
	for d := 0; d < nd; d++ {
		if auto == "NOTSET" && !o.Has("output_shape") && pads != nil {
			win.padBeg[d] = pads[d]
			continue
		}
		if auto == "VALID" || (auto == "NOTSET" && !o.Has("output_shape")) {
			continue
		}
		// the padding the output size implies, split as ONNX specifies
		total := win.stride[d]*(win.out[d]-1) + outPad[d] + (win.k[d]-1)*win.dil[d] + 1 - win.in[d]
		win.padBeg[d] = total - total/2
		if auto == "SAME_UPPER" {
			win.padBeg[d] = total / 2
		}
	}
	fillTaps(win)
	Cg, Mg, K, P, I := C/G, W.Shape[1], win.K, win.P, win.I
	M := Mg * G
	g := o.G(0)
	gx, gw, gb := o.Grad(0), o.Grad(1), o.Grad(2)
	if gb != nil {
		for n := 0; n < N; n++ {
			for m := 0; m < M; m++ {
				for _, v := range g[(n*M+m)*I : (n*M+m+1)*I] {
					gb[m] += v
				}
			}
		}
	}
	if gx == nil && gw == nil {
		return nil
	}
	x, w := o.X(0), o.X(1)
	cols := make([]float64, Mg*K*P)
	for n := 0; n < N; n++ {
		for grp := 0; grp < G; grp++ {
			for m := 0; m < Mg; m++ {
				gy := g[(n*M+grp*Mg+m)*I : (n*M+grp*Mg+m+1)*I]
				for t := 0; t < K; t++ {
					row := cols[(m*K+t)*P : (m*K+t+1)*P]
					for p := range row {
						row[p] = 0
						if off := win.taps[p*K+t]; off >= 0 {
							row[p] = gy[off]
						}
					}
				}
			}
			wg := w[grp*Cg*Mg*K : (grp+1)*Cg*Mg*K]
			xg := x[(n*C+grp*Cg)*P : (n*C+(grp+1)*Cg)*P]
			if gx != nil { // dX_g [Cg, P] += W_g [Cg, Mg·K] · cols
				mm(false, false, 1, wg, Cg, Mg*K, cols, Mg*K, P, gx[(n*C+grp*Cg)*P:(n*C+(grp+1)*Cg)*P])
			}
			if gw != nil { // dW_g [Cg, Mg·K] += X_g [Cg, P] · colsᵀ
				mm(false, true, 1, xg, Cg, P, cols, Mg*K, P, gw[grp*Cg*Mg*K:(grp+1)*Cg*Mg*K])
			}
		}
	}
	return nil
}

// fillTaps computes the tap tables of a window whose sizes, strides,
// dilations and begin pads are set.
func fillTaps(w *window) {
	nd := len(w.in)
	w.K, w.P, w.I = prod(w.k), prod(w.out), prod(w.in)
	w.taps = make([]int, w.P*w.K)
	op := make([]int, nd)
	kk := make([]int, nd)
	inStr := tensor.Strides(w.in)
	for p := 0; p < w.P; p++ {
		clear(kk)
		for t := 0; t < w.K; t++ {
			off := 0
			for d := 0; d < nd && off >= 0; d++ {
				c := op[d]*w.stride[d] - w.padBeg[d] + kk[d]*w.dil[d]
				if c < 0 || c >= w.in[d] {
					off = -1
				} else {
					off += c * inStr[d]
				}
			}
			w.taps[p*w.K+t] = off
			incr(kk, w.k)
		}
		incr(op, w.out)
	}
}
