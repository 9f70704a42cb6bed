package probe

import (
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// LayerNormalization with the rows split across cores and the sums in four
// partial sums, against the formula of the ONNX operator documentation
// (Y = (X − mean)/√(var + ε)·Scale + B over the last axes, Mean and
// InvStdDev outputs) computed here in float64 left to right, on odd row
// lengths and row counts large enough to be split.
func TestLayerNormRowsMatchFormula(t *testing.T) {
	r := rand.New(rand.NewSource(3))
	for _, shape := range [][]int{{3, 5}, {2, 129, 7}, {8, 128, 256}, {1, 4099, 3}, {257, 255}} {
		n := 1
		for _, d := range shape {
			n *= d
		}
		m := shape[len(shape)-1]
		x := make([]float32, n)
		for i := range x {
			x[i] = float32(r.NormFloat64()*3 + 1)
		}
		sc, bs := make([]float32, m), make([]float32, m)
		for i := range sc {
			sc[i], bs[i] = float32(r.NormFloat64()), float32(r.NormFloat64())
		}
		c := linTestCall("LayerNormalization", map[string]*loader.Attr{}, 17,
			tensor.From(x, shape...), tensor.From(sc, m), tensor.From(bs, m))
		c.Node.Outputs = []string{"y", "mean", "inv"}
		c.Out = make([]*tensor.Tensor, 3)
		if err := layerNormKernel(c); err != nil {
			t.Fatal(err)
		}
		y, mean, inv := c.Out[0].F32(), c.Out[1].F32(), c.Out[2].F32()
		for row := 0; row < n/m; row++ {
			xs := x[row*m : (row+1)*m]
			var mu, q float64
			for _, v := range xs {
				mu += float64(v)
			}
			mu /= float64(m)
			for _, v := range xs {
				q += (float64(v) - mu) * (float64(v) - mu)
			}
			rs := 1 / math.Sqrt(q/float64(m)+1e-5)
			if math.Abs(float64(mean[row])-mu) > 1e-6*(1+math.Abs(mu)) || math.Abs(float64(inv[row])-rs) > 1e-6*rs {
				t.Fatalf("%v row %d: mean %g inv %g, want %g %g", shape, row, mean[row], inv[row], mu, rs)
			}
			for j, v := range xs {
				want := (float64(v)-mu)*rs*float64(sc[j]) + float64(bs[j])
				if g := float64(y[row*m+j]); math.Abs(g-want) > 1e-6*(1+math.Abs(want)) {
					t.Fatalf("%v y[%d,%d] = %g, want %g", shape, row, j, g, want)
				}
			}
		}
	}
}

// BenchmarkLayerNormEncoder: the benchmark encoder's LayerNormalization at
// batch 8 (bench/gen/export.py: 8 × 128 tokens × d 256).
func BenchmarkLayerNormEncoder(b *testing.B) {
	r := rand.New(rand.NewSource(1))
	x := make([]float32, 8*128*256)
	for i := range x {
		x[i] = float32(r.NormFloat64())
	}
	sc, bs := make([]float32, 256), make([]float32, 256)
	for i := range sc {
		sc[i], bs[i] = 1, 0
	}
	c := linTestCall("LayerNormalization", map[string]*loader.Attr{}, 17,
		tensor.From(x, 8, 128, 256), tensor.From(sc, 256), tensor.From(bs, 256))
	b.SetBytes(int64(len(x)) * 4)
	for i := 0; i < b.N; i++ {
		if err := layerNormKernel(c); err != nil {
			b.Fatal(err)
		}
	}
}
