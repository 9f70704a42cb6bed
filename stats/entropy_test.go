package stats

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/vitals-health/vitals/tensor"
)

// rowEnt (the AVX-512 kernel where the CPU has one) against the plain
// formula Σ_{p>0} p·math.Log(p) in float64: the count of p > 0 and the
// maximum exactly, the sum within 1e-6 of Σ p|ln p| (the float32
// logarithm's bound in rowEntAVX512's doc comment, with margin), on every
// tail length, zeros, NaN, subnormals, tiny and one-hot rows.
func TestRowEntMatchesLog(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	for n := 0; n <= 70; n++ {
		for trial := 0; trial < 20; trial++ {
			p := make([]float32, n)
			var z float64
			w := make([]float64, n)
			for j := range w {
				w[j] = math.Exp(rng.NormFloat64() * float64(1+trial%5))
				z += w[j]
			}
			for j := range p {
				p[j] = float32(w[j] / z)
				switch rng.IntN(12) {
				case 0:
					p[j] = 0
				case 1:
					p[j] = float32(math.NaN())
				case 2:
					p[j] = 1e-40 // subnormal
				case 3:
					p[j] = float32(math.Ldexp(1+rng.Float64(), -rng.IntN(120)))
				case 4:
					p[j] = 1
				case 5:
					p[j] = -0.25
				}
			}
			var want, scale float64
			var wantN int
			var wantMx float32
			for _, v := range p {
				if v > 0 {
					l := math.Log(float64(v))
					want += float64(v) * l
					scale += float64(v) * math.Abs(l)
					wantN++
					wantMx = max(wantMx, v)
				}
			}
			got, nz, mx := rowEnt(p)
			if nz != wantN || mx != wantMx {
				t.Fatalf("n=%d: count %d, max %g; want %d, %g", n, nz, mx, wantN, wantMx)
			}
			if math.Abs(got-want) > 1e-6*scale+1e-300 {
				t.Fatalf("n=%d: Σ p ln p = %.12g, want %.12g (scale %.3g)", n, got, want, scale)
			}
			gs, gn, gm := rowEntGo(p)
			if gn != wantN || gm != wantMx || math.Abs(gs-want) > 1e-9*scale+1e-300 {
				t.Fatalf("n=%d: rowEntGo %.12g %d %g, want %.12g %d %g", n, gs, gn, gm, want, wantN, wantMx)
			}
		}
	}
}

// BenchmarkAttnObserve is the attention statistics of one [8, 4, 128, 128]
// softmax output (the bench transformer's shape at batch 8).
func BenchmarkAttnObserve(b *testing.B) {
	rng := rand.New(rand.NewPCG(9, 10))
	const K = 128
	x := make([]float32, 8*4*K*K)
	for r := 0; r < len(x); r += K {
		var z float64
		for j := range K {
			v := math.Exp(rng.NormFloat64())
			x[r+j] = float32(v)
			z += v
		}
		for j := range K {
			x[r+j] = float32(float64(x[r+j]) / z)
		}
	}
	tt := tensor.From(x, 8, 4, K, K)
	for _, vec := range []bool{false, true} {
		if vec && !rowEntVec {
			continue
		}
		name := map[bool]string{false: "go", true: "vec"}[vec]
		b.Run(name, func(b *testing.B) {
			old := rowEntVec
			rowEntVec = vec
			defer func() { rowEntVec = old }()
			a := newAttnAcc(4)
			b.SetBytes(int64(4 * len(x)))
			for b.Loop() {
				a.observe(tt)
			}
		})
	}
}

// sumSquares, four rows at a time, gives each row's Σ x² bit for bit as the
// one-row loop it replaces (the token-similarity normalisation).
func TestSumSquaresSameAsOneRow(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	for _, S := range []int{1, 3, 4, 5, 8, 11} {
		const D = 37
		x := make([]float32, S*D)
		for i := range x {
			x[i] = float32(rng.NormFloat64() * math.Exp(rng.NormFloat64()*4))
		}
		q := make([]float64, S)
		sumSquares(q, x, D)
		for s := range S {
			var want float64
			for _, v := range x[s*D : (s+1)*D] {
				want += float64(v) * float64(v)
			}
			if math.Float64bits(q[s]) != math.Float64bits(want) {
				t.Fatalf("S=%d row %d: %v, want %v", S, s, q[s], want)
			}
		}
	}
}

// BenchmarkResidObserve is the residual-stream statistics of one
// [8, 128, 256] tensor (the bench transformer's shape at batch 8).
func BenchmarkResidObserve(b *testing.B) {
	rng := rand.New(rand.NewPCG(13, 14))
	x := make([]float32, 8*128*256)
	for i := range x {
		x[i] = float32(rng.NormFloat64())
	}
	tt := tensor.From(x, 8, 128, 256)
	r := newResidAcc(256)
	b.SetBytes(int64(4 * len(x)))
	for b.Loop() {
		r.observe(tt)
	}
}
