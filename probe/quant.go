package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Shared arithmetic of the linear quantization operators (ONNX QuantizeLinear,
// DequantizeLinear and the QLinear* family). A quantized value q of an integer
// type with range [lo, hi] stands for the real value
//
//	x = (q − zero_point) · scale
//
// and a real value is quantized as q = saturate(round(x / scale) + zero_point),
// where round is round-half-to-even and saturate clamps to [lo, hi].

// QuantRange returns the representable integer range of a quantized element
// type, or ok=false for a type that is not one.
func QuantRange(dt tensor.DType) (lo, hi float64, ok bool) {
	switch dt {
	case tensor.Uint8:
		return 0, 255, true
	case tensor.Int8:
		return -128, 127, true
	case tensor.Uint16:
		return 0, 65535, true
	case tensor.Int16:
		return -32768, 32767, true
	case tensor.Int32:
		return math.MinInt32, math.MaxInt32, true
	}
	return 0, 0, false
}

// Saturate rounds v half to even, adds zp and clamps the sum to [lo, hi].
func Saturate(v, zp, lo, hi float64) float64 {
	if math.IsNaN(v) {
		// NaN has no integer; the spec leaves it open, the common choice is the zero point.
		v = 0
	}
	q := math.RoundToEven(v) + zp
	return math.Max(lo, math.Min(hi, q))
}

// intTensor builds a tensor of integer type dt from integer-valued float64s
// already inside dt's range.
func intTensor(dt tensor.DType, vals []float64, shape []int) *tensor.Tensor {
	t := tensor.New(dt, shape)
	switch d := t.Data.(type) {
	case []uint8:
		for i, v := range vals {
			d[i] = uint8(v)
		}
	case []int8:
		for i, v := range vals {
			d[i] = int8(v)
		}
	case []uint16:
		for i, v := range vals {
			d[i] = uint16(v)
		}
	case []int16:
		for i, v := range vals {
			d[i] = int16(v)
		}
	case []int32:
		for i, v := range vals {
			d[i] = int32(v)
		}
	}
	return t
}

// ParamIndex maps each element of a tensor of shape x to the index of its
// scale and zero point in a parameter tensor of shape p:
//   - per tensor: p has one element;
//   - per axis: p is 1-D with x[axis] elements;
//   - blocked (blockSize > 0, opset 21): p has x's rank, p[axis] = ⌈x[axis]/blockSize⌉
//     and every other dimension equal to x's.
func ParamIndex(x, p []int, axis, blockSize int) (func(i int) int, error) {
	n := 1
	for _, d := range p {
		n *= d
	}
	if n == 1 && blockSize == 0 {
		return func(int) int { return 0 }, nil
	}
	if len(x) == 0 {
		return nil, fmt.Errorf("scale of shape %v does not fit a scalar input", p)
	}
	a, err := NormAxis(axis, len(x))
	if err != nil {
		return nil, err
	}
	inner := 1
	for _, d := range x[a+1:] {
		inner *= d
	}
	na := x[a]
	if blockSize <= 0 {
		if len(p) != 1 || p[0] != na {
			return nil, fmt.Errorf("scale of shape %v does not fit input %v along axis %d", p, x, a)
		}
		return func(i int) int { return (i / inner) % na }, nil
	}
	nb := (na + blockSize - 1) / blockSize
	if len(p) != len(x) || p[a] != nb {
		return nil, fmt.Errorf("scale of shape %v does not fit input %v with block size %d along axis %d", p, x, blockSize, a)
	}
	for d := range x {
		if d != a && p[d] != x[d] {
			return nil, fmt.Errorf("scale of shape %v does not fit input %v with block size %d along axis %d", p, x, blockSize, a)
		}
	}
	return func(i int) int {
		outer, rest := i/(na*inner), i%(na*inner)
		return (outer*nb+(rest/inner)/blockSize)*inner + rest%inner
	}, nil
}

// qparams are the scale and zero point of one quantized tensor, widened to float64.
type qparams struct {
	scale, zp []float64
	dt        tensor.DType // the quantized type
	lo, hi    float64
}

// readQParams reads a scale tensor and an optional zero point of quantized
// type dt (the zero point's own type when present); a missing zero point is 0.
func readQParams(scale, zp *tensor.Tensor, dt tensor.DType) (qparams, error) {
	if scale == nil {
		return qparams{}, fmt.Errorf("scale is missing")
	}
	if !scale.DType.IsFloat() {
		return qparams{}, fmt.Errorf("scale must be a float tensor, got %v", scale.DType)
	}
	if zp != nil && zp.Size() > 0 {
		dt = zp.DType
		if zp.Size() != scale.Size() {
			return qparams{}, fmt.Errorf("zero point of shape %v and scale of shape %v differ", zp.Shape, scale.Shape)
		}
	}
	lo, hi, ok := QuantRange(dt)
	if !ok {
		return qparams{}, fmt.Errorf("quantized type %v is not supported (supported: uint8, int8, uint16, int16, int32)", dt)
	}
	q := qparams{scale: make([]float64, scale.Size()), zp: make([]float64, scale.Size()), dt: dt, lo: lo, hi: hi}
	for i := range q.scale {
		q.scale[i] = float64(float32(scale.Float64At(i)))
		if zp != nil && zp.Size() > 0 {
			q.zp[i] = zp.Float64At(i)
		}
	}
	return q, nil
}

// quantizeF32 quantizes v with scale s and zero point zp as the ONNX reference
// does: the quotient v/s is taken in float32, then rounded and saturated.
func (q qparams) quantize(v float64, k int) float64 {
	return Saturate(float64(float32(v)/float32(q.scale[k])), q.zp[k], q.lo, q.hi)
}

// dequantize returns (v − zp)·s in float32 arithmetic.
func (q qparams) dequantize(v float64, k int) float64 {
	return float64(float32(v-q.zp[k]) * float32(q.scale[k]))
}

// scalarQParams reads per-tensor parameters (one scale, one zero point).
func scalarQParams(what string, scale, zp *tensor.Tensor, dt tensor.DType) (qparams, error) {
	q, err := readQParams(scale, zp, dt)
	if err != nil {
		return q, fmt.Errorf("%s: %w", what, err)
	}
	if len(q.scale) != 1 {
		return q, fmt.Errorf("%s: scale must be a scalar, got shape %v", what, scale.Shape)
	}
	return q, nil
}
