package probe

import (
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas32"

	"github.com/vitals-health/vitals/tensor"
)

// Recurrent operators: RNN, GRU, LSTM (computed in float32).
//
// Inputs X [seq, batch, input] (layout=1: [batch, seq, input]), W [dirs, G·hidden, input],
// R [dirs, G·hidden, hidden], optional B [dirs, 2·G·hidden] (Wb then Rb), sequence_lens [batch],
// initial_h [dirs, batch, hidden], and for LSTM initial_c and peepholes P [dirs, 3·hidden].
// Outputs Y [seq, dirs, batch, hidden] (layout=1: [batch, seq, dirs, hidden]),
// Y_h and Y_c [dirs, batch, hidden] (layout=1: [batch, dirs, hidden]).
// Past a batch entry's sequence length Y is zero and the state is held.
//
//	RNN:  Hₜ = f(XₜWᵀ + Hₜ₋₁Rᵀ + Wb + Rb)
//	GRU:  z = f(XₜW_zᵀ + Hₜ₋₁R_zᵀ + Wb_z + Rb_z),  r likewise,
//	      h = g(XₜW_hᵀ + (r⊙Hₜ₋₁)R_hᵀ + Rb_h + Wb_h)         (linear_before_reset=0)
//	      h = g(XₜW_hᵀ + r⊙(Hₜ₋₁R_hᵀ + Rb_h) + Wb_h)          (linear_before_reset≠0)
//	      Hₜ = (1−z)⊙h + z⊙Hₜ₋₁
//	LSTM: i = f(XₜW_iᵀ + Hₜ₋₁R_iᵀ + P_i⊙Cₜ₋₁ + Wb_i + Rb_i),  f likewise with P_f
//	      (input_forget: f = 1−i),  c = g(XₜW_cᵀ + Hₜ₋₁R_cᵀ + Wb_c + Rb_c),
//	      Cₜ = f⊙Cₜ₋₁ + i⊙c,  o = f(XₜW_oᵀ + Hₜ₋₁R_oᵀ + P_o⊙Cₜ + Wb_o + Rb_o),  Hₜ = o⊙h(Cₜ)
//
// Gate order in W, R, B: RNN [i]; GRU [z r h]; LSTM [i o f c]. clip bounds every
// activation's input to [−clip, clip].

func init() {
	reg("RNN", rnnKernel(rnnVanilla), 1, 7, 14, 22)
	reg("GRU", rnnKernel(rnnGRU), 1, 3, 7, 14, 22)
	reg("LSTM", rnnKernel(rnnLSTM), 1, 7, 14, 22)
}

type rnnKind int

const (
	rnnVanilla rnnKind = iota
	rnnGRU
	rnnLSTM
)

// rnnAct is one activation function with its parameters.
type rnnAct struct {
	name        string
	alpha, beta float32
}

// rnnActParams lists the activations that take alpha/beta, with their defaults.
var rnnActParams = map[string]struct {
	n           int
	alpha, beta float32
}{
	"relu": {0, 0, 0}, "tanh": {0, 0, 0}, "sigmoid": {0, 0, 0}, "softsign": {0, 0, 0}, "softplus": {0, 0, 0},
	"affine": {2, 1, 0}, "leakyrelu": {1, 0.01, 0}, "thresholdedrelu": {1, 1, 0},
	"scaledtanh": {2, 1, 1}, "hardsigmoid": {2, 0.2, 0.5}, "elu": {1, 1, 0},
}

