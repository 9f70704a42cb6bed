package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Normalisation operators: BatchNormalization, InstanceNormalization,
// LayerNormalization, GroupNormalization, RMSNormalization, LRN,
// MeanVarianceNormalization, LpNormalization.
//
// Kernels compute in the input's float type (float32 or float64) and
// accumulate statistics in float64.

func init() {
	reg("BatchNormalization", batchNormKernel, 1, 6, 7, 9, 14, 15)
	reg("InstanceNormalization", instanceNormKernel, 1, 6, 22)
	reg("LayerNormalization", layerNormKernel, 17)
	reg("GroupNormalization", groupNormKernel, 18, 21)
	reg("RMSNormalization", rmsNormKernel, 23)
	reg("LRN", lrnKernel, 1, 13)
	reg("MeanVarianceNormalization", mvnKernel, 1, 9, 13)
	reg("LpNormalization", lpNormKernel, 1, 22)
}

// normF64 copies a small float parameter tensor (scale, bias, statistics) to float64.
func normF64(t *tensor.Tensor) ([]float64, error) {
	out := make([]float64, t.Size())
	switch d := t.Data.(type) {
	case []float32:
		for i, v := range d {
			out[i] = float64(v)
		}
	case []float64:
		copy(out, d)
	default:
		return nil, fmt.Errorf("expects a float tensor, got %v", t.DType)
	}
	return out, nil
}

// normFromF64 builds a tensor of dtype dt (float32 or float64) from float64 values.
func normFromF64(dt tensor.DType, v []float64, shape []int) *tensor.Tensor {
	if dt == tensor.Float64 {
		return tensor.From(v, shape...)
	}
	out := make([]float32, len(v))
	for i, x := range v {
		out[i] = float32(x)
	}
	return tensor.From(out, shape...)
}

// normCheckFloat rejects non-float inputs.
func normCheckFloat(t *tensor.Tensor) error {
	if t.DType != tensor.Float32 && t.DType != tensor.Float64 {
		return fmt.Errorf("expects a float tensor, got %v", t.DType)
	}
	return nil
}

// normAffine computes y = x*k[ch] + o[ch] on data laid out as [n, c, inner].
func normAffine[T Float](y, x []T, n, c, inner int, k, o []float64) {
	for i := 0; i < n; i++ {
		for ch := 0; ch < c; ch++ {
			kk, oo := T(k[ch]), T(o[ch])
			base := (i*c + ch) * inner
			ys := y[base : base+inner]
			for j, v := range x[base : base+inner] {
				ys[j] = v*kk + oo
			}
		}
	}
}

// normAffineF32 is normAffine for float32 (the same products and sums,
// each rounded to float32, so the same bits), planes of [n, c] across the
// cores, each plane by vector multiply then add when it holds a vector or
// more; with act, also ad = act(y) plane by plane.
func normAffineF32(y, x []float32, n, c, inner int, k, o []float64, act func(dst, src []float32), ad []float32) {
	planes := n * c
	parFor(planes, max(1, elemChunk/max(1, inner)), func(p0, p1 int) {
		for p := p0; p < p1; p++ {
			ch := p % c
			kk, oo := float32(k[ch]), float32(o[ch])
			ys, xs := y[p*inner:(p+1)*inner], x[p*inner:(p+1)*inner]
			if inner >= 16 {
				vsF32(mulT, ys, xs, kk, false)
				vsF32(addT, ys, ys, oo, false)
			} else {
				for j, v := range xs {
					ys[j] = v*kk + oo
				}
			}
			if act != nil {
				act(ad[p*inner:(p+1)*inner], ys)
			}
		}
	})
}

// normAffineTensor applies normAffine to a float tensor and returns the result.
func normAffineTensor(ar *tensor.Arena, x *tensor.Tensor, n, c, inner int, k, o []float64) *tensor.Tensor {
	y := ar.New(x.DType, x.Shape)
	switch d := x.Data.(type) {
	case []float32:
		normAffine(y.F32(), d, n, c, inner, k, o)
	case []float64:
		normAffine(y.F64(), d, n, c, inner, k, o)
	}
	return y
}

