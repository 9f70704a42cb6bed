package grad

import (
	"fmt"
	"math"
)

// batchNorm32 is BatchNormalization's rule on a float32 input with a
// float32 G (grad32.go): per plane one pass that takes Σ G, Σ G·x and
// Σ G² in float64 and writes dX = G·k in float32, k = s/√(σ²+ε) rounded
// to float32 (with the ReLU above, o.mask, G is masked as it is read).
func batchNorm32(o *Op, N, C, I int, eps float64, x32 []float32) error {
	s, mean, vr := o.X(1), o.X(3), o.X(4)
	g := o.G32(0)
	// gx may be G itself: each element is read before it is written
	gx, gs, gb := o.InPlace32(0), o.Grad(1), o.Grad(2)
	if o.mask != nil && len(o.mask) != len(g) {
		return fmt.Errorf("internal error: ReLU mask of %d elements for a BatchNormalization gradient of %d", len(o.mask), len(g))
	}
	sg, sgx, sq := make([]float64, N*C), make([]float64, N*C), make([]float64, N*C)
	var raw []float64
	if o.mask != nil {
		raw = make([]float64, N*C)
	}
	split(N*C*I, func(lo, hi int) {
		for pl := lo / max(I, 1); pl < N*C && pl*I < hi; pl++ {
			if pl*I < lo {
				continue // the plane belongs to the part that holds its start
			}
			c := pl % C
			gr := g[pl*I : (pl+1)*I]
			var d []float32
			var k float32
			if gx != nil {
				d, k = gx[pl*I:(pl+1)*I], float32(s[c]/math.Sqrt(vr[c]+eps))
			}
			if o.mask != nil {
				sg[pl], sgx[pl], sq[pl], raw[pl] = bnPlaneMask32(gr, o.mask[pl*I:(pl+1)*I], x32[pl*I:(pl+1)*I], d, k)
			} else {
				sg[pl], sgx[pl], sq[pl] = bnPlane32(gr, x32[pl*I:(pl+1)*I], d, k)
			}
		}
	})
	if o.wantSq {
		o.reportSq(sumPlanes(sq))
	}
	if raw != nil {
		o.rawSq, o.rawSqOK = sumPlanes(raw), true
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

// sumPlanes adds per-plane sums in plane order.
func sumPlanes(v []float64) float64 {
	t := 0.0
	for _, x := range v {
		t += x
	}
	return t
}

// bnPlane32 is bnPlane for a float32 G and dX (d may be G itself; nil:
// sums only), d[i] = G[i]·k in float32.
func bnPlane32(g, x, d []float32, k float32) (sum, sumX, sumSq float64) {
	var a0, a1, b0, b1, q0, q1 float64
	x = x[:len(g)]
	i := 0
	if d != nil {
		d = d[:len(g)]
		for ; i+2 <= len(g); i += 2 {
			u0, u1 := g[i], g[i+1]
			v0, v1 := float64(u0), float64(u1)
			a0, a1 = a0+v0, a1+v1
			b0 += v0 * float64(x[i])
			b1 += v1 * float64(x[i+1])
			q0, q1 = q0+v0*v0, q1+v1*v1
			d[i], d[i+1] = u0*k, u1*k
		}
	} else {
		for ; i+2 <= len(g); i += 2 {
			v0, v1 := float64(g[i]), float64(g[i+1])
			a0, a1 = a0+v0, a1+v1
			b0 += v0 * float64(x[i])
			b1 += v1 * float64(x[i+1])
			q0, q1 = q0+v0*v0, q1+v1*v1
		}
	}
	if i < len(g) {
		v := float64(g[i])
		a0 += v
		b0 += v * float64(x[i])
		q0 += v * v
		if d != nil {
			d[i] = g[i] * k
		}
	}
	return a0 + a1, b0 + b1, q0 + q1
}

// bnPlaneMask32 is bnPlaneMask for a float32 G and dX: G[i] taken as 0
// where m[i] ≤ 0 or NaN, and Σ G² before the mask returned too.
func bnPlaneMask32(g, m, x, d []float32, k float32) (sum, sumX, sumSq, rawSq float64) {
	var a0, a1, b0, b1, q0, q1, r0, r1 float64
	x, m = x[:len(g)], m[:len(g)]
	if d != nil {
		d = d[:len(g)]
	}
	i := 0
	for ; i+2 <= len(g); i += 2 {
		g0, g1 := float64(g[i]), float64(g[i+1])
		r0, r1 = r0+g0*g0, r1+g1*g1
		u0, u1 := reluPass32(g[i], m[i]), reluPass32(g[i+1], m[i+1])
		v0, v1 := float64(u0), float64(u1)
		a0, a1 = a0+v0, a1+v1
		b0 += v0 * float64(x[i])
		b1 += v1 * float64(x[i+1])
		q0, q1 = q0+v0*v0, q1+v1*v1
		if d != nil {
			d[i], d[i+1] = u0*k, u1*k
		}
	}
	if i < len(g) {
		r0 += float64(g[i]) * float64(g[i])
		u := reluPass32(g[i], m[i])
		v := float64(u)
		a0 += v
		b0 += v * float64(x[i])
		q0 += v * v
		if d != nil {
			d[i] = u * k
		}
	}
	return a0 + a1, b0 + b1, q0 + q1, r0 + r1
}

// reluPass32 is reluPass for a float32 g.
func reluPass32(g, m float32) float32 {
	c := int64(int32(math.Float32bits(m)))
	return math.Float32frombits(math.Float32bits(g) & uint32((-c>>63)&((c-0x7f800001)>>63)))
}
