package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Pooling over the spatial axes of N×C×D1×…×Dn tensors: MaxPool (with the
// optional Indices output), AveragePool, LpPool and their Global forms.

func init() {
	reg("MaxPool", maxPoolKernel, 1, 8, 10, 11, 12)
	reg("AveragePool", avgPoolKernel, 1, 7, 10, 11, 19)
	reg("LpPool", lpPoolKernel, 1, 2, 11, 18)
	reg("GlobalAveragePool", globalPoolKernel(poolAvg), 1)
	reg("GlobalMaxPool", globalPoolKernel(poolMax), 1)
	reg("GlobalLpPool", globalPoolKernel(poolLp), 1, 2)
}

type poolKind int

const (
	poolMax poolKind = iota
	poolAvg
	poolLp
)

// poolWindows lists, for every output position, the in-image offsets of its
// window taps (offs[start[p]:start[p+1]]) and how many taps fall inside the
// padded input (for count_include_pad). It depends only on the geometry and
// is shared by every N×C plane.
type poolWindows struct {
	start   []int
	offs    []int
	padded  []int
	inSize  int
	outSize int
}

func poolPrepare(c *Call, x *tensor.Tensor, ceilAllowed bool) (convGeom, *poolWindows, error) {
	g, err := poolGeometry(c, x, ceilAllowed)
	if err != nil {
		return g, nil, err
	}
	return g, poolWindowsOf(&g), nil
}

// poolGeometry is poolPrepare without the window table (for the paths that
// do not read it).
func poolGeometry(c *Call, x *tensor.Tensor, ceilAllowed bool) (convGeom, error) {
	if x.Rank() < 3 {
		return convGeom{}, fmt.Errorf("pooling needs an input of rank ≥ 3, got %v", x.Shape)
	}
	nd := x.Rank() - 2
	g, err := convAttrs(c, nd, nil)
	if err != nil {
		return g, err
	}
	g.in = x.Shape[2:]
	g.clonePads()
	ceil := ceilAllowed && c.Int("ceil_mode", 0) != 0
	if err := convForwardOut(&g, c.Str("auto_pad", "NOTSET"), ceil); err != nil {
		return g, err
	}
	if _, err := tensor.NumElements(append(append([]int{}, x.Shape[:2]...), g.out...)); err != nil {
		return g, err
	}
	return g, nil
}

func poolWindowsOf(g *convGeom) *poolWindows {
	nd := len(g.in)
	w := &poolWindows{inSize: 1, outSize: 1}
	K := 1
	for d := 0; d < nd; d++ {
		w.inSize *= g.in[d]
		w.outSize *= g.out[d]
		K *= g.k[d]
	}
	inStr := tensor.Strides(g.in)
	w.start = make([]int, 0, w.outSize+1)
	w.offs = make([]int, 0, w.outSize*K)
	w.padded = make([]int, w.outSize)
	op := make([]int, nd)
	kk := make([]int, nd)
	for p := 0; p < w.outSize; p++ {
		w.start = append(w.start, len(w.offs))
		// taps inside the padded extent count for count_include_pad
		cnt := 1
		for d := 0; d < nd; d++ {
			n := 0
			for t := 0; t < g.k[d]; t++ {
				x := op[d]*g.strides[d] - g.padBeg[d] + t*g.dil[d]
				if x < g.in[d]+g.padEnd[d] {
					n++
				}
			}
			cnt *= n
		}
		w.padded[p] = cnt
		for i := range kk {
			kk[i] = 0
		}
		for t := 0; t < K; t++ {
			off, ok := 0, true
			for d := 0; d < nd; d++ {
				x := op[d]*g.strides[d] - g.padBeg[d] + kk[d]*g.dil[d]
				if x < 0 || x >= g.in[d] {
					ok = false
					break
				}
				off += x * inStr[d]
			}
			if ok {
				w.offs = append(w.offs, off)
			}
			for d := nd - 1; d >= 0; d-- {
				kk[d]++
				if kk[d] < g.k[d] {
					break
				}
				kk[d] = 0
			}
		}
		for d := nd - 1; d >= 0; d-- {
			op[d]++
			if op[d] < g.out[d] {
				break
			}
			op[d] = 0
		}
	}
	w.start = append(w.start, len(w.offs))
	return w
}

// maxPoolKernel: Y[n,c,o] = max over the window taps inside X; Indices holds
// the flat index of the maximum in X (spatial part column-major when
// storage_order = 1).
func maxPoolKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	g, err := poolGeometry(c, x, true)
	if err != nil {
		return err
	}
	outShape := append([]int{x.Shape[0], x.Shape[1]}, g.out...)
	out := c.Arena().New(x.DType, outShape)
	var idx []int64
	if c.WantOut(1) {
		idx = make([]int64, out.Size())
	}
	planes := x.Shape[0] * x.Shape[1]
	xf, isF32 := x.Data.([]float32)
	if isF32 && idx == nil && len(g.out) == 2 {
		poolMax2DF32(out.F32(), xf, planes, &g) // no window table needed
		c.Set(0, out)
		return nil
	}
	w := poolWindowsOf(&g)
	switch xd := x.Data.(type) {
	case []float32:
		if idx == nil {
			poolMaxF32(out.F32(), xd, planes, w)
		} else {
			poolMaxRun(out.F32(), idx, xd, planes, w)
		}
	case []float64:
		poolMaxRun(out.F64(), idx, xd, planes, w)
	case []int8:
		poolMaxRun(out.Data.([]int8), idx, xd, planes, w)
	case []uint8:
		poolMaxRun(out.Data.([]uint8), idx, xd, planes, w)
	case []int32:
		poolMaxRun(out.Data.([]int32), idx, xd, planes, w)
	case []int64:
		poolMaxRun(out.I64(), idx, xd, planes, w)
	default:
		return fmt.Errorf("MaxPool does not support %v", x.DType)
	}
	c.Set(0, out)
	if idx != nil {
		if c.Int("storage_order", 0) == 1 {
			poolColumnMajor(idx, g.in)
		}
		c.Set(1, tensor.From(idx, outShape...))
	}
	return nil
}