// normMoments returns the per-channel mean and population variance of data laid out as [n, c, inner].
func normMoments[T Float](x []T, n, c, inner int) (mean, vr []float64) {
	mean, vr = make([]float64, c), make([]float64, c)
	cnt := float64(n * inner)
	for ch := 0; ch < c; ch++ {
		var s float64
		for i := 0; i < n; i++ {
			base := (i*c + ch) * inner
			for _, v := range x[base : base+inner] {
				s += float64(v)
			}
		}
		m := s / cnt
		var q float64
		for i := 0; i < n; i++ {
			base := (i*c + ch) * inner
			for _, v := range x[base : base+inner] {
				d := float64(v) - m
				q += d * d
			}
		}
		mean[ch], vr[ch] = m, q/cnt
	}
	return mean, vr
}

func normMomentsTensor(x *tensor.Tensor, n, c, inner int) (mean, vr []float64) {
	switch d := x.Data.(type) {
	case []float32:
		return normMoments(d, n, c, inner)
	case []float64:
		return normMoments(d, n, c, inner)
	}
	return nil, nil
}

// batchNormKernel: y = scale·(x−mean)/√(var+ε) + B per channel (axis 1).
// Inference mode uses the given mean/var. Training mode (training_mode=1 from
// opset 14, or extra outputs requested before opset 14) uses the batch's
// mean/var and outputs running_mean = mean·momentum + batch_mean·(1−momentum)
// (likewise running_var); before opset 14 outputs 3 and 4 are the batch mean/var.
// Before opset 9 with spatial=0 the parameters may be per activation (C×D1×…).
func batchNormKernel(c *Call) error {
	if err := c.Need(5); err != nil {
		return err
	}
	x := c.In[0]
	if err := normCheckFloat(x); err != nil {
		return err
	}
	if x.Rank() < 2 {
		return fmt.Errorf("input must have rank ≥ 2 (N, C, …), got shape %v", x.Shape)
	}
	n, ch, inner := x.Shape[0], x.Shape[1], 1
	for _, d := range x.Shape[2:] {
		inner *= d
	}
	params := make([][]float64, 4)
	for i := range params {
		p, err := normF64(c.In[i+1])
		if err != nil {
			return fmt.Errorf("input %d: %w", i+1, err)
		}
		params[i] = p
	}
	// per-activation parameters (spatial=0 in opsets 7 and older)
	if len(params[0]) != ch && len(params[0]) == ch*inner && ch*inner > 0 {
		ch, inner = ch*inner, 1
	}
	for i, p := range params {
		if len(p) != ch {
			return fmt.Errorf("input %d has %d elements, want %d (channels of input shape %v)", i+1, len(p), ch, x.Shape)
		}
	}
	scale, bias, mean, vr := params[0], params[1], params[2], params[3]
	eps := float64(c.Float("epsilon", 1e-5))
	momentum := float64(c.Float("momentum", 0.9))
	training := false
	if c.Opset >= 14 {
		training = c.Int("training_mode", 0) != 0
	} else {
		for i := 1; i < 5; i++ {
			training = training || c.WantOut(i)
		}
	}
	useMean, useVar := mean, vr
	if training {
		useMean, useVar = normMomentsTensor(x, n, ch, inner)
	}
	k, o := make([]float64, ch), make([]float64, ch)
	for i := range k {
		k[i] = scale[i] / math.Sqrt(useVar[i]+eps)
		o[i] = bias[i] - useMean[i]*k[i]
	}
	if xf, ok := x.Data.([]float32); ok && !training {
		// float32 inference: planes across the cores, and a fused
		// activation (Call.fuse) applied to each plane while it is in cache
		y := c.Arena().NewUninit(tensor.Float32, x.Shape)
		var act func(dst, src []float32)
		var ad []float32
		if f := c.fuse; f != nil {
			f.alloc(c.Arena(), x.Shape)
			act, ad = f.f32, f.out.F32()
		}
		normAffineF32(y.F32(), xf, n, ch, inner, k, o, act, ad)
		c.Set(0, y)
		return nil
	}
	c.Set(0, normAffineTensor(c.Arena(), x, n, ch, inner, k, o))
	if !training {
		return nil
	}
	runMean, runVar := make([]float64, ch), make([]float64, ch)
	for i := range runMean {
		runMean[i] = mean[i]*momentum + useMean[i]*(1-momentum)
		runVar[i] = vr[i]*momentum + useVar[i]*(1-momentum)
	}
	mdt, vdt := c.In[3].DType, c.In[4].DType
	pshape := shapeOf(c.In[3])
	c.Set(1, normFromF64(mdt, runMean, pshape))
	c.Set(2, normFromF64(vdt, runVar, pshape))
	c.Set(3, normFromF64(mdt, useMean, pshape))
	c.Set(4, normFromF64(vdt, useVar, pshape))
	return nil
}

