package probe

import (
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// BenchmarkConvPointwiseMobile runs 1×1 convolution shapes of the mobile
// networks (MNASNet, MobileNetV3, EfficientNet-B0 at 224×224: expansion at
// high resolution, projection at low) over a batch of 8, weights and bias
// constant, outputs recycled as in vitals check; GFLOP/s (2 per
// multiply-add) and output GB/s (what writing the output costs at least).
func BenchmarkConvPointwiseMobile(b *testing.B) {
	r := rand.New(rand.NewSource(5))
	pool := tensor.NewPool(1 << 30)
	testArena = &tensor.Arena{Pool: pool}
	defer func() { testArena = nil }()
	for _, s := range []struct {
		name    string
		C, M, H int
	}{
		{"16to48_112", 16, 48, 112},
		{"24to72_56", 24, 72, 56},
		{"40to240_28", 40, 240, 28},
		{"80to480_14", 80, 480, 14},
		{"480to80_14", 480, 80, 14},
		{"1152to192_7", 1152, 192, 7},
		{"320to1280_7", 320, 1280, 7},
	} {
		b.Run(s.name, func(b *testing.B) {
			const n = 8
			x, w, bias := linRand(r, n, s.C, s.H, s.H), linRand(r, s.M, s.C, 1, 1), linRand(r, s.M)
			c := fastCall("Conv", map[string]*loader.Attr{}, 11, []string{"X", "W", "B"}, map[string]bool{"W": true, "B": true}, x, w, bias)
			if err := convKernel(c); err != nil {
				b.Fatal(err)
			}
			flops := 2 * float64(n*s.M*s.H*s.H) * float64(s.C)
			out := 4 * float64(n*s.M*s.H*s.H)
			b.ResetTimer()
			for b.Loop() {
				pool.Recycle([]*tensor.Tensor{c.Out[0]}, []*tensor.Tensor{x})
				if err := convKernel(c); err != nil {
					b.Fatal(err)
				}
			}
			sec := b.Elapsed().Seconds()
			b.ReportMetric(flops*float64(b.N)/sec/1e9, "GFLOP/s")
			b.ReportMetric(out*float64(b.N)/sec/1e9, "outGB/s")
		})
	}
}
