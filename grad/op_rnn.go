package grad

import (
	"fmt"
	"math"
)

// RNN (default activation tanh): Hₜ = tanh(XₜWᵀ + Hₜ₋₁Rᵀ + Wb + Rb),
// recomputed in float64 and back-propagated through time:
// da = dH⊙(1 − Hₜ²), dX += da·W, dW += daᵀ·Xₜ, dR += daᵀ·Hₜ₋₁,
// dWb = dRb += Σ da, dHₜ₋₁ = da·R.

func init() { register("RNN", rnnVJP) }

func rnnVJP(o *Op) error {
	if err := o.Need(3); err != nil {
		return err
	}
	dirs, reverse, err := rnnVariant(o, []string{"tanh"})
	if err != nil {
		return err
	}
	X, W := o.In[0], o.In[1]
	T, B, I := X.Shape[0], X.Shape[1], X.Shape[2]
	H := int(o.Int("hidden_size", int64(W.Shape[1])))
	if W.Shape[0] != dirs || W.Shape[1] != H || W.Shape[2] != I {
		return fmt.Errorf("RNN weight %v does not fit %d direction(s), hidden %d, input %d", W.Shape, dirs, H, I)
	}
	x, w, r := o.X(0), o.X(1), o.X(2)
	var bias, h0 []float64
	if o.Input(3) != nil {
		bias = o.X(3)
	}
	if o.Input(5) != nil {
		h0 = o.X(5)
	}
	gx, gw, gr, gb, gh0 := o.Grad(0), o.Grad(1), o.Grad(2), o.Grad(3), o.Grad(5)
	var gy, gyh []float64
	if len(o.GOut) > 0 {
		gy = o.GOut[0]
	}
	if len(o.GOut) > 1 {
		gyh = o.GOut[1]
	}
	for d := 0; d < dirs; d++ {
		wd, rd := w[d*H*I:(d+1)*H*I], r[d*H*H:(d+1)*H*H]
		step := func(s int) int {
			if reverse[d] {
				return T - 1 - s
			}
			return s
		}
		hs := make([]float64, (T+1)*B*H)
		if h0 != nil {
			copy(hs[:B*H], h0[d*B*H:(d+1)*B*H])
		}
		for s := 0; s < T; s++ {
			t := step(s)
			a := hs[(s+1)*B*H : (s+2)*B*H]
			mm(false, true, 1, x[t*B*I:(t+1)*B*I], B, I, wd, H, I, a)
			mm(false, true, 1, hs[s*B*H:(s+1)*B*H], B, H, rd, H, H, a)
			for i := range a {
				k := i % H
				if bias != nil {
					a[i] += bias[d*2*H+k] + bias[d*2*H+H+k]
				}
				a[i] = math.Tanh(a[i])
			}
		}
		dh := make([]float64, B*H)
		if gyh != nil {
			copy(dh, gyh[d*B*H:(d+1)*B*H])
		}
		da := make([]float64, B*H)
		for s := T - 1; s >= 0; s-- {
			t := step(s)
			if gy != nil {
				for k, v := range gy[(t*dirs+d)*B*H : (t*dirs+d+1)*B*H] {
					dh[k] += v
				}
			}
			hn := hs[(s+1)*B*H : (s+2)*B*H]
			for i, h := range hn {
				da[i] = dh[i] * (1 - h*h)
			}
			if gx != nil {
				mm(false, false, 1, da, B, H, wd, H, I, gx[t*B*I:(t+1)*B*I])
			}
			if gw != nil {
				mm(true, false, 1, da, B, H, x[t*B*I:(t+1)*B*I], B, I, gw[d*H*I:(d+1)*H*I])
			}
			if gr != nil {
				mm(true, false, 1, da, B, H, hs[s*B*H:(s+1)*B*H], B, H, gr[d*H*H:(d+1)*H*H])
			}
			if gb != nil {
				for i, v := range da {
					gb[d*2*H+i%H] += v
					gb[d*2*H+H+i%H] += v
				}
			}
			clear(dh)
			mm(false, false, 1, da, B, H, rd, H, H, dh)
		}
		if gh0 != nil {
			copy(gh0[d*B*H:(d+1)*B*H], dh)
		}
	}
	return nil
}
