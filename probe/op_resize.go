package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Resampling: Resize (opsets 10–19) and the older Upsample (7, 9).
//
// Every mode is separable, so the output is built one axis at a time: for each
// output index j the axis gets a few (input index, weight) taps from the
// original coordinate x = T(j) given by coordinate_transformation_mode
// (half_pixel: (j+0.5)/scale−0.5, asymmetric: j/scale, align_corners:
// j·(in−1)/(out−1), …), then
//   nearest: the one input at x rounded by nearest_mode;
//   linear:  weights max(0, 1−|x−i|) on the neighbours;
//   cubic:   Keys' kernel with a = cubic_coeff_a on four neighbours;
// with antialias a downscaled axis stretches the kernel by 1/scale.

func init() {
	reg("Resize", resizeKernel, 10, 11, 13, 18, 19)
	reg("Upsample", upsampleKernel, 7, 9)
}

type resizeOpts struct {
	mode, coord, nearest string
	cubicA               float64
	exclude, antialias   bool
	extrap               float64
}

// resizeAxis is the tap table of one axis: out·n taps, idx and weight.
type resizeAxis struct {
	n      int
	idx    []int
	w      []float64
	extrap []bool // output index maps outside the crop region
}

func upsampleKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	var scales []float64
	if c.Opset >= 9 {
		if c.Input(1) == nil {
			return fmt.Errorf("Upsample needs the scales input")
		}
		scales = resizeFloats(c.In[1])
	} else {
		for _, v := range c.Floats("scales") {
			scales = append(scales, float64(v))
		}
	}
	if len(scales) != x.Rank() {
		return fmt.Errorf("scales %v do not match input rank %d", scales, x.Rank())
	}
	mode := c.Str("mode", "nearest")
	if mode == "bilinear" {
		mode = "linear"
	}
	opts := resizeOpts{mode: mode, coord: "asymmetric", nearest: "floor"}
	out := make([]int, x.Rank())
	for i, s := range scales {
		out[i] = int(float64(x.Shape[i]) * s)
	}
	return resizeRun(c, x, opts, scales, out, nil, nil)
}

func resizeFloats(t *tensor.Tensor) []float64 {
	out := make([]float64, t.Size())
	for i := range out {
		out[i] = t.Float64At(i)
	}
	return out
}

func resizeKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	r := x.Rank()
	opts := resizeOpts{
		mode:      c.Str("mode", "nearest"),
		coord:     c.Str("coordinate_transformation_mode", "half_pixel"),
		nearest:   c.Str("nearest_mode", "round_prefer_floor"),
		cubicA:    float64(c.Float("cubic_coeff_a", -0.75)),
		exclude:   c.Int("exclude_outside", 0) != 0,
		antialias: c.Int("antialias", 0) != 0,
		extrap:    float64(c.Float("extrapolation_value", 0)),
	}
	present := func(i int) *tensor.Tensor {
		if t := c.Input(i); t != nil && t.Size() > 0 {
			return t
		}
		return nil
	}
	var roiT, scalesT, sizesT *tensor.Tensor
	if c.Opset < 11 {
		opts.coord, opts.nearest = "asymmetric", "floor"
		scalesT = present(1)
	} else {
		roiT, scalesT, sizesT = present(1), present(2), present(3)
	}
	if (scalesT == nil) == (sizesT == nil) {
		return fmt.Errorf("Resize needs exactly one of scales and sizes")
	}
	axes := make([]int, r)
	for i := range axes {
		axes[i] = i
	}
	if a := c.Ints("axes"); a != nil {
		axes = a
		seen := map[int]bool{}
		for i := range axes {
			ax, err := NormAxis(axes[i], r)
			if err != nil {
				return err
			}
			if seen[ax] {
				return fmt.Errorf("axes %v repeat an axis", a)
			}
			seen[ax] = true
			axes[i] = ax
		}
	}
	scales := make([]float64, r)
	out := append([]int{}, x.Shape...)
	outF := make([]float64, r)
	for i := range scales {
		scales[i] = 1
		outF[i] = float64(x.Shape[i])
	}
	if scalesT != nil {
		sv := resizeFloats(scalesT)
		if len(sv) != len(axes) {
			return fmt.Errorf("scales %v do not match %d axes", sv, len(axes))
		}
		for i, ax := range axes {
			if !(sv[i] > 0) {
				return fmt.Errorf("scales %v must be positive", sv)
			}
			scales[ax] = sv[i]
			out[ax] = int(float64(x.Shape[ax]) * sv[i])
			outF[ax] = sv[i] * float64(x.Shape[ax])
		}
	} else {
		sz := sizesT.Ints()
		if len(sz) != len(axes) {
			return fmt.Errorf("sizes %v do not match %d axes", sz, len(axes))
		}
		policy := c.Str("keep_aspect_ratio_policy", "stretch")
		var keep float64
		for i, ax := range axes {
			if sz[i] < 0 || x.Shape[ax] == 0 {
				return fmt.Errorf("bad sizes %v for input %v", sz, x.Shape)
			}
			s := float64(sz[i]) / float64(x.Shape[ax])
			switch {
			case i == 0:
				keep = s
			case policy == "not_larger":
				keep = math.Min(keep, s)
			case policy == "not_smaller":
				keep = math.Max(keep, s)
			}
			scales[ax], out[ax], outF[ax] = s, sz[i], float64(sz[i])
		}
		switch policy {
		case "stretch":
		case "not_larger", "not_smaller":
			for _, ax := range axes {
				scales[ax] = keep
				outF[ax] = keep * float64(x.Shape[ax])
				out[ax] = int(outF[ax] + 0.5)
			}
		default:
			return fmt.Errorf("unknown keep_aspect_ratio_policy %q", policy)
		}
	}
	var roi []float64
	if roiT != nil && opts.coord == "tf_crop_and_resize" {
		rv := resizeFloats(roiT)
		if len(rv) != 2*len(axes) {
			return fmt.Errorf("roi %v does not match %d axes", rv, len(axes))
		}
		roi = make([]float64, 2*r)
		for i := 0; i < r; i++ {
			roi[r+i] = 1
		}
		for i, ax := range axes {
			roi[ax], roi[r+ax] = rv[i], rv[len(axes)+i]
		}
	}
	return resizeRun(c, x, opts, scales, out, outF, roi)
}

// resizeRun builds every axis's taps and applies the axes in turn.
func resizeRun(c *Call, x *tensor.Tensor, o resizeOpts, scales []float64, out []int, outF []float64, roi []float64) error {
	switch o.mode {
	case "nearest", "linear", "cubic":
	default:
		return fmt.Errorf("unknown mode %q", o.mode)
	}
	if _, err := c.Arena().CheckShape(x.DType, out); err != nil {
		return err
	}
	cur := x
	for ax := range out {
		if out[ax] < 0 {
			return fmt.Errorf("output size %d on axis %d", out[ax], ax)
		}
		of := float64(out[ax])
		if outF != nil {
			of = outF[ax]
		}
		var roiAx []float64
		if roi != nil {
			roiAx = []float64{roi[ax], roi[len(out)+ax]}
		}
		tab, err := resizeTaps(o, x.Shape[ax], out[ax], of, scales[ax], roiAx)
		if err != nil {
			return err
		}
		if c.resizeTables != nil { // ResizeTables: the tables only
			var rt *ResizeTable
			if !tab.identity(x.Shape[ax]) {
				rt = &ResizeTable{N: tab.n, Idx: tab.idx, W: tab.w, Extrap: tab.extrap}
			}
			*c.resizeTables = append(*c.resizeTables, rt)
			continue
		}
		if tab.identity(x.Shape[ax]) {
			continue
		}
		next, err := resizeApply(c.Arena(), cur, ax, out[ax], tab, o.extrap)
		if err != nil {
			return err
		}
		cur = next
	}
	if c.resizeTables != nil {
		return nil
	}
	if cur == x {
		cur = x.Clone()
	}
	c.Set(0, cur)
	return nil
}