// instanceNormKernel: y = scale[c]·(x−μ)/√(σ²+ε) + B[c], with μ, σ² taken
// per instance and channel over the spatial axes.
func instanceNormKernel(c *Call) error {
	if err := c.Need(3); err != nil {
		return err
	}
	x := c.In[0]
	if err := normCheckFloat(x); err != nil {
		return err
	}
	if x.Rank() < 2 {
		return fmt.Errorf("input must have rank ≥ 2, got shape %v", x.Shape)
	}
	n, ch, inner := x.Shape[0], x.Shape[1], 1
	for _, d := range x.Shape[2:] {
		inner *= d
	}
	scale, err := normF64(c.In[1])
	if err != nil {
		return err
	}
	bias, err := normF64(c.In[2])
	if err != nil {
		return err
	}
	if len(scale) != ch || len(bias) != ch {
		return fmt.Errorf("scale and B must have %d elements, got %d and %d", ch, len(scale), len(bias))
	}
	eps := float64(c.Float("epsilon", 1e-5))
	// treat every (instance, channel) pair as its own channel
	mean, vr := normMomentsTensor(x, 1, n*ch, inner)
	k, o := make([]float64, n*ch), make([]float64, n*ch)
	for i := range k {
		k[i] = scale[i%ch] / math.Sqrt(vr[i]+eps)
		o[i] = bias[i%ch] - mean[i]*k[i]
	}
	c.Set(0, normAffineTensor(c.Arena(), x, 1, n*ch, inner, k, o))
	return nil
}

// normParamTo reads a scale/bias input and broadcasts it (unidirectionally) to shape.
func normParamTo(t *tensor.Tensor, shape []int, what string) ([]float64, error) {
	p, err := normF64(t)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", what, err)
	}
	want, _ := tensor.NumElements(shape)
	if len(p) == want && len(t.Shape) <= len(shape) {
		return p, nil
	}
	bs, err := Broadcast(t.Shape, shape)
	if err != nil || !tensor.SameShape(bs, shape) {
		return nil, fmt.Errorf("%s of shape %v does not broadcast to %v", what, t.Shape, shape)
	}
	out := make([]float64, want)
	expandT(out, p, t.Shape, shape)
	return out, nil
}

// normRows normalises each row of length m of x over the row:
// y = (x−μ)·r·scale + bias with r = 1/√(σ²+ε) (rms: no centring, r = 1/√(mean(x²)+ε)).
// bias may be nil. It stores μ and r per row when those slices are non-nil.
func normRows[T Float](y, x []T, m int, scale, bias []float64, eps float64, rms bool, means, inv []float64) {
	rows := 0
	if m > 0 {
		rows = len(x) / m
	}
	if y32, ok := any(y).([]float32); ok { // float32: norm_f32.go
		x32 := any(x).([]float32)
		for r := 0; r < rows; r++ {
			mu, rs := normRow32(y32[r*m:(r+1)*m], x32[r*m:(r+1)*m], scale, bias, eps, rms)
			if means != nil {
				means[r] = mu
			}
			if inv != nil {
				inv[r] = rs
			}
		}
		return
	}
	for r := 0; r < rows; r++ {
		xs, ys := x[r*m:(r+1)*m], y[r*m:(r+1)*m]
		var mu float64
		if !rms {
			mu = normSum(xs, 0, false) / float64(m)
		}
		q := normSum(xs, mu, true)
		rs := 1 / math.Sqrt(q/float64(m)+eps)
		if bias != nil {
			for j, v := range xs {
				ys[j] = T((float64(v)-mu)*rs*scale[j] + bias[j])
			}
		} else {
			for j, v := range xs {
				ys[j] = T((float64(v) - mu) * rs * scale[j])
			}
		}
		if means != nil {
			means[r] = mu
		}
		if inv != nil {
			inv[r] = rs
		}
	}
}

