package grad

import "github.com/vitals-health/vitals/tensor"

// Float32 gradients. For a float32 model the tape lets the rules of
// rules32 keep a float32 value's gradient in float32 (Op.GIn32), so that
// the passes over it between the products move half the bytes and the
// products read and write it without a conversion; any other rule reads a
// float32 gradient widened to float64 (Op.G), one conversion, counted in
// Tape.Widened. Each element of such a gradient is rounded to float32 once
// per rule (relative error 2⁻²⁴); sums over it (dL/dW, dL/db, Σ g² for
// grad_rms) are taken in float64. Float64 values keep float64 gradients.

// rules32 are the operators whose rule, with Op.f32, writes float32
// gradients for float32 inputs and reads G in either precision (through
// G and G32, never GOut directly).
var rules32 = map[string]bool{
	"Conv": true, "BatchNormalization": true, "Relu": true,
	"Add": true, "Sub": true, "Mul": true,
	"MaxPool": true, "AveragePool": true, "GlobalAveragePool": true,
	"Reshape": true, "Flatten": true, "Squeeze": true, "Unsqueeze": true, "Identity": true, "Dropout": true,
	"Gemm": true, "HardSwish": true, "HardSigmoid": true, "Sigmoid": true, "Tanh": true, "Clip": true,
}

// want32 reports whether dL/d(input i) is to be float32: the tape allows
// it and input i is a float32 value that wants a gradient.
func (o *Op) want32(i int) bool {
	return o.f32 && o.Needs(i) && o.In[i].DType == tensor.Float32
}

// has32 reports whether dL/d(output j) came in float32.
func (o *Op) has32(j int) bool { return j < len(o.GOut32) && o.GOut32[j] != nil }

// G32 is dL/d(output j) in float32: GOut32[j], or GOut[j] narrowed (once:
// it becomes GOut32[j]), or zeros when no gradient reached output j.
func (o *Op) G32(j int) []float32 {
	for len(o.GOut32) <= j {
		o.GOut32 = append(o.GOut32, nil)
	}
	if o.GOut32[j] != nil {
		return o.GOut32[j]
	}
	if j < len(o.GOut) && o.GOut[j] != nil {
		g := o.raw32(len(o.GOut[j]))
		narrow(g, o.GOut[j])
		o.GOut32[j] = g
		return g
	}
	return make([]float32, o.Out[j].Size())
}

// Grad32, GradFull32 and InPlace32 are Grad, GradFull and InPlace for a
// float32 dL/d(input i) (nil when input i takes no gradient).
func (o *Op) Grad32(i int) []float32 {
	if !o.Needs(i) {
		return nil
	}
	if o.GIn32[i] == nil {
		if o.alloc32 != nil {
			o.GIn32[i] = o.alloc32(o.In[i].Size())
		} else {
			o.GIn32[i] = make([]float32, o.In[i].Size())
		}
	}
	return o.GIn32[i]
}

func (o *Op) GradFull32(i int) []float32 {
	if !o.Needs(i) {
		return nil
	}
	if o.GIn32[i] == nil {
		o.GIn32[i] = o.raw32(o.In[i].Size())
	}
	return o.GIn32[i]
}

// InPlace32 hands out output 0's float32 gradient buffer as input i's
// (see InPlace), or else is GradFull32.
func (o *Op) InPlace32(i int) []float32 {
	if !o.Needs(i) {
		return nil
	}
	if o.GIn32[i] == nil && len(o.GOut32) > 0 && o.GOut32[0] != nil && len(o.GOut32[0]) == o.In[i].Size() && !o.gaveOut {
		o.GIn32[i] = o.GOut32[0]
		o.gaveOut = true
		return o.GIn32[i]
	}
	return o.GradFull32(i)
}

func (o *Op) raw32(n int) []float32 {
	if o.allocRaw32 != nil {
		return o.allocRaw32(n)
	}
	return make([]float32, n)
}

func (o *Op) raw64(n int) []float64 {
	if o.allocRaw != nil {
		return o.allocRaw(n)
	}
	return make([]float64, n)
}

// widen writes dst[i] = float64(src[i]) (exact), on the workers.
func widen(dst []float64, src []float32) {
	split(len(src), func(lo, hi int) {
		d := dst[lo:hi]
		for i, v := range src[lo:hi] {
			d[i] = float64(v)
		}
	})
}

// narrow writes dst[i] = float32(src[i]) (rounded to nearest).
func narrow(dst []float32, src []float64) {
	split(len(src), func(lo, hi int) {
		d := dst[lo:hi]
		for i, v := range src[lo:hi] {
			d[i] = float32(v)
		}
	})
}

// sumSq32 is Σ v² in float64 over float32 values, in four addition chains
// (elements i ≡ 0, 1, 2, 3 mod 4) as sumSq.
func sumSq32(g []float32) float64 {
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+4 <= len(g); i += 4 {
		v := g[i : i+4 : i+4]
		a, b, c, d := float64(v[0]), float64(v[1]), float64(v[2]), float64(v[3])
		s0 += a * a
		s1 += b * b
		s2 += c * c
		s3 += d * d
	}
	for ; i < len(g); i++ {
		s0 += float64(g[i]) * float64(g[i])
	}
	return (s0 + s1) + (s2 + s3)
}

// sum32 is Σ v in float64 over float32 values: the first len(g)&^15 by
// the vector loop where there is one (sumVec, 16 lanes), the rest in four
// addition chains.
func sum32(g []float32) float64 {
	i, s := sumVec(g)
	return s + sum32Go(g[i:])
}

func sum32Go(g []float32) float64 {
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+4 <= len(g); i += 4 {
		v := g[i : i+4 : i+4]
		s0 += float64(v[0])
		s1 += float64(v[1])
		s2 += float64(v[2])
		s3 += float64(v[3])
	}
	for ; i < len(g); i++ {
		s0 += float64(g[i])
	}
	return (s0 + s1) + (s2 + s3)
}

// aliases32 is aliases for float32 buffers.
func aliases32(g []float32, gs [][]float32) bool {
	for _, x := range gs {
		if len(x) > 0 && len(g) > 0 && &x[0] == &g[0] {
			return true
		}
	}
	return false
}