func poolMaxRun[T Number](y []T, idx []int64, x []T, planes int, w *poolWindows) {
	for pl := 0; pl < planes; pl++ {
		xp := x[pl*w.inSize : (pl+1)*w.inSize]
		yp := y[pl*w.outSize : (pl+1)*w.outSize]
		for p := range yp {
			offs := w.offs[w.start[p]:w.start[p+1]]
			if len(offs) == 0 {
				continue // window entirely in the padding: 0
			}
			best, at := xp[offs[0]], offs[0]
			for _, o := range offs[1:] {
				if v := xp[o]; v > best || v != v && best == best {
					best, at = v, o
				}
			}
			yp[p] = best
			if idx != nil {
				idx[pl*w.outSize+p] = int64(pl*w.inSize + at)
			}
		}
	}
}

// poolColumnMajor rewrites flat row-major indices so their spatial part is
// column-major (the plane offset stays as is).
func poolColumnMajor(idx []int64, in []int) {
	size := 1
	for _, d := range in {
		size *= d
	}
	nd := len(in)
	co := make([]int, nd)
	for i, v := range idx {
		plane, r := int(v)/size, int(v)%size
		for d := nd - 1; d >= 0; d-- {
			co[d] = r % in[d]
			r /= in[d]
		}
		cm, mul := 0, 1
		for d := 0; d < nd; d++ {
			cm += co[d] * mul
			mul *= in[d]
		}
		idx[i] = int64(plane*size + cm)
	}
}

// avgPoolKernel: Y = Σ window / count, count = taps inside X, or taps inside
// the padded input with count_include_pad = 1.
func avgPoolKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	incl := c.Int("count_include_pad", 0) != 0
	if xf, ok := x.Data.([]float32); ok && x.Rank() == 4 {
		g, err := poolGeometry(c, x, c.Opset >= 10)
		if err != nil {
			return err
		}
		out := c.Arena().New(x.DType, append([]int{x.Shape[0], x.Shape[1]}, g.out...))
		poolAvg2DF32(out.F32(), xf, x.Shape[0]*x.Shape[1], &g, incl) // no window table needed
		c.Set(0, out)
		return nil
	}
	g, w, err := poolPrepare(c, x, c.Opset >= 10)
	if err != nil {
		return err
	}
	out := c.Arena().New(x.DType, append([]int{x.Shape[0], x.Shape[1]}, g.out...))
	planes := x.Shape[0] * x.Shape[1]
	switch xd := x.Data.(type) {
	case []float32:
		poolAvgRun(out.F32(), xd, planes, w, incl)
	case []float64:
		poolAvgRun(out.F64(), xd, planes, w, incl)
	default:
		return fmt.Errorf("AveragePool does not support %v", x.DType)
	}
	c.Set(0, out)
	return nil
}

func poolAvgRun[T Float](y, x []T, planes int, w *poolWindows, includePad bool) {
	for pl := 0; pl < planes; pl++ {
		xp := x[pl*w.inSize : (pl+1)*w.inSize]
		yp := y[pl*w.outSize : (pl+1)*w.outSize]
		for p := range yp {
			offs := w.offs[w.start[p]:w.start[p+1]]
			var s T
			for _, o := range offs {
				s += xp[o]
			}
			n := len(offs)
			if includePad {
				n = w.padded[p]
			}
			if n == 0 {
				yp[p] = T(math.NaN())
				continue
			}
			yp[p] = s / T(n)
		}
	}
}