// normSum returns Σ x_j (sq false) or Σ (x_j − mu)² (sq true) in float64,
// in four interleaved partial sums (j mod 4, then added as (s0+s1)+(s2+s3))
// so that the additions do not wait on each other: the float64 rounding
// differs from a left-to-right sum only in the last bits, far below the
// float32 output's.
func normSum[T Float](xs []T, mu float64, sq bool) float64 {
	var s0, s1, s2, s3 float64
	j := 0
	if sq {
		for ; j+4 <= len(xs); j += 4 {
			v := xs[j : j+4 : j+4]
			d0, d1, d2, d3 := float64(v[0])-mu, float64(v[1])-mu, float64(v[2])-mu, float64(v[3])-mu
			s0 += d0 * d0
			s1 += d1 * d1
			s2 += d2 * d2
			s3 += d3 * d3
		}
		for ; j < len(xs); j++ {
			d := float64(xs[j]) - mu
			s0 += d * d
		}
		return (s0 + s1) + (s2 + s3)
	}
	for ; j+4 <= len(xs); j += 4 {
		v := xs[j : j+4 : j+4]
		s0 += float64(v[0])
		s1 += float64(v[1])
		s2 += float64(v[2])
		s3 += float64(v[3])
	}
	for ; j < len(xs); j++ {
		s0 += float64(xs[j])
	}
	return (s0 + s1) + (s2 + s3)
}

// normRowsPar is normRows with the rows split across cores (parFor): each
// row is computed by one worker exactly as a serial run would, so the
// results do not depend on the split.
func normRowsPar[T Float](y, x []T, rows, m int, scale, bias []float64, eps float64, rms bool, means, inv []float64) {
	if m == 0 || rows == 0 {
		return
	}
	parFor(rows, max(1, elemChunk/m), func(lo, hi int) {
		var mu, iv []float64
		if means != nil {
			mu = means[lo:hi]
		}
		if inv != nil {
			iv = inv[lo:hi]
		}
		normRows(y[lo*m:hi*m], x[lo*m:hi*m], m, scale, bias, eps, rms, mu, iv)
	})
}

// layerLike implements LayerNormalization and RMSNormalization: statistics over axes [axis, rank).
func layerLike(c *Call, rms bool) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x := c.In[0]
	if err := normCheckFloat(x); err != nil {
		return err
	}
	axis, err := NormAxis(int(c.Int("axis", -1)), x.Rank())
	if err != nil {
		return err
	}
	normShape := x.Shape[axis:]
	m := 1
	for _, d := range normShape {
		m *= d
	}
	scale, err := normParamTo(c.In[1], normShape, "scale")
	if err != nil {
		return err
	}
	var bias []float64
	if !rms && c.Input(2) != nil {
		if bias, err = normParamTo(c.In[2], normShape, "B"); err != nil {
			return err
		}
	}
	eps := float64(c.Float("epsilon", 1e-5))
	rows := 1
	for _, d := range x.Shape[:axis] {
		rows *= d
	}
	var means, inv []float64
	if c.WantOut(1) || c.WantOut(2) {
		means, inv = make([]float64, rows), make([]float64, rows)
	}
	y := c.Arena().NewUninit(x.DType, x.Shape) // normRows writes every element
	switch d := x.Data.(type) {
	case []float32:
		normRowsPar(y.F32(), d, rows, m, scale, bias, eps, rms, means, inv)
	case []float64:
		normRowsPar(y.F64(), d, rows, m, scale, bias, eps, rms, means, inv)
	}
	c.Set(0, y)
	if means != nil {
		st := shapeOf(x)
		for i := axis; i < len(st); i++ {
			st[i] = 1
		}
		c.Set(1, normFromF64(x.DType, means, st))
		c.Set(2, normFromF64(x.DType, inv, st))
	}
	return nil
}

// layerNormKernel: Y = (X−μ)/√(σ²+ε)·Scale + B with μ, σ² over axes [axis, rank);
// optional outputs Mean and InvStdDev (shape X.shape[:axis] followed by ones).
func layerNormKernel(c *Call) error { return layerLike(c, false) }

// rmsNormKernel: Y = X/√(mean(X²)+ε)·Scale over axes [axis, rank).
func rmsNormKernel(c *Call) error { return layerLike(c, true) }

