package probe

import (
	"math"
	"math/rand"
	"testing"
)

// The AVX-512 row kernels of LayerNormalization give bit for bit what the
// Go loops give (the reference: the same float64 operations in the same
// order, norm_f32.go), for row lengths around the vector widths, with and
// without bias, centred (LayerNormalization) and not (RMSNormalization),
// on rows with a large common offset (where the variance's cancellation
// shows), and with NaN and ±Inf inside.
func TestNormRowVecSameBits(t *testing.T) {
	if !haveNormVec {
		t.Skip("no AVX-512 on this machine: the Go loops are the only path")
	}
	r := rand.New(rand.NewSource(7))
	for _, m := range []int{1, 7, 8, 15, 16, 17, 31, 33, 64, 100, 256, 768, 1001} {
		for _, offset := range []float64{0, 1e4} {
			x := make([]float32, m)
			for i := range x {
				x[i] = float32(offset + r.NormFloat64()*3)
			}
			if m > 20 {
				x[5], x[m-3] = float32(math.NaN()), float32(math.Inf(1))
			}
			scale, bias := make([]float64, m), make([]float64, m)
			for i := range scale {
				scale[i], bias[i] = r.NormFloat64(), r.NormFloat64()
			}
			for _, rms := range []bool{false, true} {
				for _, b := range [][]float64{bias, nil} {
					got, want := make([]float32, m), make([]float32, m)
					gm, gr := normRow32(got, x, scale, b, 1e-5, rms)
					haveNormVec = false
					wm, wr := normRow32(want, x, scale, b, 1e-5, rms)
					haveNormVec = true
					if math.Float64bits(gm) != math.Float64bits(wm) || math.Float64bits(gr) != math.Float64bits(wr) {
						t.Fatalf("m=%d offset %g rms %v: mean, 1/σ %v %v, Go %v %v", m, offset, rms, gm, gr, wm, wr)
					}
					for i := range got {
						if math.Float32bits(got[i]) != math.Float32bits(want[i]) {
							t.Fatalf("m=%d offset %g rms %v bias %v: y[%d] = %g, Go %g", m, offset, rms, b != nil, i, got[i], want[i])
						}
					}
				}
			}
		}
	}
}

// Known answer (the ONNX LayerNormalization definition, Y = (X − mean) /
// sqrt(var + epsilon) · Scale + B, evaluated in float64 here): a row of
// 1000 values around 1e4 with spread 3 normalises to within 1e-6 relative.
func TestNormRowKnownAnswer(t *testing.T) {
	r := rand.New(rand.NewSource(8))
	const m = 1000
	x := make([]float32, m)
	var sum float64
	for i := range x {
		x[i] = float32(1e4 + r.NormFloat64()*3)
		sum += float64(x[i])
	}
	mean := sum / m
	var q float64
	for _, v := range x {
		q += (float64(v) - mean) * (float64(v) - mean)
	}
	inv := 1 / math.Sqrt(q/m+1e-5)
	scale, bias := make([]float64, m), make([]float64, m)
	for i := range scale {
		scale[i], bias[i] = 0.5+float64(i%7), float64(i%3)-1
	}
	y := make([]float32, m)
	normRow32(y, x, scale, bias, 1e-5, false)
	for i, v := range x {
		want := (float64(v)-mean)*inv*scale[i] + bias[i]
		if d := math.Abs(float64(y[i]) - want); d > 1e-6*math.Max(1, math.Abs(want)) {
			t.Fatalf("y[%d] = %g, want %g", i, y[i], want)
		}
	}
}
