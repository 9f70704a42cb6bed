package probe

import (
	"fmt"
	"math"
	"math/rand"
	"testing"
	"unsafe"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// The assembly reads dwSmallArgs by fixed offsets.
func TestDwSmallArgsLayout(t *testing.T) {
	var a dwSmallArgs
	got := []uintptr{unsafe.Offsetof(a.h), unsafe.Offsetof(a.oh), unsafe.Offsetof(a.sh), unsafe.Offsetof(a.sw),
		unsafe.Offsetof(a.bias), unsafe.Offsetof(a.outMask), unsafe.Offsetof(a.offs), unsafe.Offsetof(a.masks), unsafe.Offsetof(a.zero)}
	want := []uintptr{8, 24, 64, 72, 80, 84, 88, 144, 176}
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("dwSmallArgs offsets %v, conv_dws_amd64.s reads %v", got, want)
		}
	}
}

// The small-plane depthwise kernel (output rows of at most 16 values)
// against the reference convolution (im2col + linGemmT), and bit for bit
// against the tap-row path (dwTapsAVX512, the same multiply-adds in the same
// order) on the windows that path takes: windows 1×1 to 7×7 (not square
// too), strides 1 and 2 per axis, paddings 0–3 per side, with and without
// bias. Tolerance 1e-5 relative to the output scale (common practice for
// float32 sums of ≤ 49 products in another order).
func TestDwSmallMatchesReference(t *testing.T) {
	if !haveDwSmall {
		t.Skip("no AVX-512 here")
	}
	r := rand.New(rand.NewSource(61))
	savedTaps := haveDwTapsVec
	defer func() { haveDwSmall, haveDwTapsVec = true, savedTaps }()
	ran, bitwise := 0, 0
	for trial := 0; ran < 150 && trial < 2000; trial++ {
		KH, KW := 1+r.Intn(7), 1+r.Intn(7)
		sh, sw := 1+r.Intn(2), 1+r.Intn(2)
		pt, pl, pb, pr := r.Intn(4), r.Intn(4), r.Intn(4), r.Intn(4)
		H, W := 1+r.Intn(70), 1+r.Intn(36)
		if H+pt+pb < KH || W+pl+pr < KW {
			continue
		}
		OW := (W+pl+pr-KW)/sw + 1
		if OW > 16 {
			continue
		}
		ran++
		N, C := 1+r.Intn(2), 1+r.Intn(3)
		x, w, b := linRand(r, N, C, H, W), linRand(r, C, 1, KH, KW), linRand(r, C)
		attrs := map[string]*loader.Attr{
			"group":        {Name: "group", Kind: loader.AttrInt, I: int64(C)},
			"kernel_shape": linInts("kernel_shape", int64(KH), int64(KW)),
			"strides":      linInts("strides", int64(sh), int64(sw)),
			"pads":         linInts("pads", int64(pt), int64(pl), int64(pb), int64(pr)),
		}
		for _, withBias := range []bool{false, true} {
			in := []*tensor.Tensor{x, w}
			if withBias {
				in = append(in, b)
			}
			what := fmt.Sprintf("trial %d %dx%d window, strides %d %d, %dx%d image, pads %d %d %d %d, bias=%v",
				trial, KH, KW, sh, sw, H, W, pt, pl, pb, pr, withBias)
			haveDwSmall = true
			got := dwConv(t, attrs, in...)
			var want []float32
			withReference(func() { want = dwConv(t, attrs, in...) })
			closeF32(t, what+" vs reference", got, want, 1e-5)
			if savedTaps && !(KH == 3 && KW == 3) {
				haveDwSmall = false
				taps := dwConv(t, attrs, in...)
				for i := range got {
					if math.Float32bits(got[i]) != math.Float32bits(taps[i]) {
						t.Fatalf("%s: output %d is %v, the tap-row path gives %v", what, i, got[i], taps[i])
					}
				}
				bitwise++
			}
		}
	}
	if ran < 150 {
		t.Fatalf("only %d geometries drawn", ran)
	}
	t.Logf("%d geometries, %d compared bit for bit with the tap-row path", ran, bitwise)
}

// dwSmallPlane writes its OH·OW outputs and nothing after them.
func TestDwSmallWritesOnlyThePlane(t *testing.T) {
	if !haveDwSmall {
		t.Skip("no AVX-512 here")
	}
	g := convGeom{in: []int{7, 7}, k: []int{5, 5}, out: []int{7, 7}, strides: []int{1, 1}, dil: []int{1, 1},
		padBeg: []int{2, 2}, padEnd: []int{2, 2}}
	a := newDwSmallArgs(&g)
	x := make([]float32, 49)
	for i := range x {
		x[i] = float32(i%5) - 2
	}
	w := make([]float32, 25)
	for i := range w {
		w[i] = 0.5
	}
	y := make([]float32, 49+32)
	for i := range y {
		y[i] = 12345
	}
	dwSmallPlane(y[:49], x, w, 1, &a)
	for i := 49; i < len(y); i++ {
		if y[i] != 12345 {
			t.Fatalf("value %d after the plane overwritten: %v", i, y[i])
		}
	}
	// the centre output sums the whole 5×5 window: 1 + 0.5·Σ x over rows and columns 1–5
	var s float32 = 1
	for r := 1; r <= 5; r++ {
		for c := 1; c <= 5; c++ {
			s += 0.5 * x[r*7+c]
		}
	}
	if d := y[3*7+3] - s; d > 1e-5 || d < -1e-5 {
		t.Fatalf("centre output %v, want %v", y[3*7+3], s)
	}
}
