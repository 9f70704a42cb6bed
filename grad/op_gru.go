package grad

import (
	"fmt"
	"math"
)

// GRU (ONNX gate order z r h, default activations sigmoid/tanh), both
// linear_before_reset forms: the forward pass is recomputed in float64 and
// back-propagated through time. With dH the gradient reaching Hₜ:
//
//	dh̃ = dH⊙(1−z),  da_z = dH⊙(Hₜ₋₁ − h̃)⊙z(1−z),  dHₜ₋₁ = dH⊙z + …
//	da_h = dh̃⊙(1 − h̃²);  before reset (u = Hₜ₋₁R_hᵀ + Rb_h, a_h ∋ r⊙u):
//	dr = da_h⊙u, du = da_h⊙r;  else (q = r⊙Hₜ₋₁, a_h ∋ qR_hᵀ): dq = da_h·R_h, dr = dq⊙Hₜ₋₁
//	da_r = dr⊙r(1−r);  dX += da·W, dW += daᵀ·Xₜ, and the R terms likewise.

func init() { register("GRU", gruVJP) }

func gruVJP(o *Op) error {
	if err := o.Need(3); err != nil {
		return err
	}
	dirs, reverse, err := rnnVariant(o, []string{"sigmoid", "tanh"})
	if err != nil {
		return err
	}
	X, W := o.In[0], o.In[1]
	T, B, I := X.Shape[0], X.Shape[1], X.Shape[2]
	H := int(o.Int("hidden_size", int64(W.Shape[1]/3)))
	if W.Shape[0] != dirs || W.Shape[1] != 3*H || W.Shape[2] != I {
		return fmt.Errorf("GRU weight %v does not fit %d direction(s), hidden %d, input %d", W.Shape, dirs, H, I)
	}
	lbr := o.Int("linear_before_reset", 0) != 0
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
	G := 3 * H
	for d := 0; d < dirs; d++ {
		wd, rd := w[d*G*I:(d+1)*G*I], r[d*G*H:(d+1)*G*H]
		rzr, rh := rd[:2*H*H], rd[2*H*H:] // R rows of z, r and of h
		wb := func(k int) float64 {
			if bias == nil {
				return 0
			}
			return bias[d*2*G+k]
		}
		rb := func(k int) float64 {
			if bias == nil {
				return 0
			}
			return bias[d*2*G+G+k]
		}
		step := func(s int) int {
			if reverse[d] {
				return T - 1 - s
			}
			return s
		}
		// forward: gates z, r, h̃ per step, u (before reset) or q = r⊙H, and H
		gates := make([]float64, T*B*G)
		aux := make([]float64, T*B*H)
		hs := make([]float64, (T+1)*B*H)
		if h0 != nil {
			copy(hs[:B*H], h0[d*B*H:(d+1)*B*H])
		}
		xw := make([]float64, B*G)
		hr := make([]float64, B*2*H)
		tmp := make([]float64, B*H)
		for s := 0; s < T; s++ {
			t := step(s)
			hp, hn := hs[s*B*H:(s+1)*B*H], hs[(s+1)*B*H:(s+2)*B*H]
			clear(xw)
			clear(hr)
			mm(false, true, 1, x[t*B*I:(t+1)*B*I], B, I, wd, G, I, xw)
			mm(false, true, 1, hp, B, H, rzr, 2*H, H, hr)
			a := gates[s*B*G : (s+1)*B*G]
			u := aux[s*B*H : (s+1)*B*H]
			for b := 0; b < B; b++ {
				for k := 0; k < 2*H; k++ {
					a[b*G+k] = sigm(xw[b*G+k] + hr[b*2*H+k] + wb(k) + rb(k))
				}
			}
			clear(tmp)
			if lbr {
				mm(false, true, 1, hp, B, H, rh, H, H, tmp)
				for b := 0; b < B; b++ {
					for k := 0; k < H; k++ {
						u[b*H+k] = tmp[b*H+k] + rb(2*H+k)
					}
				}
			} else {
				for i := range u {
					b, k := i/H, i%H
					u[i] = a[b*G+H+k] * hp[i] // q = r⊙H
				}
				mm(false, true, 1, u, B, H, rh, H, H, tmp)
			}
			for b := 0; b < B; b++ {
				for k := 0; k < H; k++ {
					z, rr := a[b*G+k], a[b*G+H+k]
					pre := xw[b*G+2*H+k] + wb(2*H+k)
					if lbr {
						pre += rr * u[b*H+k]
					} else {
						pre += tmp[b*H+k] + rb(2*H+k)
					}
					hh := math.Tanh(pre)
					a[b*G+2*H+k] = hh
					hn[b*H+k] = (1-z)*hh + z*hp[b*H+k]
				}
			}
		}
		// backward through time
		dh := make([]float64, B*H)
		if gyh != nil {
			copy(dh, gyh[d*B*H:(d+1)*B*H])
		}
		da := make([]float64, B*G)  // [da_z, da_r, da_h] per sample
		dRh := make([]float64, B*H) // the gradient entering R_h's product
		dprev := make([]float64, B*H)
		for s := T - 1; s >= 0; s-- {
			t := step(s)
			if gy != nil {
				for k, v := range gy[(t*dirs+d)*B*H : (t*dirs+d+1)*B*H] {
					dh[k] += v
				}
			}
			hp := hs[s*B*H : (s+1)*B*H]
			a := gates[s*B*G : (s+1)*B*G]
			u := aux[s*B*H : (s+1)*B*H]
			clear(dprev)
			for b := 0; b < B; b++ {
				for k := 0; k < H; k++ {
					z, rr, hh := a[b*G+k], a[b*G+H+k], a[b*G+2*H+k]
					dH := dh[b*H+k]
					dah := dH * (1 - z) * (1 - hh*hh)
					da[b*G+k] = dH * (hp[b*H+k] - hh) * z * (1 - z)
					da[b*G+2*H+k] = dah
					dprev[b*H+k] = dH * z
					if lbr {
						da[b*G+H+k] = dah * u[b*H+k] * rr * (1 - rr) // dr = da_h⊙u
						dRh[b*H+k] = dah * rr                        // du
					} else {
						dRh[b*H+k] = dah
					}
				}
			}
			if !lbr { // dq = da_h·R_h; dr = dq⊙H; dH += dq⊙r
				dq := make([]float64, B*H)
				mm(false, false, 1, dRh, B, H, rh, H, H, dq)
				for i, v := range dq {
					b, k := i/H, i%H
					rr := a[b*G+H+k]
					da[b*G+H+k] = v * hp[i] * rr * (1 - rr)
					dprev[i] += v * rr
				}
			}
			if gx != nil {
				mm(false, false, 1, da, B, G, wd, G, I, gx[t*B*I:(t+1)*B*I])
			}
			if gw != nil {
				mm(true, false, 1, da, B, G, x[t*B*I:(t+1)*B*I], B, I, gw[d*G*I:(d+1)*G*I])
			}
			// z and r rows of R: the gates' own gradient
			dzr := make([]float64, B*2*H)
			for b := 0; b < B; b++ {
				copy(dzr[b*2*H:(b+1)*2*H], da[b*G:b*G+2*H])
			}
			mm(false, false, 1, dzr, B, 2*H, rzr, 2*H, H, dprev)
			if lbr {
				mm(false, false, 1, dRh, B, H, rh, H, H, dprev)
			}
			if gr != nil {
				mm(true, false, 1, dzr, B, 2*H, hp, B, H, gr[d*G*H:d*G*H+2*H*H])
				if lbr {
					mm(true, false, 1, dRh, B, H, hp, B, H, gr[d*G*H+2*H*H:(d+1)*G*H])
				} else {
					mm(true, false, 1, dRh, B, H, u, B, H, gr[d*G*H+2*H*H:(d+1)*G*H])
				}
			}
			if gb != nil {
				for b := 0; b < B; b++ {
					for k := 0; k < G; k++ {
						gb[d*2*G+k] += da[b*G+k]
						if k < 2*H {
							gb[d*2*G+G+k] += da[b*G+k]
						} else {
							gb[d*2*G+G+k] += dRh[b*H+k-2*H]
						}
					}
				}
			}
			copy(dh, dprev)
		}
		if gh0 != nil {
			copy(gh0[d*B*H:(d+1)*B*H], dh)
		}
	}
	return nil
}
