package grad

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// Conv: y[n, m, p] = b[m] + Σ_{c,t} w[m, c, t]·x[n, g·C/G + c, tap(p, t)]
// within group g; dL/db = Σ G over samples and positions. Float32 models:
// dL/dX by transposed (phase) convolutions (conv_dx.go), dL/dW by
// channel-last products (conv_dw.go), depthwise convolutions by direct
// loops (conv_f32.go). Float64 models, the reference of those paths: with
// the input unrolled into columns (cols[c·K+t, p]), per sample and group,
// dL/dW += G·colsᵀ and dL/dcols = Wᵀ·G folded back onto the input taps.

func init() { register("Conv", convVJP) }

// forceF64 sends float32 convolutions through the float64 path (tests).
var forceF64 = false

func convVJP(o *Op) error {
	if err := o.Need(2); err != nil {
		return err
	}
	X, W, Y := o.In[0], o.In[1], o.Out[0]
	if W.Rank() != X.Rank() {
		return fmt.Errorf("Conv weight %v does not fit input %v", W.Shape, X.Shape)
	}
	N, C, M := X.Shape[0], X.Shape[1], W.Shape[0]
	G := int(o.Int("group", 1))
	if G < 1 || C%G != 0 || M%G != 0 || W.Shape[1] != C/G {
		return fmt.Errorf("Conv group %d does not fit input %v and weight %v", G, X.Shape, W.Shape)
	}
	cm, err := memoize(o, func(m *convMemo) bool {
		return m.w == W && sameShape(m.in, X.Shape[1:]) && sameShape(m.out, Y.Shape[1:])
	}, func() (*convMemo, error) {
		win, err := windowOf(o, X, Y, W.Shape[2:])
		if err != nil {
			return nil, err
		}
		m := &convMemo{in: append([]int(nil), X.Shape[1:]...), out: append([]int(nil), Y.Shape[1:]...), w: W, win: win}
		if w32, ok := W.Data.([]float32); ok && !(C == G && M == G) {
			m.dx = newConvDX(win, W, w32, C, M, G, o.Opset)
		}
		return m, nil
	})
	if err != nil {
		return err
	}
	win := cm.win
	Cg, Mg, K, P, I := C/G, M/G, win.K, win.P, win.I
	x32, isF32 := X.Data.([]float32)
	w32, wF32 := W.Data.([]float32)
	fast := isF32 && wF32 && !forceF64
	depthwise := Cg == 1 && Mg == 1
	if fast && o.f32 {
		return conv32(o, cm, N, C, M, G, x32, w32)
	}
	g := o.G(0)
	dxByConv := fast && cm.dx != nil && o.Needs(0)
	dwByProduct := fast && !depthwise && o.Needs(1)
	// G in float32, read by dX's convolution and dW's products
	var g32 []float32
	if dxByConv || dwByProduct {
		g32 = scratch(len(g))
		defer release(g32)
		if o.wantSq { // Σ G² for the tape, in the same pass
			o.reportSq(splitSum(len(g), func(lo, hi int) float64 { return narrowSq(g32[lo:hi], g[lo:hi]) }))
		} else {
			split(len(g), func(lo, hi int) {
				for i := lo; i < hi; i++ {
					g32[i] = float32(g[i])
				}
			})
		}
	}
	var gx []float64
	if dxByConv {
		if err := applyDX(cm.dx, win, N, C, M, g32, o.GradFull(0), o.arena, false); err != nil {
			return err
		}
	} else {
		gx = o.Grad(0)
	}
	gw, gb := o.Grad(1), o.Grad(2)
	if gb != nil {
		for n := 0; n < N; n++ {
			for m := 0; m < M; m++ {
				gb[m] += sum4(g[(n*M+m)*P : (n*M+m+1)*P])
			}
		}
	}
	if gx == nil && gw == nil {
		return nil
	}
	if fast {
		if depthwise {
			depthwiseF32(win, N, C, x32, w32, g, gx, gw)
			return nil
		}
		if gw != nil {
			convDW(win, N, C, M, G, x32, g32, gw)
		}
		if gx != nil {
			convF32(win, N, C, M, G, w32, g, gx)
		}
		return nil
	}
	x, w := o.X(0), o.X(1)
	cols := make([]float64, Cg*K*P)
	dcols := make([]float64, Cg*K*P)
	for n := 0; n < N; n++ {
		for grp := 0; grp < G; grp++ {
			gy := g[(n*M+grp*Mg)*P : (n*M+(grp+1)*Mg)*P]
			wg := w[grp*Mg*Cg*K : (grp+1)*Mg*Cg*K]
			if gw != nil {
				for c := 0; c < Cg; c++ {
					xc := x[(n*C+grp*Cg+c)*I : (n*C+grp*Cg+c+1)*I]
					for t := 0; t < K; t++ {
						row := cols[(c*K+t)*P : (c*K+t+1)*P]
						for p := range row {
							if off := win.taps[p*K+t]; off >= 0 {
								row[p] = xc[off]
							} else {
								row[p] = 0
							}
						}
					}
				}
				mm(false, true, 1, gy, Mg, P, cols, Cg*K, P, gw[grp*Mg*Cg*K:(grp+1)*Mg*Cg*K])
			}
			if gx != nil {
				clear(dcols)
				mm(true, false, 1, wg, Mg, Cg*K, gy, Mg, P, dcols)
				for c := 0; c < Cg; c++ {
					dx := gx[(n*C+grp*Cg+c)*I : (n*C+grp*Cg+c+1)*I]
					for t := 0; t < K; t++ {
						row := dcols[(c*K+t)*P : (c*K+t+1)*P]
						for p, v := range row {
							if off := win.taps[p*K+t]; off >= 0 {
								dx[off] += v
							}
						}
					}
				}
			}
		}
	}
	return nil
}