// groupNormKernel: channels are split into num_groups groups; each (instance,
// group) is normalised over its channels and spatial axes, then
// y = scale·x̂ + bias per channel (opset 21) or per group (opset 18).
func groupNormKernel(c *Call) error {
	if err := c.Need(3); err != nil {
		return err
	}
	x := c.In[0]
	if err := normCheckFloat(x); err != nil {
		return err
	}
	if x.Rank() < 2 {
		return fmt.Errorf("input must have rank ≥ 2, got shape %v", x.Shape)
	}
	g := int(c.Int("num_groups", 0))
	n, ch, inner := x.Shape[0], x.Shape[1], 1
	for _, d := range x.Shape[2:] {
		inner *= d
	}
	if g <= 0 || ch%g != 0 {
		return fmt.Errorf("num_groups %d must be positive and divide the %d channels", g, ch)
	}
	scale, err := normF64(c.In[1])
	if err != nil {
		return err
	}
	bias, err := normF64(c.In[2])
	if err != nil {
		return err
	}
	perGroup := ch / g
	chanScale := func(p []float64, what string) ([]float64, error) {
		switch {
		case len(p) == ch:
			return p, nil
		case len(p) == g:
			out := make([]float64, ch)
			for i := range out {
				out[i] = p[i/perGroup]
			}
			return out, nil
		}
		return nil, fmt.Errorf("%s has %d elements, want %d (channels) or %d (groups)", what, len(p), ch, g)
	}
	if scale, err = chanScale(scale, "scale"); err != nil {
		return err
	}
	if bias, err = chanScale(bias, "bias"); err != nil {
		return err
	}
	eps := float64(c.Float("epsilon", 1e-5))
	// statistics per (instance, group): a group is perGroup*inner contiguous elements
	mean, vr := normMomentsTensor(x, 1, n*g, perGroup*inner)
	k, o := make([]float64, n*ch), make([]float64, n*ch)
	for i := range k {
		grp := i / perGroup
		r := 1 / math.Sqrt(vr[grp]+eps)
		k[i] = scale[i%ch] * r
		o[i] = bias[i%ch] - mean[grp]*k[i]
	}
	c.Set(0, normAffineTensor(c.Arena(), x, 1, n*ch, inner, k, o))
	return nil
}

// lrnKernel: y = x / (bias + α/size · Σ x²)^β, the sum running over the
// channels c−⌊(size−1)/2⌋ … c+⌈(size−1)/2⌉ at the same position.
func lrnKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	if err := normCheckFloat(x); err != nil {
		return err
	}
	if x.Rank() < 2 {
		return fmt.Errorf("input must have rank ≥ 2, got shape %v", x.Shape)
	}
	size := int(c.Int("size", 0))
	if size <= 0 {
		return fmt.Errorf("attribute size must be positive, got %d", size)
	}
	alpha := float64(c.Float("alpha", 1e-4))
	beta := float64(c.Float("beta", 0.75))
	bias := float64(c.Float("bias", 1))
	n, ch, inner := x.Shape[0], x.Shape[1], 1
	for _, d := range x.Shape[2:] {
		inner *= d
	}
	y := c.Arena().New(x.DType, x.Shape)
	lo, hi := (size-1)/2, size-1-(size-1)/2
	switch d := x.Data.(type) {
	case []float32:
		lrnLoop(y.F32(), d, n, ch, inner, lo, hi, alpha/float64(size), beta, bias)
	case []float64:
		lrnLoop(y.F64(), d, n, ch, inner, lo, hi, alpha/float64(size), beta, bias)
	}
	c.Set(0, y)
	return nil
}

func lrnLoop[T Float](y, x []T, n, ch, inner, lo, hi int, a, beta, bias float64) {
	sq := make([]float64, inner)
	for i := 0; i < n; i++ {
		img := x[i*ch*inner : (i+1)*ch*inner]
		for cc := 0; cc < ch; cc++ {
			clear(sq)
			for k := max(0, cc-lo); k <= min(ch-1, cc+hi); k++ {
				for j, v := range img[k*inner : (k+1)*inner] {
					sq[j] += float64(v) * float64(v)
				}
			}
			base := i*ch*inner + cc*inner
			for j := 0; j < inner; j++ {
				y[base+j] = T(float64(x[base+j]) / math.Pow(bias+a*sq[j], beta))
			}
		}
	}
}

