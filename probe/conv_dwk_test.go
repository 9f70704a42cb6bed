package probe

import (
	"fmt"
	"math/rand"
	"testing"
	"unsafe"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// The depthwise tap-row path (dwTapsPlane: 5×5 and 7×7 windows, and 3×3
// with dilation) against the reference convolution (im2col + linGemmT,
// convUseReference) and the tap-by-tap dwGenericPlane, with the vector
// kernel and without, over random shapes: strides 1–3, dilations 1–2,
// paddings 0–3 per side, channel multipliers 1 and 2, with and without bias.
// Tolerance 1e-5 relative to the output scale (common practice for float32
// sums of ≤ 49 products taken in different orders and with or without
// fused multiply-adds).
func TestConvDepthwiseTapsMatchReference(t *testing.T) {
	r := rand.New(rand.NewSource(51))
	saved := haveDwTapsVec
	defer func() { haveDwTapsVec = saved }()
	for trial := 0; trial < 60; trial++ {
		K := []int{5, 7, 3}[trial%3]
		dil := 1 + r.Intn(2)
		if K == 3 {
			dil = 2 // 3×3 undilated goes to dw3x3Plane
		}
		s := 1 + r.Intn(3)
		N, C, mult := 1+r.Intn(2), 1+r.Intn(3), 1+r.Intn(2)
		H, W := 1+r.Intn(40), 1+r.Intn(90)
		pt, pl, pb, pr := r.Intn(4), r.Intn(4), r.Intn(4), r.Intn(4)
		span := (K-1)*dil + 1
		if H+pt+pb < span || W+pl+pr < span {
			continue
		}
		M := C * mult
		x, w, b := linRand(r, N, C, H, W), linRand(r, M, 1, K, K), linRand(r, M)
		attrs := map[string]*loader.Attr{
			"group":     {Name: "group", Kind: loader.AttrInt, I: int64(C)},
			"strides":   linInts("strides", int64(s), int64(s)),
			"dilations": linInts("dilations", int64(dil), int64(dil)),
			"pads":      linInts("pads", int64(pt), int64(pl), int64(pb), int64(pr)),
		}
		for _, withBias := range []bool{false, true} {
			in := []*tensor.Tensor{x, w}
			if withBias {
				in = append(in, b)
			}
			var want []float32
			withReference(func() { want = dwConv(t, attrs, in...) })
			gen := dwGenericReference(t, attrs, in...)
			for _, vec := range []bool{saved, false} {
				haveDwTapsVec = vec
				got := dwConv(t, attrs, in...)
				what := fmt.Sprintf("trial %d K %d dil %d stride %d N %d C %d mult %d %dx%d pads %d %d %d %d bias=%v vector=%v",
					trial, K, dil, s, N, C, mult, H, W, pt, pl, pb, pr, withBias, vec)
				closeF32(t, what+" vs reference", got, want, 1e-5)
				closeF32(t, what+" vs dwGenericPlane", got, gen, 1e-5)
			}
		}
	}
}

// dwTaps' vector kernel against dwTapsGo on lengths around its blocks of
// 128, its masked rest of 16–127 and its masked tail under 16, writing
// nothing past dst.
func TestDwTapsVecMatchesGo(t *testing.T) {
	if !haveDwTapsVec {
		t.Skip("no AVX-512 here")
	}
	r := rand.New(rand.NewSource(52))
	for _, taps := range []int{1, 9, 25, 49} {
		for n := 1; n <= 300; n++ {
			srcs := make([][]float32, taps)
			w := make([]float32, taps)
			for i := range srcs {
				srcs[i] = linRand(r, n).F32()
				w[i] = float32(r.NormFloat64())
			}
			got := make([]float32, n+1)
			got[n] = 99
			ptrs := make([]unsafe.Pointer, taps)
			if !dwTapsVec(got[:n], srcs, w, 0.5, ptrs) {
				t.Fatal("vector kernel did not run")
			}
			want := make([]float32, n)
			dwTapsGo(want, srcs, w, 0.5)
			closeF32(t, fmt.Sprintf("taps %d n %d", taps, n), got[:n], want, 1e-5)
			if got[n] != 99 {
				t.Fatalf("taps %d n %d: wrote past dst", taps, n)
			}
		}
	}
}

// benchDWTaps times one depthwise K×K Conv plane set (batch 8, EfficientNet
// and ConvNeXt sizes, and MNASNet's 7×7 planes) through one worker's
// dwTapsWork, or through the tap-by-tap
// dwGenericPlane it replaced (generic=true).
func benchDWTaps(b *testing.B, C, H, K, s int, generic bool) {
	r := rand.New(rand.NewSource(1))
	x, w := linRand(r, 8, C, H, H), linRand(r, C, 1, K, K)
	p := K / 2
	g := convGeom{in: []int{H, H}, k: []int{K, K}, strides: []int{s, s}, dil: []int{1, 1}, padBeg: []int{p, p}, padEnd: []int{p, p}}
	OH := (H+2*p-K)/s + 1
	g.out = []int{OH, OH}
	y := make([]float32, OH*OH)
	scratch := make([]float32, dwTapsScratch(&g))
	offs := dwTapOffsets(&g)
	var tw dwTapsWork
	tw.init(&g, offs, scratch)
	b.SetBytes(int64(4 * x.Size()))
	for b.Loop() {
		for pl := 0; pl < 8*C; pl++ {
			xp, wp := x.F32()[pl*H*H:(pl+1)*H*H], w.F32()[pl%C*K*K:(pl%C+1)*K*K]
			if generic {
				clear(y)
				dwGenericPlane(y, xp, wp, H, H, OH, OH, K, K, &g, 0, OH, 0, OH)
			} else {
				tw.plane(y, xp, wp, 0, H, H, OH, OH)
			}
		}
	}
}

func BenchmarkDWTaps5x5s1(b *testing.B)        { benchDWTaps(b, 240, 28, 5, 1, false) }
func BenchmarkDWTaps5x5s1Generic(b *testing.B) { benchDWTaps(b, 240, 28, 5, 1, true) }
func BenchmarkDWTaps5x5s2(b *testing.B)        { benchDWTaps(b, 144, 56, 5, 2, false) }
func BenchmarkDWTaps5x5s2Generic(b *testing.B) { benchDWTaps(b, 144, 56, 5, 2, true) }
func BenchmarkDWTaps5x5s1At7(b *testing.B)     { benchDWTaps(b, 1152, 7, 5, 1, false) }
func BenchmarkDWTaps7x7s1(b *testing.B)        { benchDWTaps(b, 96, 56, 7, 1, false) }
func BenchmarkDWTaps7x7s1Generic(b *testing.B) { benchDWTaps(b, 96, 56, 7, 1, true) }
