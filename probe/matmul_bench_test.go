package probe

import (
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/tensor"
)

// BenchmarkMatMulEncoder times the MatMul kernel on the benchmark encoder's
// shapes at batch 8 (bench/gen/export.py: d 256, 4 heads, 128 tokens, ff
// 1024): the dense projections with a constant weight and the batched
// attention products (batch·heads = 32), in GFLOP/s.
func BenchmarkMatMulEncoder(b *testing.B) {
	rng := rand.New(rand.NewSource(1))
	randT := func(shape ...int) *tensor.Tensor {
		n := 1
		for _, d := range shape {
			n *= d
		}
		v := make([]float32, n)
		for i := range v {
			v[i] = float32(rng.NormFloat64())
		}
		return tensor.From(v, shape...)
	}
	cases := []struct {
		name    string
		a, w    []int
		isConst bool
	}{
		{"qkv_1024x256x768", []int{128, 8, 256}, []int{256, 768}, true},
		{"ff1_1024x256x1024", []int{8, 128, 256}, []int{256, 1024}, true},
		{"ff2_1024x1024x256", []int{8, 128, 1024}, []int{1024, 256}, true},
		{"scores_32x128x64x128", []int{32, 128, 64}, []int{32, 64, 128}, false},
		{"context_32x128x128x64", []int{32, 128, 128}, []int{32, 128, 64}, false},
	}
	for _, tc := range cases {
		a, w := randT(tc.a...), randT(tc.w...)
		m, k, n := tc.a[len(tc.a)-2], tc.a[len(tc.a)-1], tc.w[len(tc.w)-1]
		nb := 1
		for _, d := range tc.a[:len(tc.a)-2] {
			nb *= d
		}
		flops := 2 * float64(nb*m*k*n)
		b.Run(tc.name, func(b *testing.B) {
			consts := map[string]bool{"w": tc.isConst}
			c := fastCall("MatMul", nil, 13, []string{"a", "w"}, consts, a, w)
			for i := 0; i < b.N; i++ {
				if err := matMulKernel(c); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(flops*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
		})
	}
}
