package probe

import (
	"fmt"
	"math"
	"math/rand"
	"testing"
)

// resizeLastAxis (the innermost axis: one dot product per output) against
// the general per-row loop it bypasses (resizeRows), bit for bit, for
// nearest, linear and cubic taps (ONNX Resize semantics, the tap tables of
// resizeTaps), up- and downscaling, with antialias and with
// tf_crop_and_resize extrapolation.
func TestResizeLastAxisMatchesRowLoop(t *testing.T) {
	r := rand.New(rand.NewSource(71))
	for trial := 0; trial < 200; trial++ {
		o := resizeOpts{
			mode:      []string{"nearest", "linear", "cubic"}[trial%3],
			coord:     []string{"half_pixel", "asymmetric", "align_corners", "pytorch_half_pixel", "tf_crop_and_resize"}[r.Intn(5)],
			nearest:   "round_prefer_floor",
			cubicA:    -0.75,
			antialias: r.Intn(3) == 0,
			extrap:    -7,
		}
		in, out := 1+r.Intn(20), 1+r.Intn(40)
		var roi []float64
		if o.coord == "tf_crop_and_resize" {
			roi = []float64{-0.2, 1.1}
		}
		tab, err := resizeTaps(o, in, out, float64(out), float64(out)/float64(in), roi)
		if err != nil {
			t.Fatal(err)
		}
		outer := 1 + r.Intn(5)
		x := linRand(r, outer*in).F32()
		x[r.Intn(len(x))] = float32(math.Copysign(0, -1))
		got := make([]float32, outer*out)
		resizeAxisRun(got, x, outer, in, 1, out, tab, float32(o.extrap))
		want := make([]float32, outer*out)
		resizeRows(want, x, outer, in, 1, out, tab, float32(o.extrap))
		for i := range want {
			if math.Float32bits(got[i]) != math.Float32bits(want[i]) {
				t.Fatalf("%s: element %d = %g, row loop %g", fmt.Sprintf("trial %d %+v %d→%d", trial, o, in, out), i, got[i], want[i])
			}
		}
	}
}
