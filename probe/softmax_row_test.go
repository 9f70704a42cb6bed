package probe

import (
	"math"
	"math/rand"
	"testing"
)

// softmaxRowF32 must give the bits of the general loop (smLoop) it replaces
// for contiguous rows: random rows of odd and vector-sized lengths, with
// causal-mask style −Inf entries, a large negative additive mask, NaN and
// ±Inf. The general loop is itself checked against the ONNX conformance
// data (TestConformance: test_softmax_*).
func TestSoftmaxRowMatchesLoop(t *testing.T) {
	r := rand.New(rand.NewSource(5))
	for _, n := range []int{1, 2, 3, 7, 8, 9, 15, 16, 17, 64, 127, 128, 129, 1000} {
		for trial := 0; trial < 20; trial++ {
			x := make([]float32, n)
			for i := range x {
				x[i] = float32(r.NormFloat64() * 4)
			}
			switch trial % 5 {
			case 1: // causal mask: keys after the query
				for i := n / 2; i < n; i++ {
					x[i] = float32(math.Inf(-1))
				}
			case 2: // additive padding mask
				for i := 0; i < n; i += 3 {
					x[i] -= 1e9
				}
			case 3:
				x[r.Intn(n)] = float32(math.NaN())
			case 4:
				x[r.Intn(n)] = float32(math.Inf(1))
			}
			want := make([]float32, n)
			got := make([]float32, n)
			smLoop(smSoftmax, want, x, 1, n, 1)
			softmaxRowF32(got, x)
			for i := range want {
				if math.Float32bits(got[i]) != math.Float32bits(want[i]) && !(got[i] != got[i] && want[i] != want[i]) {
					t.Fatalf("n=%d trial %d: y[%d] = %g, general loop %g", n, trial, i, got[i], want[i])
				}
			}
		}
	}
}

// BenchmarkSoftmaxAttention: the benchmark encoder's attention
// probabilities at batch 8 (bench/gen/export.py: 8·4 heads × 128 queries ×
// 128 keys) on one core: the general loop and the row path.
func BenchmarkSoftmaxAttention(b *testing.B) {
	r := rand.New(rand.NewSource(1))
	const rows, n = 32 * 128, 128
	x := make([]float32, rows*n)
	for i := range x {
		x[i] = float32(r.NormFloat64())
	}
	y := make([]float32, len(x))
	b.Run("loop", func(b *testing.B) {
		b.SetBytes(int64(len(x)) * 4)
		for i := 0; i < b.N; i++ {
			smLoop(smSoftmax, y, x, rows, n, 1)
		}
	})
	b.Run("row", func(b *testing.B) {
		b.SetBytes(int64(len(x)) * 4)
		for i := 0; i < b.N; i++ {
			for r := 0; r < rows; r++ {
				softmaxRowF32(y[r*n:(r+1)*n], x[r*n:(r+1)*n])
			}
		}
	})
}
