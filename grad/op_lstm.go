package grad

import (
	"fmt"
	"math"
	"strings"
)

// LSTM (ONNX gate order i o f c, default activations sigmoid/tanh/tanh):
// the forward pass is recomputed in float64 to keep every gate, then
// back-propagated through time. Per step, with dH and dC the gradients
// reaching Hₜ and Cₜ:
//
//	do = dH⊙tanh(Cₜ),   dCₜ += dH⊙o⊙(1 − tanh²(Cₜ)) + da_o⊙P_o
//	da_i = dCₜ⊙c̃⊙i(1−i),  da_f = dCₜ⊙Cₜ₋₁⊙f(1−f),  da_c = dCₜ⊙i⊙(1−c̃²),  da_o = do⊙o(1−o)
//	dX += da·W,  dHₜ₋₁ = da·R,  dW += daᵀ·Xₜ,  dR += daᵀ·Hₜ₋₁,  dWb = dRb += Σ da
//	dCₜ₋₁ = dCₜ⊙f + da_i⊙P_i + da_f⊙P_f
//
// Variants without a rule here (other activations, clip, input_forget,
// layout 1, sequence_lens shorter than the sequence) are listed as missing.

func init() { register("LSTM", lstmVJP) }

// rnnDefault reports whether the node uses only the default activations
// and no clip, and which directions it runs.
func rnnVariant(o *Op, def []string) (dirs int, reverse []bool, err error) {
	dir := o.Str("direction", "forward")
	switch dir {
	case "forward":
		reverse = []bool{false}
	case "reverse":
		reverse = []bool{true}
	case "bidirectional":
		reverse = []bool{false, true}
	default:
		return 0, nil, fmt.Errorf("unknown direction %q", dir)
	}
	if a := o.Attr("activations"); a != nil {
		for i, s := range a.Strings {
			if !strings.EqualFold(s, def[i%len(def)]) {
				return 0, nil, NoRule("activation " + s)
			}
		}
	}
	if o.Has("clip") {
		return 0, nil, NoRule("clip")
	}
	if o.Int("layout", 0) != 0 {
		return 0, nil, NoRule("layout 1")
	}
	if sl := o.Input(4); sl != nil {
		lens, err := Ints(sl)
		if err != nil {
			return 0, nil, err
		}
		for _, l := range lens {
			if l != o.In[0].Shape[0] {
				return 0, nil, NoRule("sequence_lens shorter than the sequence")
			}
		}
	}
	return len(reverse), reverse, nil
}

func sigm(x float64) float64 { return 1 / (1 + math.Exp(-x)) }