// apply runs the activation in place on v.
func (a rnnAct) apply(v []float32) {
	al, be := a.alpha, a.beta
	switch a.name {
	case "relu":
		for i, x := range v {
			v[i] = max(x, 0)
		}
	case "tanh":
		for i, x := range v {
			v[i] = float32(math.Tanh(float64(x)))
		}
	case "sigmoid":
		for i, x := range v {
			v[i] = rnnSigmoid(x)
		}
	case "affine":
		for i, x := range v {
			v[i] = al*x + be
		}
	case "leakyrelu":
		for i, x := range v {
			if x < 0 {
				v[i] = al * x
			}
		}
	case "thresholdedrelu":
		for i, x := range v {
			if x <= al {
				v[i] = 0
			}
		}
	case "scaledtanh":
		for i, x := range v {
			v[i] = al * float32(math.Tanh(float64(be*x)))
		}
	case "hardsigmoid":
		for i, x := range v {
			v[i] = min(max(al*x+be, 0), 1)
		}
	case "elu":
		for i, x := range v {
			if x < 0 {
				v[i] = al * float32(math.Expm1(float64(x)))
			}
		}
	case "softsign":
		for i, x := range v {
			v[i] = x / (1 + float32(math.Abs(float64(x))))
		}
	case "softplus":
		for i, x := range v {
			if x > 30 {
				continue // log(1+eˣ) = x to float32 precision
			}
			v[i] = float32(math.Log1p(math.Exp(float64(x))))
		}
	}
}

func rnnSigmoid(x float32) float32 {
	if x >= 0 {
		return float32(1 / (1 + math.Exp(-float64(x))))
	}
	e := math.Exp(float64(x))
	return float32(e / (1 + e))
}

// rnnActivations reads activations/activation_alpha/activation_beta: n functions
// per direction, with defaults def; alpha and beta values are consumed in order
// by the functions that take them.
func rnnActivations(c *Call, def []string, dirs int) ([][]rnnAct, error) {
	names := def
	if a := c.Attr("activations"); a != nil && len(a.Strings) > 0 {
		names = a.Strings
	}
	n := len(def)
	if len(names) == n && dirs == 2 {
		names = append(append([]string{}, names...), names...)
	}
	if len(names) != n*dirs {
		return nil, fmt.Errorf("activations lists %d functions, want %d (%d per direction)", len(names), n*dirs, n)
	}
	alphas, betas := c.Floats("activation_alpha"), c.Floats("activation_beta")
	out := make([][]rnnAct, dirs)
	for i, name := range names {
		key := strings.ToLower(name)
		p, ok := rnnActParams[key]
		if !ok {
			return nil, fmt.Errorf("unsupported activation function %q", name)
		}
		a := rnnAct{name: key, alpha: p.alpha, beta: p.beta}
		if p.n >= 1 && len(alphas) > 0 {
			a.alpha, alphas = alphas[0], alphas[1:]
		}
		if p.n >= 2 && len(betas) > 0 {
			a.beta, betas = betas[0], betas[1:]
		}
		out[i/n] = append(out[i/n], a)
	}
	return out, nil
}

// rnnGemmT computes out[m×n] (row stride ldo) = a[m×k]·w[n×k]ᵀ + beta·out.
func rnnGemmT(a []float32, m, k int, w []float32, n int, out []float32, ldo int, beta float32) {
	if m == 0 || n == 0 {
		return
	}
	if k == 0 {
		if beta == 0 {
			for i := 0; i < m; i++ {
				clear(out[i*ldo : i*ldo+n])
			}
		}
		return
	}
	blas32.Gemm(blas.NoTrans, blas.Trans, 1,
		blas32.General{Rows: m, Cols: k, Stride: k, Data: a},
		blas32.General{Rows: n, Cols: k, Stride: k, Data: w},
		beta, blas32.General{Rows: m, Cols: n, Stride: ldo, Data: out})
}

// rnnSwap01 transposes the first two axes of a [a, b, rest] array.
func rnnSwap01(x []float32, a, b, rest int) []float32 {
	out := make([]float32, len(x))
	for i := 0; i < a; i++ {
		for j := 0; j < b; j++ {
			copy(out[(j*a+i)*rest:(j*a+i+1)*rest], x[(i*b+j)*rest:(i*b+j+1)*rest])
		}
	}
	return out
}

// rnnClip bounds v to [−clip, clip] when clip > 0.
func rnnClip(v []float32, clip float32) {
	if clip <= 0 {
		return
	}
	for i, x := range v {
		v[i] = min(max(x, -clip), clip)
	}
}

// rnnSpec holds one RNN node's validated dimensions and options.
type rnnSpec struct {
	kind                         rnnKind
	seq, batch, input, hid, dirs int
	gates                        int
	clip                         float32
	lbr, inputForget             bool
	lens                         []int
}