// lpPoolKernel: Y = (Σ_window |x|^p)^(1/p), p from the attribute (default 2).
func lpPoolKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	g, w, err := poolPrepare(c, x, c.Opset >= 18)
	if err != nil {
		return err
	}
	p := float64(c.Int("p", 2))
	if c.Opset < 2 {
		p = float64(c.Float("p", 2))
	}
	out := c.Arena().New(x.DType, append([]int{x.Shape[0], x.Shape[1]}, g.out...))
	planes := x.Shape[0] * x.Shape[1]
	switch xd := x.Data.(type) {
	case []float32:
		poolLpRun(out.F32(), xd, planes, w, p)
	case []float64:
		poolLpRun(out.F64(), xd, planes, w, p)
	default:
		return fmt.Errorf("LpPool does not support %v", x.DType)
	}
	c.Set(0, out)
	return nil
}

func poolLpRun[T Float](y, x []T, planes int, w *poolWindows, p float64) {
	for pl := 0; pl < planes; pl++ {
		xp := x[pl*w.inSize : (pl+1)*w.inSize]
		yp := y[pl*w.outSize : (pl+1)*w.outSize]
		for q := range yp {
			var s float64
			for _, o := range w.offs[w.start[q]:w.start[q+1]] {
				s += poolPow(math.Abs(float64(xp[o])), p)
			}
			yp[q] = T(poolPow(s, 1/p))
		}
	}
}

// poolPow avoids math.Pow for the common p = 1 and p = 2.
func poolPow(v, p float64) float64 {
	switch p {
	case 1:
		return v
	case 2:
		return v * v
	case 0.5:
		return math.Sqrt(v)
	}
	return math.Pow(v, p)
}

// globalPoolKernel reduces every spatial axis: Y[n,c,1,…,1].
func globalPoolKernel(kind poolKind) Kernel {
	return func(c *Call) error {
		if err := c.Need(1); err != nil {
			return err
		}
		x := c.In[0]
		if x.Rank() < 2 {
			return fmt.Errorf("global pooling needs an input of rank ≥ 2, got %v", x.Shape)
		}
		outShape := []int{x.Shape[0], x.Shape[1]}
		for range x.Shape[2:] {
			outShape = append(outShape, 1)
		}
		out := c.Arena().New(x.DType, outShape)
		planes := x.Shape[0] * x.Shape[1]
		p := float64(c.Int("p", 2))
		if c.Opset < 2 {
			p = float64(c.Float("p", 2))
		}
		switch xd := x.Data.(type) {
		case []float32:
			if kind == poolAvg {
				poolGlobalAvgF32(out.F32(), xd, planes)
				break
			}
			poolGlobalRun(out.F32(), xd, planes, kind, p)
		case []float64:
			poolGlobalRun(out.F64(), xd, planes, kind, p)
		default:
			return fmt.Errorf("global pooling does not support %v", x.DType)
		}
		c.Set(0, out)
		return nil
	}
}

// poolGlobalAvgF32 is poolGlobalRun's average for float32, planes split
// across cores, each plane summed in float64 with eight interleaved
// accumulators (independent addition chains) added pairwise at the end:
// another order than the sequential sum, as exact or better (the float64
// sum of float32 values errs by about n·1e-16 relative either way), so the
// float32 result agrees with it but within that of a rounding boundary.
func poolGlobalAvgF32(y, x []float32, planes int) {
	if planes == 0 {
		return
	}
	size := len(x) / planes
	parFor(planes, max(1, elemChunk/max(1, size)), func(p0, p1 int) {
		for pl := p0; pl < p1; pl++ {
			xp := x[pl*size : (pl+1)*size]
			var a [8]float64
			i := sum8Vec(xp, &a) // the loop below in AVX-512 lanes
			for ; i+8 <= len(xp); i += 8 {
				v := xp[i : i+8 : i+8]
				a[0] += float64(v[0])
				a[1] += float64(v[1])
				a[2] += float64(v[2])
				a[3] += float64(v[3])
				a[4] += float64(v[4])
				a[5] += float64(v[5])
				a[6] += float64(v[6])
				a[7] += float64(v[7])
			}
			for ; i < len(xp); i++ {
				a[0] += float64(xp[i])
			}
			s := ((a[0] + a[1]) + (a[2] + a[3])) + ((a[4] + a[5]) + (a[6] + a[7]))
			y[pl] = float32(s / float64(size))
		}
	})
}

