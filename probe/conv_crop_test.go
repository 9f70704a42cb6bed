package probe

import (
	"fmt"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/loader"
)

// Dilated convolutions whose outer taps never meet the image (atrous
// pyramids: dilation 36 on a 28×28 map) give the same output with the dead
// taps cropped as the reference convolution (im2col + linGemmT over the
// whole window, convUseReference), with initializer weights (the cropped
// copy cached, run twice) and without, grouped and not; and the crop
// happens where it should (the geometry it picks).
func TestConvCropDeadTaps(t *testing.T) {
	r := rand.New(rand.NewSource(91))
	type tc struct {
		H, W, K, dil, pad, s, group int
		wantK                       []int // cropped window, nil when nothing is cropped
	}
	cases := []tc{
		{28, 28, 3, 36, 36, 1, 1, []int{1, 1}},
		{28, 28, 3, 24, 24, 1, 1, nil}, // the outer taps meet rows 0–3 and 24–27
		{7, 9, 3, 8, 8, 1, 2, []int{1, 3}},
		{5, 5, 5, 4, 8, 1, 1, []int{3, 3}},
		{6, 6, 3, 12, 12, 2, 1, []int{1, 1}},
	}
	for i, k := range cases {
		C, M := 4, 6
		x, w, b := linRand(r, 2, C, k.H, k.W), linRand(r, M, C/k.group, k.K, k.K), linRand(r, M)
		attrs := map[string]*loader.Attr{
			"group":     {Name: "group", Kind: loader.AttrInt, I: int64(k.group)},
			"strides":   linInts("strides", int64(k.s), int64(k.s)),
			"dilations": linInts("dilations", int64(k.dil), int64(k.dil)),
			"pads":      linInts("pads", int64(k.pad), int64(k.pad), int64(k.pad), int64(k.pad)),
		}
		run := func(consts map[string]bool) []float32 {
			c := fastCall("Conv", attrs, 11, []string{"X", "W", "B"}, consts, x, w, b)
			if err := convKernel(c); err != nil {
				t.Fatal(err)
			}
			return c.Out[0].F32()
		}
		var want []float32
		withReference(func() { want = run(nil) })
		for _, consts := range []map[string]bool{nil, {"W": true}, {"W": true}} {
			closeF32(t, fmt.Sprintf("case %d %+v consts %v", i, k, consts), run(consts), want, 1e-5)
		}
		// the geometry convCropTaps picks
		c := fastCall("Conv", attrs, 11, []string{"X", "W", "B"}, nil, x, w, b)
		g, err := convAttrs(c, 2, w.Shape[2:])
		if err != nil {
			t.Fatal(err)
		}
		g.in = x.Shape[2:]
		g.clonePads()
		if err := convForwardOut(&g, "NOTSET", false); err != nil {
			t.Fatal(err)
		}
		ng, nw, ok := convCropTaps(c, w, &g)
		switch {
		case k.wantK == nil && ok:
			t.Errorf("case %d: cropped to %v, want no crop", i, ng.k)
		case k.wantK != nil && (!ok || fmt.Sprint(ng.k) != fmt.Sprint(k.wantK)):
			t.Errorf("case %d: crop %v (ok=%v), want %v", i, ng.k, ok, k.wantK)
		case ok && fmt.Sprint(nw.Shape[2:]) != fmt.Sprint(k.wantK):
			t.Errorf("case %d: cropped weights %v", i, nw.Shape)
		}
	}
}