// ResizeTable is one axis of a Resize (or Upsample) as its kernel resamples
// it: output j along the axis is Σ_q W[j·N+q]·x[Idx[j·N+q]] (the other
// axes' indices unchanged), or the extrapolation value where Extrap[j]
// (tf_crop_and_resize outside the input).
type ResizeTable struct {
	N      int
	Idx    []int
	W      []float64
	Extrap []bool
}

// ResizeTables returns the tap table of every axis of a Resize or Upsample
// call, in the order the kernel applies them (nil for an axis it leaves as
// it is), without resampling anything. The call's inputs and attributes are
// read as the kernel reads them (so its errors are the kernel's).
func ResizeTables(c *Call) ([]*ResizeTable, error) {
	k, ok := Lookup(c.Node.Domain, c.Node.OpType, c.Opset)
	if !ok || (c.Node.OpType != "Resize" && c.Node.OpType != "Upsample") {
		return nil, fmt.Errorf("%s is not a resampling operator", c.Node.OpType)
	}
	cc := &Call{Node: c.Node, In: c.In, Out: make([]*tensor.Tensor, len(c.Out)), Opset: c.Opset}
	var tabs []*ResizeTable
	cc.resizeTables = &tabs
	if err := k(cc); err != nil {
		return nil, err
	}
	return tabs, nil
}

func (t *resizeAxis) identity(in int) bool {
	if len(t.extrap) != in {
		return false
	}
	for j := 0; j < in; j++ {
		if t.extrap[j] {
			return false
		}
		var self float64
		for q := 0; q < t.n; q++ {
			i, w := t.idx[j*t.n+q], t.w[j*t.n+q]
			if i != j && w != 0 {
				return false
			}
			if i == j {
				self += w
			}
		}
		if self != 1 {
			return false
		}
	}
	return true
}

// resizeOrigin maps output index j to the input coordinate (ok=false when a
// tf_crop_and_resize coordinate falls outside the input).
func resizeOrigin(mode string, j, in, out int, outF, scale float64, roi []float64) (float64, bool, error) {
	x := float64(j)
	fin := float64(in)
	switch mode {
	case "half_pixel":
		return (x+0.5)/scale - 0.5, true, nil
	case "half_pixel_symmetric":
		adj := float64(out) / outF
		off := fin / 2 * (1 - adj)
		return off + (x+0.5)/scale - 0.5, true, nil
	case "pytorch_half_pixel":
		if out <= 1 {
			return 0, true, nil
		}
		return (x+0.5)/scale - 0.5, true, nil
	case "asymmetric":
		return x / scale, true, nil
	case "align_corners":
		if outF == 1 {
			return 0, true, nil
		}
		return x * (fin - 1) / (outF - 1), true, nil
	case "tf_crop_and_resize":
		start, end := 0.0, 1.0
		if roi != nil {
			start, end = roi[0], roi[1]
		}
		var v float64
		if outF == 1 {
			v = (end - start) * (fin - 1) / 2
		} else {
			v = x * (end - start) * (fin - 1) / (outF - 1)
		}
		v += start * (fin - 1)
		return v, v >= 0 && v <= fin-1, nil
	}
	return 0, false, fmt.Errorf("unknown coordinate_transformation_mode %q", mode)
}