func rnnKernel(kind rnnKind) Kernel {
	return func(c *Call) error {
		if err := c.Need(3); err != nil {
			return err
		}
		x, w, r := c.In[0], c.In[1], c.In[2]
		for i, t := range []*tensor.Tensor{x, w, r} {
			if err := normCheckFloat(t); err != nil {
				return fmt.Errorf("input %d: %w", i, err)
			}
			if t.Rank() != 3 {
				return fmt.Errorf("input %d must have rank 3, got shape %v", i, t.Shape)
			}
		}
		sp := rnnSpec{kind: kind, gates: [...]int{1, 3, 4}[kind]}
		layout := c.Int("layout", 0)
		dir := c.Str("direction", "forward")
		switch dir {
		case "forward", "reverse":
			sp.dirs = 1
		case "bidirectional":
			sp.dirs = 2
		default:
			return fmt.Errorf("unknown direction %q", dir)
		}
		xs := ToFloat32(x)
		if layout != 0 {
			sp.batch, sp.seq = x.Shape[0], x.Shape[1]
			xs = rnnSwap01(xs, sp.batch, sp.seq, x.Shape[2])
		} else {
			sp.seq, sp.batch = x.Shape[0], x.Shape[1]
		}
		sp.input = x.Shape[2]
		sp.hid = int(c.Int("hidden_size", 0))
		if sp.hid <= 0 {
			sp.hid = w.Shape[1] / sp.gates
		}
		gh := sp.gates * sp.hid
		if !tensor.SameShape(w.Shape, []int{sp.dirs, gh, sp.input}) {
			return fmt.Errorf("W has shape %v, want [%d %d %d]", w.Shape, sp.dirs, gh, sp.input)
		}
		if !tensor.SameShape(r.Shape, []int{sp.dirs, gh, sp.hid}) {
			return fmt.Errorf("R has shape %v, want [%d %d %d]", r.Shape, sp.dirs, gh, sp.hid)
		}
		sp.clip = c.Float("clip", 0)
		sp.lbr = c.Int("linear_before_reset", 0) != 0
		sp.inputForget = c.Int("input_forget", 0) != 0

		bias := make([]float32, sp.dirs*2*gh)
		if b := c.Input(3); b != nil {
			if b.Size() != len(bias) {
				return fmt.Errorf("B has shape %v, want [%d %d]", b.Shape, sp.dirs, 2*gh)
			}
			copy(bias, ToFloat32(b))
		}
		sp.lens = make([]int, sp.batch)
		for i := range sp.lens {
			sp.lens[i] = sp.seq
		}
		if sl := c.Input(4); sl != nil {
			if sl.Size() != sp.batch {
				return fmt.Errorf("sequence_lens has %d elements, want %d", sl.Size(), sp.batch)
			}
			for i, v := range sl.Ints() {
				if v < 0 || v > sp.seq {
					return fmt.Errorf("sequence_lens[%d] = %d outside [0, %d]", i, v, sp.seq)
				}
				sp.lens[i] = v
			}
		}
		stateIn := func(i int, what string) ([]float32, error) {
			st := make([]float32, sp.dirs*sp.batch*sp.hid)
			t := c.Input(i)
			if t == nil {
				return st, nil
			}
			if t.Size() != len(st) {
				return nil, fmt.Errorf("%s has shape %v, want %d elements", what, t.Shape, len(st))
			}
			v := ToFloat32(t)
			if layout != 0 {
				v = rnnSwap01(v, sp.batch, sp.dirs, sp.hid)
			}
			copy(st, v)
			return st, nil
		}
		h0, err := stateIn(5, "initial_h")
		if err != nil {
			return err
		}
		var c0, peep []float32
		def := []string{"Tanh"}
		switch kind {
		case rnnGRU:
			def = []string{"Sigmoid", "Tanh"}
		case rnnLSTM:
			def = []string{"Sigmoid", "Tanh", "Tanh"}
			if c0, err = stateIn(6, "initial_c"); err != nil {
				return err
			}
			peep = make([]float32, sp.dirs*3*sp.hid)
			if p := c.Input(7); p != nil {
				if p.Size() != len(peep) {
					return fmt.Errorf("P has shape %v, want [%d %d]", p.Shape, sp.dirs, 3*sp.hid)
				}
				copy(peep, ToFloat32(p))
			}
		}
		acts, err := rnnActivations(c, def, sp.dirs)
		if err != nil {
			return err
		}
		ws, rs := ToFloat32(w), ToFloat32(r)
		y := make([]float32, sp.seq*sp.dirs*sp.batch*sp.hid)
		hn := sp.batch * sp.hid
		for d := 0; d < sp.dirs; d++ {
			reverse := dir == "reverse" || d == 1
			var cd, pd []float32
			if kind == rnnLSTM {
				cd, pd = c0[d*hn:(d+1)*hn], peep[d*3*sp.hid:(d+1)*3*sp.hid]
			}
			sp.runDir(d, reverse, xs, ws[d*gh*sp.input:(d+1)*gh*sp.input], rs[d*gh*sp.hid:(d+1)*gh*sp.hid],
				bias[d*2*gh:(d+1)*2*gh], h0[d*hn:(d+1)*hn], cd, pd, acts[d], y)
		}
		// h0 and c0 now hold the final states
		dt := x.DType
		if layout != 0 {
			c.Set(0, rnnOut(dt, rnnSwap01(y, sp.seq*sp.dirs, sp.batch, sp.hid), sp.batch, sp.seq, sp.dirs, sp.hid))
			c.Set(1, rnnOut(dt, rnnSwap01(h0, sp.dirs, sp.batch, sp.hid), sp.batch, sp.dirs, sp.hid))
			if kind == rnnLSTM {
				c.Set(2, rnnOut(dt, rnnSwap01(c0, sp.dirs, sp.batch, sp.hid), sp.batch, sp.dirs, sp.hid))
			}
		} else {
			c.Set(0, rnnOut(dt, y, sp.seq, sp.dirs, sp.batch, sp.hid))
			c.Set(1, rnnOut(dt, h0, sp.dirs, sp.batch, sp.hid))
			if kind == rnnLSTM {
				c.Set(2, rnnOut(dt, c0, sp.dirs, sp.batch, sp.hid))
			}
		}
		return nil
	}
}

