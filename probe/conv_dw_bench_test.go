package probe

import (
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// benchDW times one MobileNet-sized depthwise K×K Conv (batch 8, "same"
// padding) through convKernel, output buffers recycled by a pool as in a run.
func benchDW(b *testing.B, C, H, s, K int) {
	r := rand.New(rand.NewSource(1))
	x, w, bias := linRand(r, 8, C, H, H), linRand(r, C, 1, K, K), linRand(r, C)
	p := int64(K / 2)
	attrs := map[string]*loader.Attr{
		"group":   {Name: "group", Kind: loader.AttrInt, I: int64(C)},
		"strides": linInts("strides", int64(s), int64(s)),
		"pads":    linInts("pads", p, p, p, p),
	}
	pool := tensor.NewPool(1 << 30)
	testArena = &tensor.Arena{Pool: pool}
	defer func() { testArena = nil }()
	b.SetBytes(int64(4 * x.Size()))
	for i := 0; i < b.N; i++ {
		c := fastCall("Conv", attrs, 11, []string{"X", "W", "B"}, map[string]bool{"W": true}, x, w, bias)
		if err := convKernel(c); err != nil {
			b.Fatal(err)
		}
		pool.Recycle([]*tensor.Tensor{c.Out[0]}, nil)
	}
}

// benchDWPaths runs benchDW with the small-plane kernel (dwSmallPlane) and, where
// it runs, without it (the row and tap paths), for comparison.
func benchDWPaths(b *testing.B, C, H, s, K int) {
	saved := haveDwSmall
	defer func() { haveDwSmall = saved }()
	b.Run("small", func(b *testing.B) { benchDW(b, C, H, s, K) })
	if saved {
		haveDwSmall = false
		b.Run("rows", func(b *testing.B) { benchDW(b, C, H, s, K) })
	}
}

func BenchmarkConvDW112s1(b *testing.B)  { benchDWPaths(b, 32, 112, 1, 3) }
func BenchmarkConvDW112s2(b *testing.B)  { benchDWPaths(b, 96, 112, 2, 3) }
func BenchmarkConvDW28s1(b *testing.B)   { benchDWPaths(b, 192, 28, 1, 3) }
func BenchmarkConvDW7s1(b *testing.B)    { benchDWPaths(b, 960, 7, 1, 3) }
func BenchmarkConvDW14s1(b *testing.B)   { benchDWPaths(b, 576, 14, 1, 3) }
func BenchmarkConvDW28s2(b *testing.B)   { benchDWPaths(b, 240, 28, 2, 3) }
func BenchmarkConvDW5x5s1(b *testing.B)  { benchDWPaths(b, 960, 7, 1, 5) }
func BenchmarkConvDW5x5s2(b *testing.B)  { benchDWPaths(b, 672, 14, 2, 5) }
func BenchmarkConvDW5x5_28(b *testing.B) { benchDWPaths(b, 120, 28, 1, 5) }
func BenchmarkConvDW5x5_14(b *testing.B) { benchDWPaths(b, 672, 14, 1, 5) }
func BenchmarkConvDW7x7_7(b *testing.B)  { benchDWPaths(b, 768, 7, 1, 7) }
