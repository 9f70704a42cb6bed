package probe

import (
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// benchDW times one MobileNetV2-sized depthwise 3×3 Conv (batch 8) through
// convKernel, output buffers recycled by a pool as in a run.
func benchDW(b *testing.B, C, H, s int) {
	r := rand.New(rand.NewSource(1))
	x, w, bias := linRand(r, 8, C, H, H), linRand(r, C, 1, 3, 3), linRand(r, C)
	attrs := map[string]*loader.Attr{
		"group":   {Name: "group", Kind: loader.AttrInt, I: int64(C)},
		"strides": linInts("strides", int64(s), int64(s)),
		"pads":    linInts("pads", 1, 1, 1, 1),
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

func BenchmarkConvDW112s1(b *testing.B) { benchDW(b, 32, 112, 1) }
func BenchmarkConvDW112s2(b *testing.B) { benchDW(b, 96, 112, 2) }
func BenchmarkConvDW28s1(b *testing.B)  { benchDW(b, 192, 28, 1) }
func BenchmarkConvDW7s1(b *testing.B)   { benchDW(b, 960, 7, 1) }
func BenchmarkConvDW14s1(b *testing.B)  { benchDW(b, 576, 14, 1) }