// rnnOut wraps float32 results as a tensor of dtype dt (float32 or float64).
func rnnOut(dt tensor.DType, v []float32, shape ...int) *tensor.Tensor {
	if dt == tensor.Float64 {
		out := make([]float64, len(v))
		for i, x := range v {
			out[i] = float64(x)
		}
		return tensor.From(out, shape...)
	}
	return tensor.From(v, shape...)
}

// runDir runs direction d over the sequence, updating h (and cst for LSTM) in
// place and writing Y[t, d, b, :]. w, r, bias, peep are this direction's slices.
func (sp *rnnSpec) runDir(d int, reverse bool, xs, w, r, bias, h, cst, peep []float32, acts []rnnAct, y []float32) {
	H, B, S, G := sp.hid, sp.batch, sp.seq, sp.gates
	gh := G * H
	// xw[t, b, :] = Xₜ·Wᵀ + Wb + Rb (GRU with linear_before_reset keeps Rb_h for the step)
	xw := make([]float32, S*B*gh)
	bsum := make([]float32, gh)
	for i := range bsum {
		bsum[i] = bias[i] + bias[gh+i]
	}
	if sp.kind == rnnGRU && sp.lbr {
		copy(bsum[2*H:], bias[2*H:3*H])
	}
	for row := 0; row < S*B; row++ {
		copy(xw[row*gh:(row+1)*gh], bsum)
	}
	rnnGemmT(xs, S*B, sp.input, w, gh, xw, gh, 1)

	hr := make([]float32, B*gh) // Hₜ₋₁·Rᵀ
	gates := make([]float32, B*gh)
	tmp := make([]float32, H)
	var rh, rhr []float32
	if sp.kind == rnnGRU && !sp.lbr {
		rh, rhr = make([]float32, B*H), make([]float32, B*H)
	}
	f := acts[0]
	for s := 0; s < S; s++ {
		if sp.kind == rnnGRU && !sp.lbr {
			rnnGemmT(h, B, H, r[:2*H*H], 2*H, hr, gh, 0) // z and r columns only
		} else {
			rnnGemmT(h, B, H, r, gh, hr, gh, 0)
		}
		for b := 0; b < B; b++ {
			L := sp.lens[b]
			if s >= L {
				continue
			}
			t := s
			if reverse {
				t = L - 1 - s
			}
			g := gates[b*gh : (b+1)*gh]
			xr := xw[(t*B+b)*gh : (t*B+b+1)*gh]
			hrb := hr[b*gh : (b+1)*gh]
			hb := h[b*H : (b+1)*H]
			switch sp.kind {
			case rnnVanilla:
				for j := range g {
					g[j] = xr[j] + hrb[j]
				}
				rnnClip(g, sp.clip)
				f.apply(g)
				copy(hb, g)
			case rnnLSTM:
				for j := range g {
					g[j] = xr[j] + hrb[j]
				}
				cb := cst[b*H : (b+1)*H]
				gi, gO, gf, gc := g[:H], g[H:2*H], g[2*H:3*H], g[3*H:]
				for j := range H {
					gi[j] += peep[j] * cb[j]
					gf[j] += peep[2*H+j] * cb[j]
				}
				rnnClip(gi, sp.clip)
				f.apply(gi)
				if sp.inputForget {
					for j := range H {
						gf[j] = 1 - gi[j]
					}
				} else {
					rnnClip(gf, sp.clip)
					f.apply(gf)
				}
				rnnClip(gc, sp.clip)
				acts[1].apply(gc)
				for j := range H {
					cb[j] = gf[j]*cb[j] + gi[j]*gc[j]
					gO[j] += peep[H+j] * cb[j]
				}
				rnnClip(gO, sp.clip)
				f.apply(gO)
				copy(tmp, cb)
				acts[2].apply(tmp)
				for j := range H {
					hb[j] = gO[j] * tmp[j]
				}
			case rnnGRU:
				for j := 0; j < 2*H; j++ {
					g[j] = xr[j] + hrb[j]
				}
				rnnClip(g[:2*H], sp.clip)
				f.apply(g[:2*H])
				if sp.lbr {
					gz, gr, gn := g[:H], g[H:2*H], g[2*H:]
					rbh := bias[5*H : 6*H] // Rb_h in [Wb_z Wb_r Wb_h Rb_z Rb_r Rb_h]
					for j := range H {
						gn[j] = xr[2*H+j] + gr[j]*(hrb[2*H+j]+rbh[j])
					}
					rnnClip(gn, sp.clip)
					acts[1].apply(gn)
					for j := range H {
						hb[j] = (1-gz[j])*gn[j] + gz[j]*hb[j]
					}
				} else {
					for j := range H {
						rh[b*H+j] = g[H+j] * hb[j]
					}
				}
			}
			if sp.kind != rnnGRU || sp.lbr {
				copy(y[((t*sp.dirs+d)*B+b)*H:], hb)
			}
		}
		if sp.kind != rnnGRU || sp.lbr {
			continue
		}
		// GRU, linear_before_reset=0: h = g(XₜW_hᵀ + (r⊙Hₜ₋₁)R_hᵀ + Rb_h + Wb_h)
		rnnGemmT(rh, B, H, r[2*H*H:], H, rhr, H, 0)
		for b := 0; b < B; b++ {
			L := sp.lens[b]
			if s >= L {
				continue
			}
			t := s
			if reverse {
				t = L - 1 - s
			}
			g := gates[b*gh : (b+1)*gh]
			xr := xw[(t*B+b)*gh : (t*B+b+1)*gh]
			hb := h[b*H : (b+1)*H]
			gz, gn := g[:H], g[2*H:]
			for j := range H {
				gn[j] = xr[2*H+j] + rhr[b*H+j]
			}
			rnnClip(gn, sp.clip)
			acts[1].apply(gn)
			for j := range H {
				hb[j] = (1-gz[j])*gn[j] + gz[j]*hb[j]
			}
			copy(y[((t*sp.dirs+d)*B+b)*H:], hb)
		}
	}
}
