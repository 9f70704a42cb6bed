package probe

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// Type conversion and pass-through operators: Cast, CastLike, Identity, Dropout (inference).

func init() {
	reg("Cast", elemCast, 1, 6, 9, 13, 19, 21)
	reg("CastLike", elemCastLike, 15, 19, 21)
	reg("Identity", elemIdentity, 1, 13, 14, 16, 19, 21)
	reg("Dropout", elemDropout, 1, 6, 7, 10, 12, 13)
}

// Cast converts input 0 to the type given by the "to" attribute. Numbers
// convert as in C (floats truncate toward zero into integers), numbers to
// bool are x != 0, strings parse as numbers. Casts to float16/bfloat16 round
// to that precision and keep float32 storage, as the loader does for such tensors.
func elemCast(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	if !c.Has("to") {
		return fmt.Errorf("attribute \"to\" is missing")
	}
	out, err := elemCastTensor(c.In[0], tensor.DType(c.Int("to", 0)))
	if err != nil {
		return err
	}
	c.Set(0, out)
	return nil
}

// CastLike casts input 0 to the element type of input 1. A float32 input 1
// that the graph declares float16/bfloat16 (widened on load) selects that type.
func elemCastLike(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	to := c.In[1].DType
	if d := elemDeclaredType(c, c.Node.Inputs[1]); to == tensor.Float32 && (d == tensor.Float16 || d == tensor.BFloat16) {
		to = d
	}
	out, err := elemCastTensor(c.In[0], to)
	if err != nil {
		return err
	}
	c.Set(0, out)
	return nil
}

// elemDeclaredType is the element type the running graph declares for a
// value (graph input, output or value_info), or Undefined.
func elemDeclaredType(c *Call, name string) tensor.DType {
	if c.run == nil || c.run.plan == nil || c.run.plan.Graph == nil {
		return tensor.Undefined
	}
	g := c.run.plan.Graph
	for _, list := range [][]loader.ValueInfo{g.Inputs, g.DefaultInputs, g.Outputs} {
		for _, vi := range list {
			if vi.Name == name && vi.HasType {
				return vi.DType
			}
		}
	}
	if vi, ok := g.ValueInfo[name]; ok && vi.HasType {
		return vi.DType
	}
	return tensor.Undefined
}

// Identity: y = x (the tensor is shared; kernels never write their inputs).
func elemIdentity(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	c.Set(0, c.In[0])
	return nil
}

// Dropout at inference: y = x and the optional mask is all true (all ones
// of x's type before opset 10). From opset 12 the inputs ratio and
// training_mode exist; training mode is only accepted with ratio 0, where it
// is the identity too.
func elemDropout(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	if c.Opset >= 12 {
		if tm := c.Input(2); tm != nil && tm.Size() > 0 && tm.Float64At(0) != 0 {
			ratio := 0.5
			if r := c.Input(1); r != nil && r.Size() > 0 {
				ratio = r.Float64At(0)
			}
			if ratio != 0 {
				return fmt.Errorf("training mode is not supported (training_mode is true with ratio %g)", ratio)
			}
		}
	}
	c.Set(0, x)
	if c.WantOut(1) {
		var mask *tensor.Tensor
		if c.Opset >= 10 {
			mask = c.Arena().New(tensor.Bool, x.Shape)
			fillTrue(mask.Bools())
		} else {
			ones, err := elemCastTensor(tensor.From(elemTrues(x.Size()), x.Shape...), x.DType)
			if err != nil {
				return err
			}
			mask = ones
		}
		c.Set(1, mask)
	}
	return nil
}

// fillTrue sets every element of b to true by doubling copies (memmove
// speed instead of one store per byte).
func fillTrue(b []bool) {
	if len(b) == 0 {
		return
	}
	b[0] = true
	for k := 1; k < len(b); k *= 2 {
		copy(b[k:], b[:k])
	}
}

func elemTrues(n int) []bool {
	b := make([]bool, n)
	fillTrue(b)
	return b
}

// elemCastTensor converts x to dtype to (float16/bfloat16: rounded float32).
func elemCastTensor(x *tensor.Tensor, to tensor.DType) (*tensor.Tensor, error) {
	store := to
	if to == tensor.Float16 || to == tensor.BFloat16 {
		store = tensor.Float32
	}
	if !store.Supported() {
		return nil, fmt.Errorf("cast to unsupported data type %v", to)
	}
	var data any
	var err error
	switch d := x.Data.(type) {
	case []float32:
		data = elemCastFrom(d, store)
	case []float64:
		data = elemCastFrom(d, store)
	case []int64:
		data = elemCastFrom(d, store)
	case []int32:
		data = elemCastFrom(d, store)
	case []int16:
		data = elemCastFrom(d, store)
	case []int8:
		data = elemCastFrom(d, store)
	case []uint8:
		data = elemCastFrom(d, store)
	case []uint16:
		data = elemCastFrom(d, store)
	case []uint32:
		data = elemCastFrom(d, store)
	case []uint64:
		data = elemCastFrom(d, store)
	case []bool:
		u := make([]uint8, len(d))
		for i, v := range d {
			if v {
				u[i] = 1
			}
		}
		if store == tensor.String {
			data = elemFormatBools(d)
		} else {
			data = elemCastFrom(u, store)
		}
	case []string:
		data, err = elemParseStrings(d, store)
	default:
		return nil, fmt.Errorf("cast from unsupported data type %v", x.DType)
	}
	if err != nil {
		return nil, err
	}
	out := &tensor.Tensor{DType: store, Shape: shapeOf(x), Data: data}
	switch to {
	case tensor.Float16:
		elemRoundFloats(out.F32(), 11, -14, 65504)
	case tensor.BFloat16:
		elemRoundFloats(out.F32(), 8, -126, (2-1.0/128)*math.Pow(2, 127))
	}
	return out, nil
}