// conv32 is convVJP's float32 path with float32 gradients (grad32.go): G
// read as float32 (narrowed once if it came as float64), dL/dX written in
// float32 straight from dX's convolutions (or the depthwise loops), dL/dW
// and dL/db summed in float64.
func conv32(o *Op, cm *convMemo, N, C, M, G int, x32, w32 []float32) error {
	win := cm.win
	P := win.P
	if o.wantSq && o.GOut[0] != nil { // G came as float64: its own Σ G²
		o.reportSq(sumSq(o.GOut[0]))
	}
	g32 := o.G32(0)
	gw, gb := o.Grad(1), o.Grad(2)
	var sums []float64 // Σ G by plane, for dL/db
	if gb != nil {
		sums = make([]float64, N*M)
	}
	if gb != nil || (o.wantSq && !o.gsqOK) {
		sq := splitSum(N*M*P, func(lo, hi int) float64 { // Σ G² and Σ G by plane
			s := 0.0
			for pl := lo / max(P, 1); pl < N*M && pl*P < hi; pl++ {
				if pl*P < lo {
					continue // the plane belongs to the part that holds its start
				}
				gp := g32[pl*P : (pl+1)*P]
				switch {
				case gb != nil && o.wantSq:
					a, q := sumAndSq32(gp)
					sums[pl] = a
					s += q
				case gb != nil: // Σ G² known already (reportInSq) or not wanted
					sums[pl] = sum32(gp)
				default:
					s += sumSq32(gp)
				}
			}
			return s
		})
		if o.wantSq && !o.gsqOK {
			o.reportSq(sq)
		}
	}
	for pl, a := range sums { // in sample order per channel
		gb[pl%M] += a
	}
	depthwise := C == G && M == G
	switch {
	case !o.Needs(0):
	case depthwise:
		depthwise32(win, N, C, x32, w32, g32, o.Grad32(0), gw)
		gw = nil
	case cm.dx != nil && o.acc32 != nil: // added into the pending gradient
		if err := applyDX(cm.dx, win, N, C, M, g32, o.acc32, o.arena, true); err != nil {
			return err
		}
		o.GIn32[0] = o.acc32
	case cm.dx != nil:
		if err := applyDX(cm.dx, win, N, C, M, g32, o.GradFull32(0), o.arena, false); err != nil {
			return err
		}
	default: // no transposed convolution fits: the columns' path, in float64
		convF32(win, N, C, M, G, w32, o.G(0), o.Grad(0))
	}
	if gw == nil {
		return nil
	}
	if depthwise {
		depthwise32(win, N, C, x32, w32, g32, nil, gw)
		return nil
	}
	convDW(win, N, C, M, G, x32, g32, gw)
	return nil
}

// sumAndSq32 is Σ v and Σ v² in float64 over float32 values, each in two
// addition chains.
func sumAndSq32(g []float32) (sum, sumSq float64) {
	var a0, a1, q0, q1 float64
	i := 0
	for ; i+2 <= len(g); i += 2 {
		v0, v1 := float64(g[i]), float64(g[i+1])
		a0, a1 = a0+v0, a1+v1
		q0, q1 = q0+v0*v0, q1+v1*v1
	}
	if i < len(g) {
		v := float64(g[i])
		a0 += v
		q0 += v * v
	}
	return a0 + a1, q0 + q1
}

// convMemo is what a Conv node's VJP keeps from batch to batch: the window
// geometry for these shapes and dX's convolution for this weight.
type convMemo struct {
	in, out []int // [C, spatial...] of input and output
	w       *tensor.Tensor
	win     *window
	dx      *convDX // nil: dX by columns (float64, depthwise, or no fitting padding)
}

// sum4 is Σ g in four addition chains (elements i ≡ 0, 1, 2, 3 mod 4),
// added at the end.
func sum4(g []float64) float64 {
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+4 <= len(g); i += 4 {
		s0 += g[i]
		s1 += g[i+1]
		s2 += g[i+2]
		s3 += g[i+3]
	}
	for ; i < len(g); i++ {
		s0 += g[i]
	}
	return (s0 + s1) + (s2 + s3)
}

// narrowSq writes dst[i] = float32(g[i]) and returns Σ g² in four addition
// chains (elements i ≡ 0, 1, 2, 3 mod 4) as sumSq.
func narrowSq(dst []float32, g []float64) float64 {
	dst = dst[:len(g)]
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+4 <= len(g); i += 4 {
		v := g[i : i+4 : i+4]
		d := dst[i : i+4 : i+4]
		s0 += v[0] * v[0]
		s1 += v[1] * v[1]
		s2 += v[2] * v[2]
		s3 += v[3] * v[3]
		d[0], d[1], d[2], d[3] = float32(v[0]), float32(v[1]), float32(v[2]), float32(v[3])
	}
	for ; i < len(g); i++ {
		s0 += g[i] * g[i]
		dst[i] = float32(g[i])
	}
	return (s0 + s1) + (s2 + s3)
}
