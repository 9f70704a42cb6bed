package grad

import (
	"fmt"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// dL/dX of a float32 Conv as forward convolutions of the output gradient.
// Along one spatial axis, with y[o] = Σ_t W[t]·x[o·s − pb + t·d],
//
//	dX[i] = Σ_{t : (i + pb − t·d) ≡ 0 mod s} W[t]·G[(i + pb − t·d)/s].
//
// Split the input positions by phase r = i mod s, i = s·j + r: the taps
// that reach phase r are T_r = {t : (r + pb − t·d) ≡ 0 mod s}, equally
// spaced by Δ = s/gcd(s, d), and G's index (r + pb − t·d)/s + j moves by
// −Δ·d/s from one to the next. So dX at phase r is a stride-1 convolution
// of G with the taps of T_r reversed, dilation Δ·d/s, pads
// pb_r = −(r + pb − t_last·d)/s before and whatever brings its length to
// ⌈(in − r)/s⌉ after; with stride 1 there is one phase, every tap, and the
// usual transposed convolution (pads (k−1)·d − pb). Input and output
// channels swap within each group: W̃[g·Cg + c, m, u] = W[g·Mg + m, c, t(u)].
// Each phase runs through the forward pass's float32 convolution (implicit
// GEMM with k = Mg·|T_r|), instead of a product with k = Mg whose Cg·K
// column rows are then folded back onto the image; together the phases do
// the forward's multiply-adds, no products with zeros.

// convDX is dX's convolutions for one Conv node, kept per tape.
type convDX struct {
	w      *tensor.Tensor // the forward weight they were made from
	phases []dxPhase
	// cover: the phases reach every input position (else gx is cleared first)
	cover bool
	run   probe.Kernel
}

// dxPhase is one phase's convolution and where its outputs go.
type dxPhase struct {
	node *loader.Node
	wt   *tensor.Tensor // W̃_r [C, Mg, |T_r|...]
	// at[q] is the flat spatial input position of the phase's output q; nil
	// when they are the same (stride 1)
	at []int
	J  int // output positions of the phase
	// rows, step: for 2-D phases, the phase's rows (J/rows outputs each) land
	// at at[row's first output], at[…] + step, at[…] + 2·step, …
	rows, step int
}

// dxAxis is one axis of a phase: the taps reaching it (ascending), the
// convolution's dilation and pads, and the phase's length.
type dxAxis struct {
	taps           []int
	dil, pb, pe, J int
}

// newConvDX prepares dX's convolutions, or returns nil when a phase's
// padding would be negative (padding of a whole window span or more).
func newConvDX(win *window, W *tensor.Tensor, w []float32, C, M, G int, opset int) *convDX {
	nd := len(win.in)
	run, ok := probe.Lookup("", "Conv", opset)
	if !ok {
		return nil
	}
	Cg, Mg, K := C/G, M/G, win.K
	cd := &convDX{w: W, run: run, cover: true}
	axes := make([][]dxAxis, nd) // per axis, per residue
	for a := 0; a < nd; a++ {
		s, d, pb := win.stride[a], win.dil[a], win.padBeg[a]
		for r := 0; r < s; r++ {
			var ap dxAxis
			ap.J = (win.in[a] - r + s - 1) / s
			for t := 0; t < win.k[a]; t++ {
				if ((r+pb-t*d)%s+s)%s == 0 {
					ap.taps = append(ap.taps, t)
				}
			}
			if len(ap.taps) == 0 || ap.J <= 0 {
				cd.cover = false
				axes[a] = append(axes[a], ap)
				continue
			}
			ap.dil = 1
			if len(ap.taps) > 1 {
				ap.dil = (ap.taps[1] - ap.taps[0]) * d / s
			}
			last := ap.taps[len(ap.taps)-1]
			ap.pb = -(r + pb - last*d) / s
			ap.pe = ap.J - win.out[a] - ap.pb + (len(ap.taps)-1)*ap.dil
			if ap.pb < 0 || ap.pe < 0 {
				return nil
			}
			axes[a] = append(axes[a], ap)
		}
	}
	// every combination of the axes' residues
	rs := make([]int, nd)
	for {
		ps := make([]dxAxis, nd)
		empty := false
		for a := range rs {
			ps[a] = axes[a][rs[a]]
			empty = empty || len(ps[a].taps) == 0 || ps[a].J <= 0
		}
		if !empty {
			cd.phases = append(cd.phases, newDXPhase(win, ps, rs, w, Cg, Mg, K, G))
		}
		a := nd - 1
		for ; a >= 0; a-- {
			if rs[a]++; rs[a] < win.stride[a] {
				break
			}
			rs[a] = 0
		}
		if a < 0 {
			break
		}
	}
	return cd
}

// newDXPhase builds the convolution of the phase with residues rs.
func newDXPhase(win *window, ps []dxAxis, rs []int, w []float32, Cg, Mg, K, G int) dxPhase {
	nd := len(ps)
	ks, dil, pads := make([]int64, nd), make([]int64, nd), make([]int64, 2*nd)
	Js := make([]int, nd)
	kr := 1
	for a, p := range ps {
		ks[a], dil[a], pads[a], pads[nd+a] = int64(len(p.taps)), int64(p.dil), int64(p.pb), int64(p.pe)
		Js[a] = p.J
		kr *= len(p.taps)
	}
	// tapOf[u] is the forward tap (flat) of the phase's tap u: reversed on every axis
	tapOf := make([]int, kr)
	u := make([]int, nd)
	for q := range tapOf {
		t := 0
		for a, p := range ps {
			t = t*win.k[a] + p.taps[len(p.taps)-1-u[a]]
		}
		tapOf[q] = t
		incrShape(u, ks)
	}
	C := G * Cg
	wt := make([]float32, C*Mg*kr)
	for grp := 0; grp < G; grp++ {
		for m := 0; m < Mg; m++ {
			for c := 0; c < Cg; c++ {
				src := w[((grp*Mg+m)*Cg+c)*K:][:K]
				dst := wt[((grp*Cg+c)*Mg+m)*kr:][:kr]
				for q, t := range tapOf {
					dst[q] = src[t]
				}
			}
		}
	}
	ph := dxPhase{J: prod(Js)}
	identity := true
	for a := range ps {
		identity = identity && win.stride[a] == 1 && Js[a] == win.in[a]
	}
	if !identity {
		ph.at = make([]int, ph.J)
		j := make([]int, nd)
		for q := range ph.at {
			off := 0
			for a := range ps {
				off = off*win.in[a] + j[a]*win.stride[a] + rs[a]
			}
			ph.at[q] = off
			incr(j, Js)
		}
		if nd == 2 && Js[1] > 0 {
			ph.rows, ph.step = Js[0], win.stride[1]
		}
	}
	ph.node = &loader.Node{Name: "dX", OpType: "Conv", Inputs: []string{"G", "W"}, Outputs: []string{"dX"}, Attrs: map[string]*loader.Attr{
		"kernel_shape": {Name: "kernel_shape", Kind: loader.AttrInts, Ints: ks},
		"dilations":    {Name: "dilations", Kind: loader.AttrInts, Ints: dil},
		"strides":      {Name: "strides", Kind: loader.AttrInts, Ints: ones64(nd)},
		"pads":         {Name: "pads", Kind: loader.AttrInts, Ints: pads},
		"group":        {Name: "group", Kind: loader.AttrInt, I: int64(G)},
	}}
	kshape := make([]int, nd)
	for a := range ks {
		kshape[a] = int(ks[a])
	}
	ph.wt = tensor.From(wt, append([]int{C, Mg}, kshape...)...)
	return ph
}

// incrShape is incr for an int64 shape.
func incrShape(idx []int, shape []int64) {
	for a := len(idx) - 1; a >= 0; a-- {
		idx[a]++
		if int64(idx[a]) < shape[a] {
			return
		}
		idx[a] = 0
	}
}

func ones64(n int) []int64 {
	s := make([]int64, n)
	for i := range s {
		s[i] = 1
	}
	return s
}

// applyDX writes dX into gx (every element, float64 or float32), gu being
// the output gradient [N, M, out...] in float32; with add, it adds dX to
// gx (the phases reach each input position once at most).
func applyDX[T float32 | float64](cd *convDX, win *window, N, C, M int, gu []float32, gx []T, arena *tensor.Arena, add bool) error {
	gt := tensor.From(gu, append([]int{N, M}, win.out...)...)
	if !cd.cover && !add {
		clear(gx)
	}
	for i := range cd.phases {
		ph := &cd.phases[i]
		c := &probe.Call{Node: ph.node, In: []*tensor.Tensor{gt, ph.wt}, Out: make([]*tensor.Tensor, 1), Opset: 11}
		c.ConstInput(1) // ph.wt is kept with the node's memo
		if arena != nil {
			c.UseArena(arena)
		}
		if err := cd.run(c); err != nil {
			return err
		}
		if arena != nil && arena.Pool != nil {
			// read below, then dead: the next convolution's output reuses it
			defer arena.Pool.Put(c.Out[0])
		}
		y := c.Out[0].F32()
		if len(y) != N*C*ph.J || len(gx) != N*C*win.I {
			return fmt.Errorf("Conv gradient: transposed convolution gave %v, want %d×%d values", c.Out[0].Shape, N*C, ph.J)
		}
		if ph.at == nil {
			split(len(gx), func(lo, hi int) {
				if add {
					for i := lo; i < hi; i++ {
						gx[i] += T(y[i])
					}
					return
				}
				for i := lo; i < hi; i++ {
					gx[i] = T(y[i])
				}
			})
			continue
		}
		split(len(y), func(lo, hi int) {
			for pl := (lo + ph.J - 1) / ph.J; pl*ph.J < hi && pl < N*C; pl++ {
				src, dst := y[pl*ph.J:(pl+1)*ph.J], gx[pl*win.I:(pl+1)*win.I]
				if ph.rows > 0 { // 2-D: rows of the phase, every s-th input column
					cols := ph.J / ph.rows
					for jr := 0; jr < ph.rows; jr++ {
						d := dst[ph.at[jr*cols]:]
						for jc, v := range src[jr*cols : (jr+1)*cols] {
							if add {
								d[jc*ph.step] += T(v)
							} else {
								d[jc*ph.step] = T(v)
							}
						}
					}
					continue
				}
				for q, at := range ph.at {
					if add {
						dst[at] += T(src[q])
					} else {
						dst[at] = T(src[q])
					}
				}
			}
		})
	}
	return nil
}
