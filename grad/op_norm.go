package grad

import (
	"fmt"
	"math"
)

// Normalisation.
//
// BatchNormalization, inference mode: y = s·(x − μ)/√(σ² + ε) + b per
// channel (axis 1) with the running μ, σ² (constants here: no gradient).
// dL/dx = G·s/√(σ²+ε), dL/ds = Σ G·(x − μ)/√(σ²+ε), dL/db = Σ G.
//
// LayerNormalization over the axes from axis on: x̂ = (x − mean)/√(var + ε),
// y = s·x̂ + b; with ĝ = G·s, dL/dx = (ĝ − mean(ĝ) − x̂·mean(ĝ·x̂))/√(var + ε).

func init() {
	register("BatchNormalization", batchNormVJP)
	register("LayerNormalization", layerNormVJP)
	register("InstanceNormalization", instanceNormVJP)
}

// instanceNormVJP: each (sample, channel) plane is normalised over its
// spatial positions, y = s[c]·x̂ + b[c]; per plane, with ĝ = G·s[c],
// dL/dx = (ĝ − mean(ĝ) − x̂·mean(ĝ·x̂))/√(var + ε) (LayerNormalization's
// rule), dL/ds[c] = Σ G·x̂, dL/db[c] = Σ G.
func instanceNormVJP(o *Op) error {
	if err := o.Need(3); err != nil {
		return err
	}
	X := o.In[0]
	if X.Rank() < 3 {
		return fmt.Errorf("InstanceNormalization input %v has no spatial axis", X.Shape)
	}
	N, C, D := X.Shape[0], X.Shape[1], prod(X.Shape[2:])
	eps := float64(o.Float("epsilon", 1e-5))
	x, s, g := o.X(0), o.X(1), o.G(0)
	gx, gs, gb := o.Grad(0), o.Grad(1), o.Grad(2)
	xh, gh := make([]float64, D), make([]float64, D)
	for pl := 0; pl < N*C; pl++ {
		c := pl % C
		xr, gr := x[pl*D:(pl+1)*D], g[pl*D:(pl+1)*D]
		inv := normalise(xr, xh, eps)
		for i := range xr {
			gh[i] = gr[i] * s[c]
			if gs != nil {
				gs[c] += gr[i] * xh[i]
			}
			if gb != nil {
				gb[c] += gr[i]
			}
		}
		if gx != nil {
			normalisedDX(gh, xh, gx[pl*D:(pl+1)*D], inv)
		}
	}
	return nil
}

// normalise writes x̂ = (x − mean)/√(var + ε) of the row xr into xh
// (population variance) and returns 1/√(var + ε).
func normalise(xr, xh []float64, eps float64) float64 {
	m := 0.0
	for _, v := range xr {
		m += v
	}
	m /= float64(len(xr))
	vr := 0.0
	for _, v := range xr {
		vr += (v - m) * (v - m)
	}
	vr /= float64(len(xr))
	inv := 1 / math.Sqrt(vr+eps)
	for i, v := range xr {
		xh[i] = (v - m) * inv
	}
	return inv
}

// normalisedDX is the gradient through x̂ of one normalised row:
// dst = (ĝ − mean(ĝ) − x̂·mean(ĝ·x̂))·inv, ĝ the gradient reaching x̂.
func normalisedDX(gh, xh, dst []float64, inv float64) {
	mg, mgx := 0.0, 0.0
	for i := range gh {
		mg += gh[i]
		mgx += gh[i] * xh[i]
	}
	mg /= float64(len(gh))
	mgx /= float64(len(gh))
	for i := range gh {
		dst[i] = (gh[i] - mg - xh[i]*mgx) * inv
	}
}

