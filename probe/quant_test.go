package probe

import (
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// newestKernel is the newest kernel of an operator (for tests).
func newestKernel(domain, op string) Kernel {
	k, _ := Lookup(domain, op, 1<<20)
	return k
}

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

// Malformed inputs to the quantization kernels (wrong types, scales that do
// not fit, empty and scalar tensors, missing inputs) give errors, never a
// panic: a seeded sweep over combinations of small tensors.
func TestQuantKernelsRejectBadInputsWithoutPanic(t *testing.T) {
	pool := []*tensor.Tensor{
		nil,
		tensor.From([]float32{0.5}),
		tensor.From([]float32{1, 2}, 2),
		tensor.From([]float32{1, -2, 3, 0, 5, 6}, 2, 3),
		tensor.From(make([]float32, 18), 1, 2, 3, 3),
		tensor.From([]uint8{3}),
		tensor.From([]uint8{1, 2, 3, 4, 5, 6}, 2, 3),
		tensor.From(make([]uint8, 18), 1, 2, 3, 3),
		tensor.From([]int8{-1, 2}, 2),
		tensor.From(make([]int8, 36), 2, 2, 3, 3),
		tensor.From([]int32{7, 8}, 2),
		tensor.From([]int64{1}, 1),
		tensor.New(tensor.Float32, []int{0, 3}),
		tensor.From([]float32{0}),
	}
	kernels := map[string]Kernel{"QuantizeLinear": quantizeLinearKernel, "DequantizeLinear": dequantizeLinearKernel,
		"DynamicQuantizeLinear": dynamicQuantizeLinearKernel, "QLinearConv": qlinearConvKernel, "QLinearMatMul": qlinearMatMulKernel,
		"QGemm": qgemmKernel, "QLinearAdd": qlinearBinary(false), "QLinearMul": qlinearBinary(true),
		"QLinearGlobalAveragePool": qlinearGlobalAveragePoolKernel, "QLinearConcat": qlinearConcatKernel,
		"QLinearSigmoid": newestKernel("com.microsoft", "QLinearSigmoid")}
	seed := uint32(17)
	next := func(n int) int {
		seed = seed*1664525 + 1013904223
		return int(seed>>8) % n
	}
	for name, k := range kernels {
		for iter := 0; iter < 400; iter++ {
			in := make([]*tensor.Tensor, 1+next(9))
			for i := range in {
				in[i] = pool[next(len(pool))]
			}
			func() {
				defer func() {
					if r := recover(); r != nil {
						t.Errorf("%s with %v: panic %v", name, in, r)
					}
				}()
				attrs := map[string]*loader.Attr{
					"axis":       {Name: "axis", Kind: loader.AttrInt, I: int64(next(7) - 3)},
					"block_size": {Name: "block_size", Kind: loader.AttrInt, I: int64(next(5) - 1)},
					"transB":     {Name: "transB", Kind: loader.AttrInt, I: int64(next(2))},
				}
				elemRun(t, k, 21, attrs, 3, in...)
			}()
		}
	}
}