// normGroupStrides gives, for each axis, the stride of the kept (non-reduced)
// axes in the compacted group index (0 on reduced axes), and the group count.
func normGroupStrides(shape []int, reduced []bool) ([]int, int) {
	st := make([]int, len(shape))
	acc := 1
	for i := len(shape) - 1; i >= 0; i-- {
		if !reduced[i] {
			st[i] = acc
			acc *= shape[i]
		}
	}
	return st, acc
}

// mvnKernel: y = (x−μ)/(√σ² + 1e-9) with μ, σ² over the given axes (default [0, 2, 3]).
func mvnKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	if err := normCheckFloat(x); err != nil {
		return err
	}
	axes := []int{0, 2, 3}
	if c.Has("axes") {
		axes = c.Ints("axes")
	}
	reduced := make([]bool, x.Rank())
	for _, a := range axes {
		ax, err := NormAxis(a, x.Rank())
		if err != nil {
			return err
		}
		reduced[ax] = true
	}
	y := c.Arena().New(x.DType, x.Shape)
	switch d := x.Data.(type) {
	case []float32:
		mvnLoop(y.F32(), d, x.Shape, reduced)
	case []float64:
		mvnLoop(y.F64(), d, x.Shape, reduced)
	}
	c.Set(0, y)
	return nil
}

func mvnLoop[T Float](y, x []T, shape []int, reduced []bool) {
	gst, ng := normGroupStrides(shape, reduced)
	if len(x) == 0 {
		return
	}
	sum, sq := make([]float64, ng), make([]float64, ng)
	cnt := float64(len(x) / ng) // every group has the same size
	idx := make([]int, len(shape))
	g := 0
	for _, v := range x {
		sum[g] += float64(v)
		g = normAdvance(idx, shape, gst, g)
	}
	for g := range sum {
		sum[g] /= cnt
	}
	for _, v := range x {
		d := float64(v) - sum[g]
		sq[g] += d * d
		g = normAdvance(idx, shape, gst, g)
	}
	for g := range sq {
		sq[g] = 1 / (math.Sqrt(sq[g]/cnt) + 1e-9)
	}
	for i, v := range x {
		y[i] = T((float64(v) - sum[g]) * sq[g])
		g = normAdvance(idx, shape, gst, g)
	}
}

// normAdvance steps the row-major index idx by one element and returns the
// updated group offset g (gst from normGroupStrides); it wraps to zero at the end.
func normAdvance(idx, shape, gst []int, g int) int {
	for ax := len(shape) - 1; ax >= 0; ax-- {
		idx[ax]++
		g += gst[ax]
		if idx[ax] < shape[ax] {
			return g
		}
		g -= gst[ax] * shape[ax]
		idx[ax] = 0
	}
	return g
}

// lpNormKernel: y = x/‖x‖_p along axis (p ∈ {1, 2}; a zero norm gives 0).
func lpNormKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	if err := normCheckFloat(x); err != nil {
		return err
	}
	axis, err := NormAxis(int(c.Int("axis", -1)), x.Rank())
	if err != nil {
		return err
	}
	p := int(c.Int("p", 2))
	if p != 1 && p != 2 {
		return fmt.Errorf("p must be 1 or 2, got %d", p)
	}
	outer, inner := 1, 1
	for _, d := range x.Shape[:axis] {
		outer *= d
	}
	for _, d := range x.Shape[axis+1:] {
		inner *= d
	}
	y := c.Arena().New(x.DType, x.Shape)
	switch d := x.Data.(type) {
	case []float32:
		lpLoop(y.F32(), d, outer, x.Shape[axis], inner, p)
	case []float64:
		lpLoop(y.F64(), d, outer, x.Shape[axis], inner, p)
	}
	c.Set(0, y)
	return nil
}

func lpLoop[T Float](y, x []T, outer, m, inner, p int) {
	for o := 0; o < outer; o++ {
		for j := 0; j < inner; j++ {
			base := o*m*inner + j
			var s float64
			for k := 0; k < m; k++ {
				v := float64(x[base+k*inner])
				if p == 1 {
					s += math.Abs(v)
				} else {
					s += v * v
				}
			}
			if p == 2 {
				s = math.Sqrt(s)
			}
			r := 0.0
			if s != 0 {
				r = 1 / s
			}
			for k := 0; k < m; k++ {
				y[base+k*inner] = T(float64(x[base+k*inner]) * r)
			}
		}
	}
}
