package probe

import (
	"fmt"
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// The separable float32 pooling paths (poolAvg2DF32, and poolMax2DF32 with
// its stride-1 row kernel) against the window-table loops poolAvgRun and
// poolMaxRun over random shapes: windows 1–7, strides 1–3, dilations 1–2,
// paddings up to the window, ceil_mode, count_include_pad, NaN inputs.
// MaxPool must agree exactly (max is order-free); AveragePool to 1e-6
// relative (float32 sums of ≤ 49 values in another order; common practice).
func TestPoolRowsMatchWindowTable(t *testing.T) {
	r := rand.New(rand.NewSource(61))
	saved := havePoolVec
	defer func() { havePoolVec = saved }()
	for trial := 0; trial < 300; trial++ {
		K := []int{1 + r.Intn(7), 1 + r.Intn(7)}
		s := []int{1 + r.Intn(3), 1 + r.Intn(3)}
		if trial%2 == 0 {
			s[1] = 1 // the row kernel's case
		}
		d := []int{1 + r.Intn(2), 1 + r.Intn(2)}
		if trial%3 == 0 {
			d = []int{1, 1}
		}
		H, W := 1+r.Intn(30), 1+r.Intn(70)
		pads := []int{r.Intn(K[0]), r.Intn(K[1]), r.Intn(K[0]), r.Intn(K[1])}
		if H+pads[0]+pads[2] < (K[0]-1)*d[0]+1 || W+pads[1]+pads[3] < (K[1]-1)*d[1]+1 {
			continue
		}
		ceil, incl := int64(r.Intn(2)), int64(r.Intn(2))
		x := linRand(r, 2, 3, H, W)
		if trial%5 == 0 {
			x.F32()[r.Intn(x.Size())] = float32(math.NaN())
		}
		attrs := map[string]*loader.Attr{
			"kernel_shape":      linInts("kernel_shape", int64(K[0]), int64(K[1])),
			"strides":           linInts("strides", int64(s[0]), int64(s[1])),
			"pads":              linInts("pads", int64(pads[0]), int64(pads[1]), int64(pads[2]), int64(pads[3])),
			"ceil_mode":         {Name: "ceil_mode", Kind: loader.AttrInt, I: ceil},
			"count_include_pad": {Name: "count_include_pad", Kind: loader.AttrInt, I: incl},
		}
		what := fmt.Sprintf("trial %d K %v s %v d %v %dx%d pads %v ceil %d incl %d", trial, K, s, d, H, W, pads, ceil, incl)
		for _, dil := range []bool{false, true} {
			if dil {
				attrs["dilations"] = linInts("dilations", int64(d[0]), int64(d[1]))
			}
			c := &Call{Node: &loader.Node{Attrs: attrs}, In: []*tensor.Tensor{x}, Opset: 19}
			g, w, err := poolPrepare(c, x, true)
			if err != nil {
				continue // e.g. an output of size 0
			}
			planes := 6
			wantAvg := make([]float32, planes*w.outSize)
			poolAvgRun(wantAvg, x.F32(), planes, w, incl == 1)
			gotAvg := make([]float32, len(wantAvg))
			poolAvg2DF32(gotAvg, x.F32(), planes, &g, incl == 1)
			for i := range wantAvg {
				a, b := float64(gotAvg[i]), float64(wantAvg[i])
				if !(math.IsNaN(a) && math.IsNaN(b)) && math.Abs(a-b) > 1e-6*(1+math.Abs(b)) {
					t.Fatalf("%s dil=%v: AveragePool element %d = %g, window table %g", what, dil, i, a, b)
				}
			}
			wantMax := make([]float32, planes*w.outSize)
			poolMaxRun(wantMax, nil, x.F32(), planes, w)
			for _, vec := range []bool{saved, false} {
				havePoolVec = vec
				gotMax := make([]float32, len(wantMax))
				poolMax2DF32(gotMax, x.F32(), planes, &g)
				for i := range wantMax {
					if math.Float32bits(gotMax[i]) != math.Float32bits(wantMax[i]) && !(gotMax[i] != gotMax[i] && wantMax[i] != wantMax[i]) {
						t.Fatalf("%s dil=%v vector=%v: MaxPool element %d = %g, window table %g", what, dil, vec, i, gotMax[i], wantMax[i])
					}
				}
			}
		}
	}
}

// GlobalAveragePool's float32 path (eight float64 accumulators, planes
// across cores) against the sequential float64 sum of poolGlobalRun on
// planes of 0 to 3000 values and on many small planes; they may differ only
// by a rounding of the float32 result (1 ulp), and NaN and Inf propagate.
func TestPoolGlobalAvgMatchesSequential(t *testing.T) {
	r := rand.New(rand.NewSource(62))
	for _, dims := range [][2]int{{3, 0}, {5, 1}, {7, 9}, {64, 49}, {4, 3000}, {960, 7}} {
		planes, size := dims[0], dims[1]
		x := linRand(r, planes*size+1).F32()[:planes*size]
		if size > 2 {
			x[size+1] = float32(math.NaN())
			x[2*size+2] = float32(math.Inf(1))
		}
		want := make([]float32, planes)
		got := make([]float32, planes)
		if size > 0 {
			poolGlobalRun(want, x, planes, poolAvg, 2)
			poolGlobalAvgF32(got, x, planes)
		}
		for i := range want {
			if ulpDiff(got[i], want[i]) > 1 {
				t.Fatalf("planes %d size %d: plane %d = %g, sequential %g", planes, size, i, got[i], want[i])
			}
		}
	}
}

// The AVX-512 sums of GlobalAveragePool (sum8Vec) give the Go loop's
// values bit for bit (same float64 additions in the same order), NaN and
// Inf included, on plane sizes around the 8-value groups.
func TestPoolGlobalAvgVecSameBits(t *testing.T) {
	r := rand.New(rand.NewSource(63))
	for _, size := range []int{1, 7, 8, 9, 49, 196, 3137} {
		planes := 5
		x := linRand(r, planes*size).F32()
		for i := range x {
			x[i] *= float32(1 + i%13*1000) // magnitudes whose sums round
		}
		if size > 8 {
			x[size+3] = float32(math.NaN())
			x[2*size+5] = float32(math.Inf(-1))
		}
		got, want := make([]float32, planes), make([]float32, planes)
		poolGlobalAvgF32(got, x, planes)
		havePoolVec = false
		poolGlobalAvgF32(want, x, planes)
		havePoolVec = true
		for i := range want {
			if math.Float32bits(got[i]) != math.Float32bits(want[i]) && !(got[i] != got[i] && want[i] != want[i]) {
				t.Fatalf("size %d plane %d: %g, Go loop %g", size, i, got[i], want[i])
			}
		}
	}
}

// BenchmarkGlobalAvgPool: 8 images × 672 planes of 14×14 (an EfficientNet
// squeeze-excitation input), one core.
func BenchmarkGlobalAvgPool(b *testing.B) {
	const planes, size = 8 * 672, 196
	x := make([]float32, planes*size)
	for i := range x {
		x[i] = float32(i%101) / 101
	}
	y := make([]float32, planes)
	saved := havePoolVec
	defer func() { havePoolVec = saved }()
	for _, vec := range []bool{saved, false} {
		b.Run(fmt.Sprintf("vector=%v", vec), func(b *testing.B) {
			havePoolVec = vec
			b.SetBytes(int64(4 * len(x)))
			for b.Loop() {
				poolGlobalAvgF32(y, x, planes)
			}
		})
	}
}

// The whole-plane max and average pooling of "same" stride-1 windows
// (poolMaxSamePlane, poolAvgSamePlane against the row loop:
// GoogLeNet's and Inception's 3×3 branch pools) and the 3-wide stride-2
// windows with left padding 0 or 1 (their ceil-mode downsampling pools,
// ResNet's first pool) and 2-wide ones (VGG's and U-Net's 2×2 pools), whole
// vectors of 16 outputs over a row padded with −Inf (maxCols3s2Whole,
// maxCols2s2Whole), against a direct Go max over each window, bit for
// bit, on planes with NaN, +0 and −0 among the values (Go's max: NaN wins,
// +0 beats −0; the ONNX MaxPool specification leaves those to the
// implementation, so the direct loop is the reference).
func TestPoolMaxPlaneAndStride2MatchDirect(t *testing.T) {
	r := rand.New(rand.NewSource(62))
	saved := havePoolVec
	defer func() { havePoolVec = saved }()
	direct := func(x []float32, planes int, g *convGeom) []float32 {
		H, W, OH, OW := g.in[0], g.in[1], g.out[0], g.out[1]
		y := make([]float32, planes*OH*OW)
		for p := 0; p < planes; p++ {
			for oh := 0; oh < OH; oh++ {
				for ow := 0; ow < OW; ow++ {
					first, best := true, float32(0)
					for kh := 0; kh < g.k[0]; kh++ {
						for kw := 0; kw < g.k[1]; kw++ {
							ih, iw := oh*g.strides[0]-g.padBeg[0]+kh, ow*g.strides[1]-g.padBeg[1]+kw
							if ih < 0 || ih >= H || iw < 0 || iw >= W {
								continue
							}
							v := x[p*H*W+ih*W+iw]
							if first {
								best, first = v, false
							} else {
								best = max(best, v)
							}
						}
					}
					y[(p*OH+oh)*OW+ow] = best
				}
			}
		}
		return y
	}
	ran := 0
	for trial := 0; trial < 400; trial++ {
		var K, s, pads []int
		var ceil int64
		if trial%2 == 0 { // stride 1, mostly same-width
			kh, kw := 1+r.Intn(7), 1+r.Intn(7)
			pl, pt := r.Intn(kw), r.Intn(kh)
			K, s, pads = []int{kh, kw}, []int{1, 1}, []int{pt, pl, r.Intn(kh), kw - 1 - pl}
			if trial%4 == 0 { // narrower output rows: any padding below the window
				pads = []int{pt, pl, r.Intn(kh), r.Intn(kw)}
			}
		} else { // 3 or 2 wide, stride 2, left padding 0 or 1
			kw := 2 + r.Intn(2)
			K, s, pads = []int{kw, kw}, []int{2, 2}, []int{r.Intn(2), r.Intn(2), r.Intn(2), r.Intn(2)}
			ceil = int64(r.Intn(2))
		}
		H, W := 1+r.Intn(20), 1+r.Intn(140)
		x := linRand(r, 2, 2, H, W)
		xs := x.F32()
		for k := 0; k < 1+len(xs)/20; k++ {
			switch r.Intn(3) {
			case 0:
				xs[r.Intn(len(xs))] = float32(math.NaN())
			case 1:
				xs[r.Intn(len(xs))] = float32(math.Copysign(0, -1))
			default:
				xs[r.Intn(len(xs))] = 0
			}
		}
		attrs := map[string]*loader.Attr{
			"kernel_shape": linInts("kernel_shape", int64(K[0]), int64(K[1])),
			"strides":      linInts("strides", int64(s[0]), int64(s[1])),
			"pads":         linInts("pads", int64(pads[0]), int64(pads[1]), int64(pads[2]), int64(pads[3])),
			"ceil_mode":    {Name: "ceil_mode", Kind: loader.AttrInt, I: ceil},
		}
		c := &Call{Node: &loader.Node{Attrs: attrs}, In: []*tensor.Tensor{x}, Opset: 19}
		g, err := poolGeometry(c, x, true)
		if err != nil {
			continue
		}
		ran++
		if s[0] == 1 {
			// average pooling: the whole-plane path against the row loop, bit for bit
			for _, incl := range []bool{false, true} {
				poolSamePlaneOK = true
				got := make([]float32, 4*g.out[0]*g.out[1])
				poolAvg2DF32(got, xs, 4, &g, incl)
				poolSamePlaneOK = false
				rows := make([]float32, len(got))
				poolAvg2DF32(rows, xs, 4, &g, incl)
				poolSamePlaneOK = true
				for i := range rows {
					if math.Float32bits(got[i]) != math.Float32bits(rows[i]) && !(got[i] != got[i] && rows[i] != rows[i]) {
						t.Fatalf("trial %d K %v %dx%d pads %v include_pad %v: AveragePool element %d = %g, row loop %g",
							trial, K, H, W, pads, incl, i, got[i], rows[i])
					}
				}
			}
		}
		want := direct(xs, 4, &g)
		for _, vec := range []bool{saved, false} {
			havePoolVec = vec
			got := make([]float32, len(want))
			poolMax2DF32(got, xs, 4, &g)
			for i := range want {
				if math.Float32bits(got[i]) != math.Float32bits(want[i]) && !(got[i] != got[i] && want[i] != want[i]) {
					t.Fatalf("trial %d K %v s %v %dx%d pads %v ceil %d vector=%v: element %d = %g, direct %g",
						trial, K, s, H, W, pads, ceil, vec, i, got[i], want[i])
				}
			}
		}
	}
	if ran < 300 {
		t.Fatalf("only %d geometries ran", ran)
	}
}

// BenchmarkMaxPoolShapes times 3×3 MaxPool over a batch of 8 at GoogLeNet's
// shapes (ceil mode): the stride-2 downsampling pools at 112×112 and
// 56×56, the stride-1 branch pools at 28×28 and 14×14, the 2×2 stride-2
// pool at 14×14 and (VGG, U-Net) at 112×112; outputs recycled.
func BenchmarkMaxPoolShapes(b *testing.B) {
	r := rand.New(rand.NewSource(1))
	for _, tc := range []struct {
		name    string
		C, H    int
		k, s, p int64
	}{{"s2_112", 64, 112, 3, 2, 0}, {"s2_56", 192, 56, 3, 2, 0}, {"s1_28", 256, 28, 3, 1, 1}, {"s1_14", 512, 14, 3, 1, 1}, {"k2s2_14", 832, 14, 2, 2, 0}, {"k2s2_112", 64, 112, 2, 2, 0}} {
		b.Run(tc.name, func(b *testing.B) {
			x := linRand(r, 8, tc.C, tc.H, tc.H)
			attrs := map[string]*loader.Attr{"kernel_shape": linInts("kernel_shape", tc.k, tc.k), "strides": linInts("strides", tc.s, tc.s),
				"pads": linInts("pads", tc.p, tc.p, tc.p, tc.p), "ceil_mode": {Name: "ceil_mode", Kind: loader.AttrInt, I: 1}}
			pool := tensor.NewPool(1 << 30)
			testArena = &tensor.Arena{Pool: pool}
			defer func() { testArena = nil }()
			b.SetBytes(int64(4 * x.Size()))
			for b.Loop() {
				c := fastCall("MaxPool", attrs, 12, []string{"X"}, nil, x)
				if err := maxPoolKernel(c); err != nil {
					b.Fatal(err)
				}
				pool.Recycle([]*tensor.Tensor{c.Out[0]}, nil)
			}
		})
	}
}