// elemCastFrom converts numeric data to the Go slice type of dtype to.
func elemCastFrom[S Number](src []S, to tensor.DType) any {
	switch to {
	case tensor.Float32:
		return elemConvert[S, float32](src)
	case tensor.Float64:
		return elemConvert[S, float64](src)
	case tensor.Int64:
		return elemConvert[S, int64](src)
	case tensor.Int32:
		return elemConvert[S, int32](src)
	case tensor.Int16:
		return elemConvert[S, int16](src)
	case tensor.Int8:
		return elemConvert[S, int8](src)
	case tensor.Uint8:
		return elemConvert[S, uint8](src)
	case tensor.Uint16:
		return elemConvert[S, uint16](src)
	case tensor.Uint32:
		return elemConvert[S, uint32](src)
	case tensor.Uint64:
		return elemConvert[S, uint64](src)
	case tensor.Bool:
		out := make([]bool, len(src))
		for i, v := range src {
			out[i] = v != 0
		}
		return out
	case tensor.String:
		return elemFormatNumbers(src)
	}
	panic(fmt.Sprintf("cast: no conversion to %v", to))
}

func elemConvert[S, D Number](src []S) []D {
	out := make([]D, len(src))
	for i, v := range src {
		out[i] = D(v)
	}
	return out
}

// elemFormatNumbers renders numbers as strings (shortest round-trip form for floats).
func elemFormatNumbers[S Number](src []S) []string {
	out := make([]string, len(src))
	switch d := any(src).(type) {
	case []float32:
		for i, v := range d {
			out[i] = strconv.FormatFloat(float64(v), 'g', -1, 32)
		}
	case []float64:
		for i, v := range d {
			out[i] = strconv.FormatFloat(v, 'g', -1, 64)
		}
	default:
		var one S = 1
		signed := (one - 2) < 0
		for i, v := range src {
			if signed {
				out[i] = strconv.FormatInt(int64(v), 10)
			} else {
				out[i] = strconv.FormatUint(uint64(v), 10)
			}
		}
	}
	return out
}

func elemFormatBools(src []bool) []string {
	out := make([]string, len(src))
	for i, v := range src {
		out[i] = strconv.FormatBool(v)
	}
	return out
}

// elemParseStrings parses decimal text ("1.5", "-3", "inf", "NaN") into dtype to.
func elemParseStrings(src []string, to tensor.DType) (any, error) {
	switch to {
	case tensor.String:
		return append([]string{}, src...), nil
	case tensor.Int64, tensor.Int32, tensor.Int16, tensor.Int8:
		v := make([]int64, len(src))
		for i, s := range src {
			n, err := strconv.ParseInt(strings.TrimSpace(s), 10, 64)
			if err != nil {
				f, ferr := strconv.ParseFloat(strings.TrimSpace(s), 64)
				if ferr != nil {
					return nil, fmt.Errorf("element %d: %q is not a number", i, s)
				}
				n = int64(f)
			}
			v[i] = n
		}
		return elemCastFrom(v, to), nil
	case tensor.Uint64, tensor.Uint32, tensor.Uint16, tensor.Uint8:
		v := make([]uint64, len(src))
		for i, s := range src {
			n, err := strconv.ParseUint(strings.TrimSpace(s), 10, 64)
			if err != nil {
				f, ferr := strconv.ParseFloat(strings.TrimSpace(s), 64)
				if ferr != nil {
					return nil, fmt.Errorf("element %d: %q is not a number", i, s)
				}
				n = uint64(f)
			}
			v[i] = n
		}
		return elemCastFrom(v, to), nil
	case tensor.Bool:
		v := make([]bool, len(src))
		for i, s := range src {
			s = strings.TrimSpace(s)
			if b, err := strconv.ParseBool(s); err == nil {
				v[i] = b
				continue
			}
			f, err := strconv.ParseFloat(s, 64)
			if err != nil {
				return nil, fmt.Errorf("element %d: %q is not a boolean or number", i, s)
			}
			v[i] = f != 0
		}
		return v, nil
	}
	v := make([]float64, len(src))
	for i, s := range src {
		f, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
		if err != nil {
			// ParseFloat reports out-of-range values as ±Inf together with an error
			if ne, ok := err.(*strconv.NumError); !ok || ne.Err != strconv.ErrRange {
				return nil, fmt.Errorf("element %d: %q is not a number", i, s)
			}
		}
		v[i] = f
	}
	return elemCastFrom(v, to), nil
}

// elemRoundFloats rounds every value in place to a binary float format with
// bits significant bits, smallest normal exponent emin and largest finite
// value maxFinite (round half to even; beyond maxFinite becomes ±Inf).
func elemRoundFloats(d []float32, bits, emin int, maxFinite float64) {
	for i, v := range d {
		x := float64(v)
		if x == 0 || math.IsNaN(x) || math.IsInf(x, 0) {
			continue
		}
		_, e := math.Frexp(x) // |x| in [2^(e-1), 2^e)
		if e-1 < emin {
			e = emin + 1 // subnormal: fixed quantum
		}
		q := math.Ldexp(1, e-bits)
		r := math.RoundToEven(x/q) * q
		if math.Abs(r) > maxFinite {
			r = math.Copysign(math.Inf(1), r)
		}
		d[i] = float32(r)
	}
}