func poolGlobalRun[T Float](y, x []T, planes int, kind poolKind, p float64) {
	if planes == 0 {
		return
	}
	size := len(x) / planes
	for pl := range y {
		xp := x[pl*size : (pl+1)*size]
		switch kind {
		case poolMax:
			if size == 0 {
				continue
			}
			best := xp[0]
			for _, v := range xp[1:] {
				if v > best || v != v {
					best = v
				}
			}
			y[pl] = best
		case poolAvg:
			var s float64
			for _, v := range xp {
				s += float64(v)
			}
			y[pl] = T(s / float64(size))
		case poolLp:
			var s float64
			for _, v := range xp {
				s += poolPow(math.Abs(float64(v)), p)
			}
			y[pl] = T(poolPow(s, 1/p))
		}
	}
}

func init() {
	reg("MaxUnpool", maxUnpoolKernel, 9, 11)
}

// maxUnpoolKernel scatters X into zeros: Y.flat[I[i]] = X[i]. The output
// shape is output_shape (input 2) or per axis (in−1)·s + k − padBeg − padEnd.
func maxUnpoolKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x, ind := c.In[0], c.In[1]
	if x.Rank() < 3 || !tensor.SameShape(x.Shape, ind.Shape) {
		return fmt.Errorf("MaxUnpool needs X of rank ≥ 3 and I of the same shape, got %v and %v", x.Shape, ind.Shape)
	}
	nd := x.Rank() - 2
	g, err := convAttrs(c, nd, nil)
	if err != nil {
		return err
	}
	shape := []int{x.Shape[0], x.Shape[1]}
	for i := 0; i < nd; i++ {
		shape = append(shape, (x.Shape[2+i]-1)*g.strides[i]+g.k[i]-g.padBeg[i]-g.padEnd[i])
	}
	if _, err := tensor.NumElements(shape); err != nil {
		return err
	}
	out := c.Arena().New(x.DType, shape)
	idx := ind.Ints()
	n := out.Size()
	for _, v := range idx {
		if v < 0 || v >= n {
			return fmt.Errorf("index %d outside the output of %d elements", v, n)
		}
	}
	switch xd := x.Data.(type) {
	case []float32:
		poolScatter(out.F32(), xd, idx)
	case []float64:
		poolScatter(out.F64(), xd, idx)
	case []int64:
		poolScatter(out.I64(), xd, idx)
	case []int32:
		poolScatter(out.Data.([]int32), xd, idx)
	case []uint8:
		poolScatter(out.Data.([]uint8), xd, idx)
	case []int8:
		poolScatter(out.Data.([]int8), xd, idx)
	default:
		return fmt.Errorf("MaxUnpool does not support %v", x.DType)
	}
	// With output_shape the unpooled block sits at the start of a larger zero tensor.
	if os := c.Input(2); os != nil {
		full := os.Ints()
		if len(full) != x.Rank() {
			return fmt.Errorf("output_shape %v does not match input rank %d", full, x.Rank())
		}
		for i := range full {
			if full[i] < shape[i] {
				return fmt.Errorf("output_shape %v is smaller than the unpooled shape %v", full, shape)
			}
		}
		if _, err := tensor.NumElements(full); err != nil {
			return err
		}
		big := c.Arena().New(x.DType, full)
		poolEmbed(big, out)
		out = big
	}
	c.Set(0, out)
	return nil
}

// poolEmbed copies small into the leading corner of big (same rank, same type).
func poolEmbed(big, small *tensor.Tensor) {
	r := small.Rank()
	inner := small.Shape[r-1]
	if inner == 0 || small.Size() == 0 {
		return
	}
	bs := tensor.Strides(big.Shape)
	idx := make([]int, r-1)
	for o := 0; o < small.Size(); o += inner {
		off := 0
		for d, v := range idx {
			off += v * bs[d]
		}
		tensor.CopyData(poolSub(big.Data, off, inner), poolSub(small.Data, o, inner))
		for d := r - 2; d >= 0; d-- {
			idx[d]++
			if idx[d] < small.Shape[d] {
				break
			}
			idx[d] = 0
		}
	}
}

// poolSub slices data[off:off+n] for any tensor element type.
func poolSub(data any, off, n int) any {
	switch d := data.(type) {
	case []float32:
		return d[off : off+n]
	case []float64:
		return d[off : off+n]
	case []int64:
		return d[off : off+n]
	case []int32:
		return d[off : off+n]
	case []uint8:
		return d[off : off+n]
	case []int8:
		return d[off : off+n]
	}
	panic(fmt.Sprintf("poolSub: %T", data))
}

func poolScatter[T Number](y, x []T, idx []int) {
	for i, v := range idx {
		y[v] = x[i]
	}
}