func batchNormVJP(o *Op) error {
	if err := o.Need(5); err != nil {
		return err
	}
	if o.Int("training_mode", 0) != 0 {
		return fmt.Errorf("BatchNormalization in training mode has no gradient rule here")
	}
	X := o.In[0]
	if X.Rank() < 2 {
		return fmt.Errorf("BatchNormalization input %v has no channel axis", X.Shape)
	}
	N, C := X.Shape[0], X.Shape[1]
	I := prod(X.Shape[2:])
	eps := float64(o.Float("epsilon", 1e-5))
	s, mean, vr := o.X(1), o.X(3), o.X(4)
	x32, _ := X.Data.([]float32)
	if x32 != nil && o.has32(0) && (o.want32(0) || !o.Needs(0)) {
		return batchNorm32(o, N, C, I, eps, x32)
	}
	g := o.G(0)
	// gx may be G itself: each plane's sums are taken before it is overwritten
	gx, gs, gb := o.InPlace(0), o.Grad(1), o.Grad(2)
	var x []float64
	if gs != nil && x32 == nil {
		x = o.X(0)
	}
	// per plane (sample n, channel c): Σ G and Σ G·x, then summed per
	// channel; Σ G² per plane when the tape asks for it (float32 input),
	// summed in plane order
	sg, sgx := make([]float64, N*C), make([]float64, N*C)
	var sq, raw []float64
	if o.mask != nil {
		if x32 == nil || len(o.mask) != len(g) {
			return fmt.Errorf("internal error: ReLU mask of %d elements for a BatchNormalization gradient of %d", len(o.mask), len(g))
		}
		raw = make([]float64, N*C)
	}
	if o.wantSq {
		if x32 != nil {
			sq = make([]float64, N*C)
		} else {
			o.reportSq(sumSq(g)) // before gx overwrites G
		}
	}
	split(N*C*I, func(lo, hi int) {
		for pl := lo / max(I, 1); pl < N*C && pl*I < hi; pl++ {
			if pl*I < lo {
				continue // the plane belongs to the part that holds its start
			}
			c := pl % C
			gr := g[pl*I : (pl+1)*I]
			if x32 != nil { // sums and dX in one pass
				var d []float64
				k := 0.0
				if gx != nil {
					d, k = gx[pl*I:(pl+1)*I], s[c]/math.Sqrt(vr[c]+eps)
				}
				var q float64
				if o.mask != nil { // the ReLU above, in the same pass
					sg[pl], sgx[pl], q, raw[pl] = bnPlaneMask(gr, o.mask[pl*I:(pl+1)*I], x32[pl*I:(pl+1)*I], d, k)
				} else {
					sg[pl], sgx[pl], q = bnPlane(gr, x32[pl*I:(pl+1)*I], d, k)
				}
				if sq != nil {
					sq[pl] = q
				}
				continue
			}
			if gs != nil || gb != nil { // the sums first: gx may overwrite G
				var a, b float64
				for i, v := range gr {
					a += v
					if x32 != nil {
						b += v * float64(x32[pl*I+i])
					} else if x != nil {
						b += v * x[pl*I+i]
					}
				}
				sg[pl], sgx[pl] = a, b
			}
			if gx != nil {
				k := s[c] / math.Sqrt(vr[c]+eps)
				d := gx[pl*I : (pl+1)*I]
				for i, v := range gr {
					d[i] = v * k
				}
			}
		}
	})
	if sq != nil {
		t := 0.0
		for _, v := range sq {
			t += v
		}
		o.reportSq(t)
	}
	if raw != nil {
		t := 0.0
		for _, v := range raw {
			t += v
		}
		o.rawSq, o.rawSqOK = t, true
	}
	for c := 0; c < C; c++ {
		inv := 1 / math.Sqrt(vr[c]+eps)
		var a, b float64
		for n := 0; n < N; n++ {
			a += sg[n*C+c]
			b += sgx[n*C+c]
		}
		if gs != nil { // Σ G·(x − μ)/√(σ²+ε)
			gs[c] += (b - mean[c]*a) * inv
		}
		if gb != nil {
			gb[c] += a
		}
	}
	return nil
}

func layerNormVJP(o *Op) error {
	if err := o.Need(2); err != nil {
		return err
	}
	X := o.In[0]
	axis := int(o.Int("axis", -1))
	if axis < 0 {
		axis += X.Rank()
	}
	if axis < 0 || axis >= X.Rank() {
		return fmt.Errorf("LayerNormalization axis %d out of range for %v", o.Int("axis", -1), X.Shape)
	}
	D := prod(X.Shape[axis:])
	rows := X.Size() / max(D, 1)
	eps := float64(o.Float("epsilon", 1e-5))
	if o.In[1].Size() != D || (o.Input(2) != nil && o.In[2].Size() != D) {
		return fmt.Errorf("LayerNormalization scale %v or bias does not cover the normalised shape %v", o.In[1].Shape, X.Shape[axis:])
	}
	x, s, g := o.X(0), o.X(1), o.G(0)
	gx, gs, gb := o.Grad(0), o.Grad(1), o.Grad(2)
	xh, gh := make([]float64, D), make([]float64, D)
	for r := 0; r < rows; r++ {
		xr, gr := x[r*D:(r+1)*D], g[r*D:(r+1)*D]
		inv := normalise(xr, xh, eps)
		for i := range xr {
			gh[i] = gr[i] * s[i]
			if gs != nil {
				gs[i] += gr[i] * xh[i]
			}
			if gb != nil {
				gb[i] += gr[i]
			}
		}
		if gx != nil {
			normalisedDX(gh, xh, gx[r*D:(r+1)*D], inv)
		}
	}
	return nil
}