func resizeTaps(o resizeOpts, in, out int, outF, scale float64, roi []float64) (*resizeAxis, error) {
	t := &resizeAxis{extrap: make([]bool, out)}
	support, kern := 0.0, func(float64) float64 { return 0 }
	switch o.mode {
	case "nearest":
		t.n = 1
	case "linear":
		support = 1
		kern = func(d float64) float64 { return max(0, 1-math.Abs(d)) }
	case "cubic":
		support = 2
		a := o.cubicA
		kern = func(d float64) float64 { return cubicWeight(d, a) }
	}
	s := 1.0
	if o.antialias && o.mode != "nearest" && scale < 1 {
		s = scale
	}
	iStart := 0
	if t.n == 0 {
		iStart = int(math.Floor(-support/s)) + 1
		t.n = 2 - 2*iStart
	}
	t.idx = make([]int, out*t.n)
	t.w = make([]float64, out*t.n)
	for j := 0; j < out; j++ {
		x, ok, err := resizeOrigin(o.coord, j, in, out, outF, scale, roi)
		if err != nil {
			return nil, err
		}
		if !ok {
			t.extrap[j] = true
			continue
		}
		idx, w := t.idx[j*t.n:(j+1)*t.n], t.w[j*t.n:(j+1)*t.n]
		// base and ratio in (0, 1]: an integral x counts as ratio 1 from x−1
		fl := math.Floor(x)
		base, ratio := int(fl), x-fl
		if ratio == 0 {
			base, ratio = base-1, 1
		}
		if o.mode == "nearest" {
			up := false
			switch o.nearest {
			case "round_prefer_floor":
				up = ratio > 0.5
			case "round_prefer_ceil":
				up = ratio >= 0.5
			case "floor":
				up = ratio == 1
			case "ceil":
				up = true
			default:
				return nil, fmt.Errorf("unknown nearest_mode %q", o.nearest)
			}
			i := base
			if up {
				i++
			}
			idx[0], w[0] = min(max(i, 0), in-1), 1
			continue
		}
		var sum float64
		for q := 0; q < t.n; q++ {
			i := iStart + q
			idx[q] = base + i
			w[q] = kern(s * (float64(i) - ratio))
			if o.exclude && (idx[q] < 0 || idx[q] >= in) {
				w[q] = 0
			}
			sum += w[q]
		}
		if (o.antialias || o.exclude) && sum != 0 {
			for q := range w {
				w[q] /= sum
			}
		}
		for q := range idx {
			idx[q] = min(max(idx[q], 0), in-1)
		}
	}
	return t, nil
}

// resizeApply resamples axis ax of x to n entries with the taps.
func resizeApply(ar *tensor.Arena, x *tensor.Tensor, ax, n int, t *resizeAxis, extrap float64) (*tensor.Tensor, error) {
	shape := append([]int{}, x.Shape...)
	shape[ax] = n
	out := ar.New(x.DType, shape)
	outer, inner := 1, 1
	for _, d := range x.Shape[:ax] {
		outer *= d
	}
	for _, d := range x.Shape[ax+1:] {
		inner *= d
	}
	in := x.Shape[ax]
	switch xd := x.Data.(type) {
	case []float32:
		resizeAxisRun(out.F32(), xd, outer, in, inner, n, t, float32(extrap))
	case []float64:
		resizeAxisRun(out.F64(), xd, outer, in, inner, n, t, extrap)
	case []int64:
		return out, resizeAxisInt(out.I64(), xd, outer, in, inner, n, t, extrap)
	case []int32:
		return out, resizeAxisInt(out.Data.([]int32), xd, outer, in, inner, n, t, extrap)
	case []int8:
		return out, resizeAxisInt(out.Data.([]int8), xd, outer, in, inner, n, t, extrap)
	case []uint8:
		return out, resizeAxisInt(out.Data.([]uint8), xd, outer, in, inner, n, t, extrap)
	default:
		return nil, fmt.Errorf("Resize does not support %v", x.DType)
	}
	return out, nil
}

func resizeAxisRun[T Float](y, x []T, outer, in, inner, n int, t *resizeAxis, extrap T) {
	if inner == 1 {
		resizeLastAxis(y, x, outer, in, n, t, extrap)
		return
	}
	resizeRows(y, x, outer, in, inner, n, t, extrap)
}

