package probe

import (
	"fmt"

	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/gemm"
	"github.com/vitals-health/vitals/loader"
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
			// output buffers recycled by a pool as in a run
			pool := tensor.NewPool(1 << 30)
			testArena = &tensor.Arena{Pool: pool}
			defer func() { testArena = nil }()
			consts := map[string]bool{"w": tc.isConst}
			for i := 0; i < b.N; i++ {
				c := fastCall("MatMul", nil, 13, []string{"a", "w"}, consts, a, w)
				if err := matMulKernel(c); err != nil {
					b.Fatal(err)
				}
				pool.Recycle([]*tensor.Tensor{c.Out[0]}, nil)
			}
			b.ReportMetric(flops*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
		})
	}
}

// A constant right operand is packed and kept only when gemm.PackAhead says
// the product gains from it (a GPT-2-sized model at 128 rows would otherwise
// hold its MatMul weights twice); either way the product matches the gonum
// reference SGEMM.
func TestMatMulPackAheadRows(t *testing.T) {
	rng := rand.New(rand.NewSource(7))
	fill := func(shape ...int) *tensor.Tensor {
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
	for _, shape := range [][]int{{2, 4, 33}, {2, 64, 33}, {1, 129, 33}, {8, 128, 33}} {
		a, w := fill(shape...), fill(33, 71)
		rows := len(a.F32()) / 33
		c := fastCall("MatMul", nil, 13, []string{"a", "w"}, map[string]bool{"w": true}, a, w)
		if err := matMulKernel(c); err != nil {
			t.Fatal(err)
		}
		got := c.Out[0].F32()
		var want []float32
		withReference(func() {
			r := fastCall("MatMul", nil, 13, []string{"a", "w"}, map[string]bool{"w": true}, a, w)
			if err := matMulKernel(r); err != nil {
				t.Fatal(err)
			}
			want = r.Out[0].F32()
		})
		closeF32(t, fmt.Sprint("MatMul ", shape), got, want, 1e-5)
		if packed := packCached(w); packed != gemm.PackAhead(rows, false) {
			t.Errorf("A %v (%d rows): packed copy kept = %v, gemm.PackAhead = %v", shape, rows, packed, gemm.PackAhead(rows, false))
		}
	}
}

// Gemm with a constant transposed B (transB=1, the layout of exported
// Linear layers) keeps a packed copy at every row count, 64 rows included,
// where a non-transposed B is read in place; products match the gonum
// reference SGEMM, with and without C.
func TestGemmTransBPackedAhead(t *testing.T) {
	rng := rand.New(rand.NewSource(8))
	fill := func(shape ...int) *tensor.Tensor {
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
	attrs := map[string]*loader.Attr{"transB": {Name: "transB", Kind: loader.AttrInt, I: 1}}
	for _, rows := range []int{4, 64, 200} {
		for _, withC := range []bool{false, true} {
			a, w, bias := fill(rows, 33), fill(71, 33), fill(71)
			names, in := []string{"a", "w"}, []*tensor.Tensor{a, w}
			if withC {
				names, in = append(names, "bias"), append(in, bias)
			}
			c := fastCall("Gemm", attrs, 13, names, map[string]bool{"w": true, "bias": true}, in...)
			if err := gemmKernel(c); err != nil {
				t.Fatal(err)
			}
			got := c.Out[0].F32()
			var want []float32
			withReference(func() {
				r := fastCall("Gemm", attrs, 13, names, map[string]bool{"w": true, "bias": true}, in...)
				if err := gemmKernel(r); err != nil {
					t.Fatal(err)
				}
				want = r.Out[0].F32()
			})
			closeF32(t, fmt.Sprint("Gemm transB rows ", rows, " C ", withC), got, want, 1e-5)
			if !packCached(w) {
				t.Errorf("%d rows: transposed B not kept packed", rows)
			}
		}
	}
}
