package probe

import "math"

// normRow32 normalises one float32 row of LayerNormalization or
// RMSNormalization (normRows) and returns its mean (0 with rms) and
// 1/√(variance + ε): the sums in float64, as sixteen partial sums (value
// j into sum j mod 16, in order of j, then added pairwise in a fixed tree,
// the values past the last multiple of 16 after it), and every output
// ((x − μ)·r)·scale + bias in float64 rounded once to float32. The
// AVX-512 kernels (norm_amd64.s) do the same operations in the same order:
// the results do not depend on the machine.
func normRow32(ys, xs []float32, scale, bias []float64, eps float64, rms bool) (mu, rs float64) {
	m := float64(len(xs))
	if !rms {
		mu = normSum32(xs, 0, false) / m
	}
	q := normSum32(xs, mu, true)
	rs = 1 / math.Sqrt(q/m+eps)
	j := normAffineVec(ys, xs, mu, rs, scale, bias)
	if bias != nil {
		for ; j < len(xs); j++ {
			ys[j] = float32((float64(xs[j])-mu)*rs*scale[j] + bias[j])
		}
	} else {
		for ; j < len(xs); j++ {
			ys[j] = float32((float64(xs[j]) - mu) * rs * scale[j])
		}
	}
	return mu, rs
}

// normSum32 returns Σ x_j (sq false) or Σ (x_j − mu)² (sq true) in float64
// in the order normRow32 states.
func normSum32(xs []float32, mu float64, sq bool) float64 {
	var p [16]float64
	j := normPartialsVec(xs, mu, sq, &p)
	for ; j+16 <= len(xs); j += 16 {
		v := xs[j : j+16 : j+16]
		for l := range p {
			d := float64(v[l])
			if sq {
				d -= mu
				d *= d
			}
			p[l] += d
		}
	}
	for w := 8; w >= 1; w /= 2 { // pairwise: p[l] += p[l+w]
		for l := 0; l < w; l++ {
			p[l] += p[l+w]
		}
	}
	s := p[0]
	for ; j < len(xs); j++ {
		d := float64(xs[j])
		if sq {
			d -= mu
			d *= d
		}
		s += d
	}
	return s
}