// bnPlane returns Σ G, Σ G·x and Σ G² over one plane, each in four
// addition chains (elements i ≡ 0, 1, 2, 3 mod 4, added at the end), and
// writes d[i] = G[i]·k when d is not nil (d may be G itself: each element
// is read before it is written).
func bnPlane(g []float64, x []float32, d []float64, k float64) (sum, sumX, sumSq float64) {
	var a0, a1, a2, a3, b0, b1, b2, b3, q0, q1, q2, q3 float64
	x = x[:len(g)]
	i := 0
	if d != nil {
		d = d[:len(g)]
		for ; i+4 <= len(g); i += 4 {
			v0, v1, v2, v3 := g[i], g[i+1], g[i+2], g[i+3]
			a0, a1, a2, a3 = a0+v0, a1+v1, a2+v2, a3+v3
			b0 += v0 * float64(x[i])
			b1 += v1 * float64(x[i+1])
			b2 += v2 * float64(x[i+2])
			b3 += v3 * float64(x[i+3])
			q0, q1, q2, q3 = q0+v0*v0, q1+v1*v1, q2+v2*v2, q3+v3*v3
			d[i], d[i+1], d[i+2], d[i+3] = v0*k, v1*k, v2*k, v3*k
		}
	} else {
		for ; i+4 <= len(g); i += 4 {
			v0, v1, v2, v3 := g[i], g[i+1], g[i+2], g[i+3]
			a0, a1, a2, a3 = a0+v0, a1+v1, a2+v2, a3+v3
			b0 += v0 * float64(x[i])
			b1 += v1 * float64(x[i+1])
			b2 += v2 * float64(x[i+2])
			b3 += v3 * float64(x[i+3])
			q0, q1, q2, q3 = q0+v0*v0, q1+v1*v1, q2+v2*v2, q3+v3*v3
		}
	}
	for ; i < len(g); i++ {
		v := g[i]
		a0 += v
		b0 += v * float64(x[i])
		q0 += v * v
		if d != nil {
			d[i] = v * k
		}
	}
	return (a0 + a1) + (a2 + a3), (b0 + b1) + (b2 + b3), (q0 + q1) + (q2 + q3)
}

// bnPlaneMask is bnPlane for a G that a ReLU above masks: each G[i] is
// taken as 0 where m[i] ≤ 0 or NaN (reluMask's rule) before it is used,
// the sums in bnPlane's four chains and order (the same bits as masking
// first); it returns also Σ G² before the mask (the ReLU output's sum for
// grad_rms).
func bnPlaneMask(g []float64, m, x []float32, d []float64, k float64) (sum, sumX, sumSq, rawSq float64) {
	var a0, a1, a2, a3, b0, b1, b2, b3, q0, q1, q2, q3, r0, r1 float64
	x, m = x[:len(g)], m[:len(g)]
	if d != nil {
		d = d[:len(g)]
	}
	i := 0
	for ; i+4 <= len(g); i += 4 {
		g0, g1, g2, g3 := g[i], g[i+1], g[i+2], g[i+3]
		r0, r1 = r0+g0*g0+g2*g2, r1+g1*g1+g3*g3
		v0, v1, v2, v3 := reluPass(g0, m[i]), reluPass(g1, m[i+1]), reluPass(g2, m[i+2]), reluPass(g3, m[i+3])
		a0, a1, a2, a3 = a0+v0, a1+v1, a2+v2, a3+v3
		b0 += v0 * float64(x[i])
		b1 += v1 * float64(x[i+1])
		b2 += v2 * float64(x[i+2])
		b3 += v3 * float64(x[i+3])
		q0, q1, q2, q3 = q0+v0*v0, q1+v1*v1, q2+v2*v2, q3+v3*v3
		if d != nil {
			d[i], d[i+1], d[i+2], d[i+3] = v0*k, v1*k, v2*k, v3*k
		}
	}
	for ; i < len(g); i++ {
		r0 += g[i] * g[i]
		v := reluPass(g[i], m[i])
		a0 += v
		b0 += v * float64(x[i])
		q0 += v * v
		if d != nil {
			d[i] = v * k
		}
	}
	return (a0 + a1) + (a2 + a3), (b0 + b1) + (b2 + b3), (q0 + q1) + (q2 + q3), r0 + r1
}

// reluPass is g where the float32 m is > 0, else 0, without a branch
// (reluMask's rule for one element).
func reluPass(g float64, m float32) float64 {
	c := int64(int32(math.Float32bits(m)))
	return math.Float64frombits(math.Float64bits(g) & uint64((-c>>63)&((c-0x7f800001)>>63)))
}
