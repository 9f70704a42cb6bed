package probe

import (
	"testing"

	"github.com/vitals-health/vitals/tensor"
)

// QuantizeLinear rounds half to even and saturates (ONNX operator spec,
// QuantizeLinear: "rounding to nearest ties to even"; values outside the
// type's range saturate). Known answers worked by hand from that rule.
func TestQuantizeRoundsHalfToEvenAndSaturates(t *testing.T) {
	x := tensor.From([]float32{0.5, 1.5, 2.5, -0.5, -2.5, 300, -300}, 7)
	for _, tc := range []struct {
		zp   *tensor.Tensor
		want []float64
	}{
		{tensor.From([]int8{0}), []float64{0, 2, 2, 0, -2, 127, -128}},
		{tensor.From([]uint8{10}), []float64{10, 12, 12, 10, 8, 255, 0}},
		{tensor.From([]int16{0}), []float64{0, 2, 2, 0, -2, 300, -300}},
	} {
		out, err := elemRun(t, quantizeLinearKernel, 13, nil, 1, x, tensor.From([]float32{1}), tc.zp)
		if err != nil {
			t.Fatal(err)
		}
		if out[0].DType != tc.zp.DType {
			t.Fatalf("type %v, want %v", out[0].DType, tc.zp.DType)
		}
		for i, w := range tc.want {
			if g := out[0].Float64At(i); g != w {
				t.Errorf("zp %v: element %d (%g): %g, want %g", tc.zp, i, x.F32()[i], g, w)
			}
		}
	}
}