// resizeRows is resizeAxisRun's general loop, any inner size: each output
// row y[o, j, :] = Σ_q w[j,q]·x[o, idx[j,q], :] over the non-zero taps in
// order, starting from 0 (the reference resizeLastAxis is tested against).
func resizeRows[T Float](y, x []T, outer, in, inner, n int, t *resizeAxis, extrap T) {
	for o := 0; o < outer; o++ {
		src := x[o*in*inner : (o+1)*in*inner]
		for j := 0; j < n; j++ {
			dst := y[(o*n+j)*inner : (o*n+j+1)*inner]
			if t.extrap[j] {
				for k := range dst {
					dst[k] = extrap
				}
				continue
			}
			for q := 0; q < t.n; q++ {
				w := T(t.w[j*t.n+q])
				if w == 0 {
					continue
				}
				row := src[t.idx[j*t.n+q]*inner:]
				for k := range dst {
					dst[k] += w * row[k]
				}
			}
		}
	}
}

// resizeLastAxis is resizeAxisRun for the innermost axis (inner = 1), where
// every output value is a short dot product of its taps: the table is
// converted to T once and the rows are split across cores. The sum starts
// at 0 and adds the non-zero taps in order, as resizeAxisRun does, so the
// values are the same bit for bit.
func resizeLastAxis[T Float](y, x []T, outer, in, n int, t *resizeAxis, extrap T) {
	w := make([]T, len(t.w))
	for i, v := range t.w {
		w[i] = T(v)
	}
	idx, taps := t.idx, t.n
	parFor(outer, max(1, elemChunk/max(1, n*taps)), func(o0, o1 int) {
		for o := o0; o < o1; o++ {
			src := x[o*in : (o+1)*in]
			dst := y[o*n : (o+1)*n]
			for j := range dst {
				if t.extrap[j] {
					dst[j] = extrap
					continue
				}
				var s T
				for q := j * taps; q < (j+1)*taps; q++ {
					if w[q] != 0 {
						s += w[q] * src[idx[q]]
					}
				}
				dst[j] = s
			}
		}
	})
}

// resizeAxisInt computes integer data in float64 and rounds (saturating).
func resizeAxisInt[T Integer](y, x []T, outer, in, inner, n int, t *resizeAxis, extrap float64) error {
	lo, hi := resizeIntRange[T]()
	acc := make([]float64, inner)
	for o := 0; o < outer; o++ {
		src := x[o*in*inner : (o+1)*in*inner]
		for j := 0; j < n; j++ {
			dst := y[(o*n+j)*inner : (o*n+j+1)*inner]
			if t.extrap[j] {
				for k := range acc {
					acc[k] = extrap
				}
			} else {
				clear(acc)
				for q := 0; q < t.n; q++ {
					w := t.w[j*t.n+q]
					if w == 0 {
						continue
					}
					row := src[t.idx[j*t.n+q]*inner:]
					for k := range acc {
						acc[k] += w * float64(row[k])
					}
				}
			}
			for k, v := range acc {
				dst[k] = T(min(max(math.RoundToEven(v), lo), hi))
			}
		}
	}
	return nil
}

func resizeIntRange[T Integer]() (float64, float64) {
	var z T
	switch any(z).(type) {
	case int8:
		return math.MinInt8, math.MaxInt8
	case uint8:
		return 0, math.MaxUint8
	case int32:
		return math.MinInt32, math.MaxInt32
	}
	return math.MinInt64, math.MaxInt64
}

// cubicWeight is the cubic convolution kernel with coefficient a (Keys 1981;
// ONNX uses a = −0.75) at distance d: (a+2)|d|³ − (a+3)|d|² + 1 for |d| ≤ 1,
// a|d|³ − 5a|d|² + 8a|d| − 4a for 1 < |d| < 2, else 0.
func cubicWeight(d, a float64) float64 {
	d = math.Abs(d)
	switch {
	case d <= 1:
		return ((a+2)*d-(a+3))*d*d + 1
	case d < 2:
		return ((a*d-5*a)*d+8*a)*d - 4*a
	}
	return 0
}
