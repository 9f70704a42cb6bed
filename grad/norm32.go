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
	sg, sgx, sq, out := make([]float64, N*C), make([]float64, N*C), make([]float64, N*C), make([]float64, N*C)
	var raw []float64
	if o.mask != nil {
		raw = make([]float64, N*C)
	}
	split(N*C*I, func(lo, hi int) {
		var lanes [10][8]float64
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
			var m []float32
			if o.mask != nil {
				m = o.mask[pl*I : (pl+1)*I]
			}
			t := bnPlane32(gr, m, x32[pl*I:(pl+1)*I], d, k, &lanes)
			sg[pl], sgx[pl], sq[pl], out[pl] = t.sum, t.sumX, t.sumSq, t.outSq
			if raw != nil {
				raw[pl] = t.rawSq
			}
		}
	})
	if o.wantSq {
		o.reportSq(sumPlanes(sq))
	}
	if raw != nil {
		o.rawSq, o.rawSqOK = sumPlanes(raw), true
	}
	if gx != nil {
		o.reportInSq(sumPlanes(out))
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

// bnSums are one plane's sums for BatchNormalization's rule: Σ G, Σ G·x,
// Σ G² (G after the ReLU mask, if any), Σ G² before the mask, and Σ d²
// over the dX written (the gradient the rule below receives).
type bnSums struct{ sum, sumX, sumSq, rawSq, outSq float64 }

// bnPlane32 takes one plane's bnSums in float64 and writes d[i] = G[i]·k
// in float32 when d is not nil (d may be G itself: each element is read
// before it is written); with m, G[i] is taken as 0 where m[i] ≤ 0 or NaN
// (reluPass's rule). The vector loop (bnPlaneVec) does the first
// len(g)&^15 elements in 16 float64 lanes per sum, the Go loop the rest
// (or all) in two chains; masked or not, the same G gives the same sums.
//
// lanes is the vector loop's scratch (a caller's, reused from plane to plane).
func bnPlane32(g, m, x, d []float32, k float32, lanes *[10][8]float64) bnSums {
	i := bnPlaneVec(g, m, x, d, k, lanes)
	var s bnSums
	if i > 0 {
		s = bnSums{laneSum(&lanes[0], &lanes[1]), laneSum(&lanes[2], &lanes[3]), laneSum(&lanes[4], &lanes[5]), laneSum(&lanes[6], &lanes[7]), laneSum(&lanes[8], &lanes[9])}
		if m == nil {
			s.rawSq = s.sumSq
		}
		g, x, d = g[i:], x[i:], d[i:]
		if m != nil {
			m = m[i:]
		}
	}
	t := bnPlaneGo(g, m, x, d, k)
	return bnSums{s.sum + t.sum, s.sumX + t.sumX, s.sumSq + t.sumSq, s.rawSq + t.rawSq, s.outSq + t.outSq}
}

// laneSum adds 16 lanes in a fixed order (pairwise).
func laneSum(lo, hi *[8]float64) float64 {
	var v [8]float64
	for j := range v {
		v[j] = lo[j] + hi[j]
	}
	return ((v[0] + v[4]) + (v[2] + v[6])) + ((v[1] + v[5]) + (v[3] + v[7]))
}

// bnPlaneGo is bnPlane32's Go loop: two addition chains (even and odd
// elements) per sum.
func bnPlaneGo(g, m, x, d []float32, k float32) bnSums {
	var a0, a1, b0, b1, q0, q1, r0, r1, o0, o1 float64
	x = x[:len(g)]
	if m != nil {
		m = m[:len(g)]
	}
	if d != nil {
		d = d[:len(g)]
	}
	i := 0
	for ; i+2 <= len(g); i += 2 {
		u0, u1 := g[i], g[i+1]
		g0, g1 := float64(u0), float64(u1)
		r0, r1 = r0+g0*g0, r1+g1*g1
		if m != nil {
			u0, u1 = reluPass32(u0, m[i]), reluPass32(u1, m[i+1])
		}
		v0, v1 := float64(u0), float64(u1)
		a0, a1 = a0+v0, a1+v1
		b0 += v0 * float64(x[i])
		b1 += v1 * float64(x[i+1])
		q0, q1 = q0+v0*v0, q1+v1*v1
		w0, w1 := u0*k, u1*k
		o0, o1 = o0+float64(w0)*float64(w0), o1+float64(w1)*float64(w1)
		if d != nil {
			d[i], d[i+1] = w0, w1
		}
	}
	if i < len(g) {
		u := g[i]
		r0 += float64(u) * float64(u)
		if m != nil {
			u = reluPass32(u, m[i])
		}
		v := float64(u)
		a0 += v
		b0 += v * float64(x[i])
		q0 += v * v
		w := u * k
		o0 += float64(w) * float64(w)
		if d != nil {
			d[i] = w
		}
	}
	return bnSums{a0 + a1, b0 + b1, q0 + q1, r0 + r1, o0 + o1}
}

// reluPass32 is reluPass for a float32 g.
func reluPass32(g, m float32) float32 {
	c := int64(int32(math.Float32bits(m)))
	return math.Float32frombits(math.Float32bits(g) & uint32((-c>>63)&((c-0x7f800001)>>63)))
}