func lstmVJP(o *Op) error {
	if err := o.Need(3); err != nil {
		return err
	}
	dirs, reverse, err := rnnVariant(o, []string{"sigmoid", "tanh", "tanh"})
	if err != nil {
		return err
	}
	if o.Int("input_forget", 0) != 0 {
		return NoRule("input_forget")
	}
	X, W := o.In[0], o.In[1]
	T, B, I := X.Shape[0], X.Shape[1], X.Shape[2]
	H := int(o.Int("hidden_size", int64(W.Shape[1]/4)))
	if W.Shape[0] != dirs || W.Shape[1] != 4*H || W.Shape[2] != I {
		return fmt.Errorf("LSTM weight %v does not fit %d direction(s), hidden %d, input %d", W.Shape, dirs, H, I)
	}
	x, w, r := o.X(0), o.X(1), o.X(2)
	var bias, h0, c0, peep []float64
	if o.Input(3) != nil {
		bias = o.X(3)
	}
	if o.Input(5) != nil {
		h0 = o.X(5)
	}
	if o.Input(6) != nil {
		c0 = o.X(6)
	}
	if o.Input(7) != nil {
		peep = o.X(7)
	}
	gx, gw, gr, gb := o.Grad(0), o.Grad(1), o.Grad(2), o.Grad(3)
	gh0, gc0, gp := o.Grad(5), o.Grad(6), o.Grad(7)
	var gy, gyh, gyc []float64
	if len(o.GOut) > 0 {
		gy = o.GOut[0]
	}
	if len(o.GOut) > 1 {
		gyh = o.GOut[1]
	}
	if len(o.GOut) > 2 {
		gyc = o.GOut[2]
	}
	G := 4 * H
	for d := 0; d < dirs; d++ {
		wd, rd := w[d*G*I:(d+1)*G*I], r[d*G*H:(d+1)*G*H]
		// forward, keeping the gates (i o f c̃, activated), Cₜ and Hₜ per step s
		gates := make([]float64, T*B*G)
		cs := make([]float64, (T+1)*B*H) // cs[0] = C₀
		hs := make([]float64, (T+1)*B*H)
		if h0 != nil {
			copy(hs[:B*H], h0[d*B*H:(d+1)*B*H])
		}
		if c0 != nil {
			copy(cs[:B*H], c0[d*B*H:(d+1)*B*H])
		}
		step := func(s int) int { // time index of processing step s
			if reverse[d] {
				return T - 1 - s
			}
			return s
		}
		for s := 0; s < T; s++ {
			t := step(s)
			a := gates[s*B*G : (s+1)*B*G]
			mm(false, true, 1, x[t*B*I:(t+1)*B*I], B, I, wd, G, I, a)
			mm(false, true, 1, hs[s*B*H:(s+1)*B*H], B, H, rd, G, H, a)
			for b := 0; b < B; b++ {
				ab := a[b*G : (b+1)*G]
				if bias != nil {
					for k := 0; k < G; k++ {
						ab[k] += bias[d*2*G+k] + bias[d*2*G+G+k]
					}
				}
				cp, cn := cs[s*B*H+b*H:s*B*H+(b+1)*H], cs[(s+1)*B*H+b*H:(s+1)*B*H+(b+1)*H]
				hn := hs[(s+1)*B*H+b*H : (s+1)*B*H+(b+1)*H]
				for k := 0; k < H; k++ {
					ai, af := ab[k], ab[2*H+k]
					if peep != nil {
						ai += peep[d*3*H+k] * cp[k]
						af += peep[d*3*H+2*H+k] * cp[k]
					}
					i, f, c := sigm(ai), sigm(af), math.Tanh(ab[3*H+k])
					cn[k] = f*cp[k] + i*c
					ao := ab[H+k]
					if peep != nil {
						ao += peep[d*3*H+H+k] * cn[k]
					}
					oo := sigm(ao)
					hn[k] = oo * math.Tanh(cn[k])
					ab[k], ab[H+k], ab[2*H+k], ab[3*H+k] = i, oo, f, c
				}
			}
		}
		// backward through time
		dh := make([]float64, B*H)
		dc := make([]float64, B*H)
		if gyh != nil {
			copy(dh, gyh[d*B*H:(d+1)*B*H])
		}
		if gyc != nil {
			copy(dc, gyc[d*B*H:(d+1)*B*H])
		}
		da := make([]float64, B*G)
		for s := T - 1; s >= 0; s-- {
			t := step(s)
			if gy != nil { // Y [T, dirs, B, H]
				for k, v := range gy[(t*dirs+d)*B*H : (t*dirs+d+1)*B*H] {
					dh[k] += v
				}
			}
			for b := 0; b < B; b++ {
				ab := gates[s*B*G+b*G : s*B*G+(b+1)*G]
				cp, cn := cs[s*B*H+b*H:s*B*H+(b+1)*H], cs[(s+1)*B*H+b*H:(s+1)*B*H+(b+1)*H]
				db := da[b*G : (b+1)*G]
				for k := 0; k < H; k++ {
					i, oo, f, c := ab[k], ab[H+k], ab[2*H+k], ab[3*H+k]
					tc := math.Tanh(cn[k])
					dH := dh[b*H+k]
					dao := dH * tc * oo * (1 - oo)
					dC := dc[b*H+k] + dH*oo*(1-tc*tc)
					if peep != nil {
						dC += dao * peep[d*3*H+H+k]
					}
					dai := dC * c * i * (1 - i)
					daf := dC * cp[k] * f * (1 - f)
					dac := dC * i * (1 - c*c)
					db[k], db[H+k], db[2*H+k], db[3*H+k] = dai, dao, daf, dac
					dc[b*H+k] = dC * f
					if peep != nil {
						dc[b*H+k] += dai*peep[d*3*H+k] + daf*peep[d*3*H+2*H+k]
						if gp != nil {
							gp[d*3*H+k] += dai * cp[k]
							gp[d*3*H+2*H+k] += daf * cp[k]
							gp[d*3*H+H+k] += dao * cn[k]
						}
					}
				}
			}
			if gx != nil {
				mm(false, false, 1, da, B, G, wd, G, I, gx[t*B*I:(t+1)*B*I])
			}
			if gw != nil {
				mm(true, false, 1, da, B, G, x[t*B*I:(t+1)*B*I], B, I, gw[d*G*I:(d+1)*G*I])
			}
			if gr != nil {
				mm(true, false, 1, da, B, G, hs[s*B*H:(s+1)*B*H], B, H, gr[d*G*H:(d+1)*G*H])
			}
			if gb != nil {
				for b := 0; b < B; b++ {
					for k := 0; k < G; k++ {
						gb[d*2*G+k] += da[b*G+k]
						gb[d*2*G+G+k] += da[b*G+k]
					}
				}
			}
			clear(dh)
			mm(false, false, 1, da, B, G, rd, G, H, dh)
		}
		if gh0 != nil {
			copy(gh0[d*B*H:(d+1)*B*H], dh)
		}
		if gc0 != nil {
			copy(gc0[d*B*H:(d+1)*B*H], dc)
		}
	}
	return nil
}
