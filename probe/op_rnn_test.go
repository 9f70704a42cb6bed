package probe

import (
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// The conformance data covers forward runs with default activations only; these
// tests check reverse and bidirectional runs, sequence_lens, layout=1, clip,
// peepholes, input_forget, linear_before_reset and non-default activations
// against a plain per-batch, per-step reference written independently below.

type rnnRefCase struct {
	kind                   rnnKind
	dir                    string
	S, B, I, H             int
	lens                   []int
	acts                   []string
	alphas, betas          []float32
	clip                   float32
	lbr, inputForget, peep bool
	layout                 int
}

func rnnRefAct(name string, a, b, x float64) float64 {
	switch name {
	case "Sigmoid":
		return 1 / (1 + math.Exp(-x))
	case "Tanh":
		return math.Tanh(x)
	case "Relu":
		return math.Max(x, 0)
	case "HardSigmoid":
		return math.Max(0, math.Min(1, a*x+b))
	case "LeakyRelu":
		if x < 0 {
			return a * x
		}
		return x
	case "ScaledTanh":
		return a * math.Tanh(b*x)
	case "Elu":
		if x < 0 {
			return a * (math.Exp(x) - 1)
		}
		return x
	case "Softsign":
		return x / (1 + math.Abs(x))
	case "Softplus":
		return math.Log(1 + math.Exp(x))
	case "Affine":
		return a*x + b
	}
	panic(name)
}

func TestRNNAgainstReference(t *testing.T) {
	cases := []rnnRefCase{
		{kind: rnnVanilla, dir: "reverse", S: 4, B: 3, I: 2, H: 3, lens: []int{4, 2, 0}},
		{kind: rnnVanilla, dir: "bidirectional", S: 3, B: 2, I: 3, H: 2, acts: []string{"Relu", "Softsign"}, layout: 1},
		{kind: rnnGRU, dir: "bidirectional", S: 5, B: 3, I: 2, H: 4, lens: []int{5, 3, 1}},
		{kind: rnnGRU, dir: "forward", S: 4, B: 2, I: 3, H: 3, lbr: true, clip: 0.7},
		{kind: rnnGRU, dir: "reverse", S: 3, B: 2, I: 2, H: 2, lbr: true, acts: []string{"HardSigmoid", "ScaledTanh"}, alphas: []float32{0.3, 0.9}, betas: []float32{0.4, 1.2}, layout: 1},
		{kind: rnnLSTM, dir: "bidirectional", S: 4, B: 3, I: 3, H: 2, lens: []int{2, 4, 3}, peep: true},
		{kind: rnnLSTM, dir: "forward", S: 3, B: 2, I: 2, H: 3, inputForget: true, clip: 0.5, acts: []string{"Sigmoid", "Elu", "Softplus"}, alphas: []float32{0.8}},
		{kind: rnnLSTM, dir: "reverse", S: 3, B: 2, I: 2, H: 2, peep: true, layout: 1, acts: []string{"Sigmoid", "LeakyRelu", "Affine"}, alphas: []float32{0.2, 0.5}, betas: []float32{0.1}},
	}
	for ci, tc := range cases {
		rng := rand.New(rand.NewSource(int64(ci + 1)))
		G := [...]int{1, 3, 4}[tc.kind]
		D := 1
		if tc.dir == "bidirectional" {
			D = 2
		}
		S, B, I, H := tc.S, tc.B, tc.I, tc.H
		rnd := func(n int) []float32 {
			v := make([]float32, n)
			for i := range v {
				v[i] = float32(rng.NormFloat64() * 0.8)
			}
			return v
		}
		x, w, r, bias := rnd(S*B*I), rnd(D*G*H*I), rnd(D*G*H*H), rnd(D*2*G*H)
		h0, c0, p := rnd(D*B*H), rnd(D*B*H), rnd(D*3*H)
		lens := tc.lens
		if lens == nil {
			lens = make([]int, B)
			for i := range lens {
				lens[i] = S
			}
		}
		// reference in [S,B,I] layout
		acts := tc.acts
		if acts == nil {
			acts = [][]string{{"Tanh"}, {"Sigmoid", "Tanh"}, {"Sigmoid", "Tanh", "Tanh"}}[tc.kind]
		}
		na := len(acts)
		al := make([]float64, na)
		be := make([]float64, na)
		ai, bi := 0, 0
		for k, a := range acts {
			al[k], be[k] = map[string]float64{"LeakyRelu": 0.01, "HardSigmoid": 0.2, "Elu": 1, "ScaledTanh": 1, "Affine": 1}[a], map[string]float64{"HardSigmoid": 0.5, "ScaledTanh": 1}[a]
			switch a {
			case "LeakyRelu", "Elu", "HardSigmoid", "ScaledTanh", "Affine":
				if ai < len(tc.alphas) {
					al[k] = float64(tc.alphas[ai])
					ai++
				}
			}
			switch a {
			case "HardSigmoid", "ScaledTanh", "Affine":
				if bi < len(tc.betas) {
					be[k] = float64(tc.betas[bi])
					bi++
				}
			}
		}
		nPer := [...]int{1, 2, 3}[tc.kind]
		off := 0 // activation offset of the current direction
		act := func(k int, v float64) float64 {
			if tc.clip > 0 {
				v = math.Max(-float64(tc.clip), math.Min(float64(tc.clip), v))
			}
			return rnnRefAct(acts[off+k], al[off+k], be[off+k], v)
		}
		wantY := make([]float64, S*D*B*H)
		wantH := make([]float64, D*B*H)
		wantC := make([]float64, D*B*H)
		for d := 0; d < D; d++ {
			rev := tc.dir == "reverse" || d == 1
			if na == nPer*D {
				off = d * nPer
			}
			for b := 0; b < B; b++ {
				hs := make([]float64, H)
				cs := make([]float64, H)
				for j := range H {
					hs[j], cs[j] = float64(h0[(d*B+b)*H+j]), float64(c0[(d*B+b)*H+j])
				}
				// pre(g, j, v) = Xₜ·W[g·H+j] + v·R[g·H+j] + Wb + Rb
				dotX := func(t, g, j int) float64 {
					s := float64(bias[d*2*G*H+g*H+j])
					for k := range I {
						s += float64(x[(t*B+b)*I+k]) * float64(w[((d*G+g)*H+j)*I+k])
					}
					return s
				}
				dotR := func(g, j int, v []float64) float64 {
					s := float64(bias[d*2*G*H+G*H+g*H+j])
					for k := range H {
						s += v[k] * float64(r[((d*G+g)*H+j)*H+k])
					}
					return s
				}
				for step := 0; step < lens[b]; step++ {
					t := step
					if rev {
						t = lens[b] - 1 - step
					}
					nh := make([]float64, H)
					switch tc.kind {
					case rnnVanilla:
						for j := range H {
							nh[j] = act(0, dotX(t, 0, j)+dotR(0, j, hs))
						}
					case rnnGRU:
						z, rr := make([]float64, H), make([]float64, H)
						for j := range H {
							z[j] = act(0, dotX(t, 0, j)+dotR(0, j, hs))
							rr[j] = act(0, dotX(t, 1, j)+dotR(1, j, hs))
						}
						rh := make([]float64, H)
						for j := range H {
							rh[j] = rr[j] * hs[j]
						}
						for j := range H {
							var hc float64
							if tc.lbr {
								hc = act(1, dotX(t, 2, j)+rr[j]*dotR(2, j, hs))
							} else {
								hc = act(1, dotX(t, 2, j)+dotR(2, j, rh))
							}
							nh[j] = (1-z[j])*hc + z[j]*hs[j]
						}
					case rnnLSTM:
						nc := make([]float64, H)
						pv := func(k, j int) float64 {
							if !tc.peep {
								return 0
							}
							return float64(p[d*3*H+k*H+j])
						}
						for j := range H {
							i := act(0, dotX(t, 0, j)+dotR(0, j, hs)+pv(0, j)*cs[j])
							f := act(0, dotX(t, 2, j)+dotR(2, j, hs)+pv(2, j)*cs[j])
							if tc.inputForget {
								f = 1 - i
							}
							cc := act(1, dotX(t, 3, j)+dotR(3, j, hs))
							nc[j] = f*cs[j] + i*cc
							o := act(0, dotX(t, 1, j)+dotR(1, j, hs)+pv(1, j)*nc[j])
							nh[j] = o * rnnRefAct(acts[off+2], al[off+2], be[off+2], nc[j])
						}
						cs = nc
					}
					hs = nh
					for j := range H {
						wantY[((t*D+d)*B+b)*H+j] = hs[j]
					}
				}
				for j := range H {
					wantH[(d*B+b)*H+j], wantC[(d*B+b)*H+j] = hs[j], cs[j]
				}
			}
		}
		// run the kernel
		xs, hs0, cs0 := x, h0, c0
		xShape, sShape := []int{S, B, I}, []int{D, B, H}
		if tc.layout == 1 {
			xs, hs0, cs0 = rnnSwap01(x, S, B, I), rnnSwap01(h0, D, B, H), rnnSwap01(c0, D, B, H)
			xShape, sShape = []int{B, S, I}, []int{B, D, H}
		}
		attrs := map[string]*loader.Attr{
			"hidden_size": {Kind: loader.AttrInt, I: int64(H)},
			"direction":   {Kind: loader.AttrString, S: tc.dir},
			"layout":      {Kind: loader.AttrInt, I: int64(tc.layout)},
		}
		if tc.acts != nil {
			attrs["activations"] = &loader.Attr{Kind: loader.AttrStrings, Strings: tc.acts}
		}
		if tc.alphas != nil {
			attrs["activation_alpha"] = &loader.Attr{Kind: loader.AttrFloats, Floats: tc.alphas}
		}
		if tc.betas != nil {
			attrs["activation_beta"] = &loader.Attr{Kind: loader.AttrFloats, Floats: tc.betas}
		}
		if tc.clip > 0 {
			attrs["clip"] = &loader.Attr{Kind: loader.AttrFloat, F: tc.clip}
		}
		if tc.lbr {
			attrs["linear_before_reset"] = &loader.Attr{Kind: loader.AttrInt, I: 1}
		}
		if tc.inputForget {
			attrs["input_forget"] = &loader.Attr{Kind: loader.AttrInt, I: 1}
		}
		lens32 := make([]int32, B)
		for i, v := range lens {
			lens32[i] = int32(v)
		}
		in := []*tensor.Tensor{tensor.From(xs, xShape...), tensor.From(w, D, G*H, I), tensor.From(r, D, G*H, H),
			tensor.From(bias, D, 2*G*H), tensor.From(lens32, B), tensor.From(hs0, sShape...)}
		outs := []string{"Y", "Y_h"}
		if tc.kind == rnnLSTM {
			var pt *tensor.Tensor
			if tc.peep {
				pt = tensor.From(p, D, 3*H)
			}
			in = append(in, tensor.From(cs0, sShape...), pt)
			outs = append(outs, "Y_c")
		}
		c := &Call{Node: &loader.Node{Name: "rnn", Attrs: attrs, Outputs: outs}, In: in, Out: make([]*tensor.Tensor, len(outs)), Opset: 14}
		if err := rnnKernel(tc.kind)(c); err != nil {
			t.Fatalf("case %d: %v", ci, err)
		}
		gotY, gotH := c.Out[0].F32(), c.Out[1].F32()
		if tc.layout == 1 {
			gotY, gotH = rnnSwap01(gotY, B, S*D, H), rnnSwap01(gotH, B, D, H)
		}
		check := func(what string, got []float32, want []float64) {
			for i := range want {
				if math.Abs(float64(got[i])-want[i]) > 1e-4+1e-4*math.Abs(want[i]) {
					t.Errorf("case %d %s: element %d = %g, want %g", ci, what, i, got[i], want[i])
					return
				}
			}
		}
		check("Y", gotY, wantY)
		check("Y_h", gotH, wantH)
		if tc.kind == rnnLSTM {
			gotC := c.Out[2].F32()
			if tc.layout == 1 {
				gotC = rnnSwap01(gotC, B, D, H)
			}
			check("Y_c", gotC, wantC)
		}
	}
}
