package grad

import "math"

// Element-wise operators: dL/dx = dL/dy · f'(x), with f' written from the
// input x or, where shorter, the output y. At kinks the derivative is the
// one PyTorch's autograd uses (ReLU: 0 at x = 0; Clip: 1 on the bounds).

func init() {
	register("Relu", reluVJP)
	unary("LeakyRelu", func(x, _ float64, o *Op) float64 {
		if x > 0 {
			return 1
		}
		return float64(o.Float("alpha", 0.01))
	})
	unary("Elu", func(x, y float64, o *Op) float64 { // y = α(eˣ − 1) below 0: f' = y + α
		if x > 0 {
			return 1
		}
		return y + float64(o.Float("alpha", 1))
	})
	unary("Selu", func(x, _ float64, o *Op) float64 {
		g := float64(o.Float("gamma", 1.05070102214813232421875))
		if x > 0 {
			return g
		}
		return g * float64(o.Float("alpha", 1.67326319217681884765625)) * math.Exp(x)
	})
	unary("Celu", func(x, _ float64, o *Op) float64 {
		if x > 0 {
			return 1
		}
		return math.Exp(x / float64(o.Float("alpha", 1)))
	})
	unary("Sigmoid", func(_, y float64, _ *Op) float64 { return y * (1 - y) })
	unary("Tanh", func(_, y float64, _ *Op) float64 { return 1 - y*y })
	unary("HardSigmoid", func(x, _ float64, o *Op) float64 { // y = max(0, min(1, αx + β))
		a, b := float64(o.Float("alpha", 0.2)), float64(o.Float("beta", 0.5))
		v := a*x + b
		if v > 0 && v < 1 {
			return a
		}
		return 0
	})
	unary("HardSwish", func(x, _ float64, _ *Op) float64 { // y = x·max(0, min(1, x/6 + 1/2))
		switch {
		case x < -3:
			return 0
		case x <= 3:
			return x/3 + 0.5
		}
		return 1
	})
	unary("Softplus", func(x, _ float64, _ *Op) float64 { return 1 / (1 + math.Exp(-x)) })
	unary("Softsign", func(x, _ float64, _ *Op) float64 { d := 1 + math.Abs(x); return 1 / (d * d) })
	unary("Mish", func(x, _ float64, _ *Op) float64 { // y = x·tanh(softplus(x))
		sp := math.Log1p(math.Exp(x))
		t := math.Tanh(sp)
		return t + x*(1-t*t)/(1+math.Exp(-x))
	})
	unary("Gelu", func(x, _ float64, o *Op) float64 {
		if o.Str("approximate", "none") == "tanh" { // y = x/2·(1 + tanh(√(2/π)(x + 0.044715x³)))
			c := math.Sqrt(2 / math.Pi)
			u := c * (x + 0.044715*x*x*x)
			t := math.Tanh(u)
			return 0.5*(1+t) + 0.5*x*(1-t*t)*c*(1+3*0.044715*x*x)
		}
		// y = x·Φ(x): Φ(x) + x·φ(x)
		return 0.5*(1+math.Erf(x/math.Sqrt2)) + x*math.Exp(-x*x/2)/math.Sqrt(2*math.Pi)
	})
	unary("Erf", func(x, _ float64, _ *Op) float64 { return 2 / math.Sqrt(math.Pi) * math.Exp(-x*x) })
	unary("Exp", func(_, y float64, _ *Op) float64 { return y })
	unary("Log", func(x, _ float64, _ *Op) float64 { return 1 / x })
	unary("Sqrt", func(_, y float64, _ *Op) float64 { return 0.5 / y })
	unary("Reciprocal", func(_, y float64, _ *Op) float64 { return -y * y })
	unary("Neg", func(_, _ float64, _ *Op) float64 { return -1 })
	unary("Abs", func(x, _ float64, _ *Op) float64 { return sign(x) })
	unary("Sin", func(x, _ float64, _ *Op) float64 { return math.Cos(x) })
	unary("Cos", func(x, _ float64, _ *Op) float64 { return -math.Sin(x) })
	unary("Identity", func(_, _ float64, _ *Op) float64 { return 1 })
	unary("Dropout", func(_, _ float64, _ *Op) float64 { return 1 }) // inference: the identity
	register("Clip", clipVJP)
}

func step(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

func sign(x float64) float64 {
	switch {
	case x > 0:
		return 1
	case x < 0:
		return -1
	}
	return 0
}

// unary registers an element-wise operator whose derivative is d(x, y).
func unary(name string, d func(x, y float64, o *Op) float64) {
	sqRules[name] = true
	register(name, func(o *Op) error {
		if !o.Needs(0) {
			return nil
		}
		x32, ok1 := o.In[0].Data.([]float32)
		y32, ok2 := o.Out[0].Data.([]float32)
		if f := fastUnary32[name]; f != nil && ok1 && ok2 && o.has32(0) && o.want32(0) && !slowUnary && len(x32) == len(y32) {
			g32, k := o.G32(0), f(o)
			gx32 := o.InPlace32(0)
			sq := splitSum(len(gx32), func(lo, hi int) float64 { return k(gx32[lo:hi], g32[lo:hi], x32[lo:hi], y32[lo:hi]) })
			if o.wantSq {
				o.reportSq(sq)
			}
			return nil
		}
		g := o.G(0)
		gx := o.InPlace(0)
		if gx == nil {
			return nil
		}
		if ok1 && ok2 && len(x32) == len(gx) && len(y32) == len(gx) {
			// float32 values read in place, widened one at a time
			if f := fastUnary[name]; f != nil && !slowUnary {
				k := f(o) // Σ G² comes with the pass
				sq := splitSum(len(gx), func(lo, hi int) float64 { return k(gx[lo:hi], g[lo:hi], x32[lo:hi], y32[lo:hi]) })
				if o.wantSq {
					o.reportSq(sq)
				}
				return nil
			}
			if o.wantSq {
				o.reportSq(sumSq(g)) // before gx overwrites G
			}
			split(len(gx), func(lo, hi int) {
				for i := lo; i < hi; i++ {
					gx[i] = g[i] * d(float64(x32[i]), float64(y32[i]), o)
				}
			})
			return nil
		}
		x, y := o.X(0), o.Y(0)
		if o.wantSq {
			o.reportSq(sumSq(g))
		}
		split(len(gx), func(lo, hi int) {
			for i := lo; i < hi; i++ {
				gx[i] = g[i] * d(x[i], y[i], o)
			}
		})
		return nil
	})
}

// clipVJP: y = min(max(x, lo), hi); the gradient passes where lo ≤ x ≤ hi
// (bounds from inputs 1 and 2 from opset 11, attributes before); a bound
// input gets the gradient of the elements clipped to it.
func clipVJP(o *Op) error {
	lo, hi := math.Inf(-1), math.Inf(1)
	if o.Opset < 11 {
		lo, hi = float64(o.Float("min", float32(math.Inf(-1)))), float64(o.Float("max", float32(math.Inf(1))))
	} else {
		if t := o.Input(1); t != nil {
			lo = F64(t)[0]
		}
		if t := o.Input(2); t != nil {
			hi = F64(t)[0]
		}
	}
	if x32, ok := o.In[0].Data.([]float32); ok && o.has32(0) && o.want32(0) {
		clip32(o, x32, lo, hi)
		return nil
	}
	gx, glo, ghi := o.Grad(0), o.Grad(1), o.Grad(2)
	x, g := o.X(0), o.G(0)
	for i := range x {
		switch {
		case x[i] < lo: // y = lo
			if glo != nil {
				glo[0] += g[i]
			}
		case x[i] > hi:
			if ghi != nil {
				ghi[0] += g[i]
			}
		case gx != nil:
			gx[i] = g[i]
		}
	}
	return nil
}

// clip32 is clipVJP for a float32 input and G (grad32.go): the bounds'
// gradients summed in float64.
func clip32(o *Op, x []float32, lo, hi float64) {
	gx, glo, ghi := o.Grad32(0), o.Grad(1), o.Grad(2)
	g := o.G32(0)
	for i, v := range x {
		switch xv := float64(v); {
		case xv < lo:
			if glo != nil {
				glo[0] += float64(g[i])
			}
		case xv > hi:
			if ghi != nil {
				ghi[0] += float64(g[i])
			}
		default:
			gx[i] = g[i]
		}
	}
}

// reluVJP: dL/dx = G where x > 0 (read in the model's own precision).
func reluVJP(o *Op) error {
	if x, ok := o.In[0].Data.([]float32); ok && o.want32(0) && o.has32(0) {
		g := o.G32(0)
		gx := o.InPlace32(0)
		if o.wantSq {
			o.reportSq(splitSum(len(x), func(lo, hi int) float64 { return reluMaskSq32(gx[lo:hi], g[lo:hi], x[lo:hi]) }))
			return nil
		}
		split(len(x), func(lo, hi int) { reluMaskSq32(gx[lo:hi], g[lo:hi], x[lo:hi]) })
		return nil
	}
	g := o.G(0)
	gx := o.InPlace(0)
	if gx == nil {
		return nil
	}
	if x, ok := o.In[0].Data.([]float32); ok {
		if o.wantSq { // Σ G² taken in the same pass
			o.reportSq(splitSum(len(x), func(lo, hi int) float64 { return reluMaskSq(gx[lo:hi], g[lo:hi], x[lo:hi]) }))
			return nil
		}
		split(len(x), func(lo, hi int) { reluMask(gx[lo:hi], g[lo:hi], x[lo:hi]) })
		return nil
	}
	if o.wantSq {
		o.reportSq(sumSq(g))
	}
	for i, v := range o.X(0) {
		if v > 0 {
			gx[i] = g[i]
		} else {
			gx[i] = 0
		}
	}
	return nil
}

// reluMask writes dst[i] = g[i] where x[i] > 0, else 0, without a branch
// per element (the sign of x is as good as random: a branch would be
// mispredicted half the time). dst may be g itself. A float32 x is > 0
// exactly when its bits b, read as an integer, satisfy 0 < b ≤ 0x7f800000
// (+Inf; above are the NaNs, −0 and negatives have the sign bit set).
func reluMask(dst, g []float64, x []float32) {
	g = g[:len(x)]
	dst = dst[:len(x)]
	for i, v := range x {
		b := int64(int32(math.Float32bits(v)))
		m := uint64((-b >> 63) & ((b - 0x7f800001) >> 63)) // all ones or zero
		dst[i] = math.Float64frombits(math.Float64bits(g[i]) & m)
	}
}

// reluMaskSq is reluMask that also returns Σ g² over its part, in two
// addition chains (even and odd elements).
func reluMaskSq(dst, g []float64, x []float32) float64 {
	g = g[:len(x)]
	dst = dst[:len(x)]
	var s0, s1 float64
	i := 0
	for ; i+2 <= len(x); i += 2 {
		g0, g1 := g[i], g[i+1]
		b0, b1 := int64(int32(math.Float32bits(x[i]))), int64(int32(math.Float32bits(x[i+1])))
		s0, s1 = s0+g0*g0, s1+g1*g1
		m0 := uint64((-b0 >> 63) & ((b0 - 0x7f800001) >> 63))
		m1 := uint64((-b1 >> 63) & ((b1 - 0x7f800001) >> 63))
		dst[i] = math.Float64frombits(math.Float64bits(g0) & m0)
		dst[i+1] = math.Float64frombits(math.Float64bits(g1) & m1)
	}
	if i < len(x) {
		s0 += g[i] * g[i]
		b := int64(int32(math.Float32bits(x[i])))
		m := uint64((-b >> 63) & ((b - 0x7f800001) >> 63))
		dst[i] = math.Float64frombits(math.Float64bits(g[i]) & m)
	}
	return s0 + s1
}

// reluMaskSq32 is reluMaskSq for float32 gradients (Σ g² in float64).
func reluMaskSq32(dst, g []float32, x []float32) float64 {
	g = g[:len(x)]
	dst = dst[:len(x)]
	var s0, s1 float64
	i := 0
	for ; i+2 <= len(x); i += 2 {
		g0, g1 := g[i], g[i+1]
		b0, b1 := int64(int32(math.Float32bits(x[i]))), int64(int32(math.Float32bits(x[i+1])))
		s0, s1 = s0+float64(g0)*float64(g0), s1+float64(g1)*float64(g1)
		m0 := uint32((-b0 >> 63) & ((b0 - 0x7f800001) >> 63))
		m1 := uint32((-b1 >> 63) & ((b1 - 0x7f800001) >> 63))
		dst[i] = math.Float32frombits(math.Float32bits(g0) & m0)
		dst[i+1] = math.Float32frombits(math.Float32bits(g1) & m1)
	}
	if i < len(x) {
		s0 += float64(g[i]) * float64(g[i])
		b := int64(int32(math.Float32bits(x[i])))
		m := uint32((-b >> 63) & ((b - 0x7f800001) >> 63))
		dst[i] = math.Float32frombits(math.Float32bits(g[i]) & m)
	}
	return s0 + s1
}

// slowUnary sends every element-wise rule through its generic derivative
// (tests compare the loops of fastUnary with it).
var slowUnary = false

// fastUnary holds, for common activations on float32 models, a loop that
// computes the same float64 expressions as the derivative given to unary
// but without a call per element, so that simple selects replace branches;
// given the node, it returns the loop over one part (dst may be g), which
// also returns Σ g² over the part (two addition chains, even and odd
// elements, for grad_rms). Each loop reads g[i] before writing dst[i].
var fastUnary = map[string]func(o *Op) func(dst, g []float64, x, y []float32) float64{
	"Sigmoid":     func(*Op) func(dst, g []float64, x, y []float32) float64 { return sigmoidLoop[float64] },
	"Tanh":        func(*Op) func(dst, g []float64, x, y []float32) float64 { return tanhLoop[float64] },
	"HardSigmoid": func(o *Op) func(dst, g []float64, x, y []float32) float64 { return hardSigmoidLoop[float64](o) },
	"HardSwish":   func(*Op) func(dst, g []float64, x, y []float32) float64 { return hardSwishLoop[float64] },
}

// fastUnary32 holds fastUnary's loops for float32 gradients (grad32.go):
// the same float64 expressions on G widened, the result rounded to float32.
var fastUnary32 = map[string]func(o *Op) func(dst, g []float32, x, y []float32) float64{
	"Sigmoid":     func(*Op) func(dst, g []float32, x, y []float32) float64 { return sigmoidLoop[float32] },
	"Tanh":        func(*Op) func(dst, g []float32, x, y []float32) float64 { return tanhLoop[float32] },
	"HardSigmoid": func(o *Op) func(dst, g []float32, x, y []float32) float64 { return hardSigmoidLoop[float32](o) },
	"HardSwish":   func(*Op) func(dst, g []float32, x, y []float32) float64 { return hardSwish32 },
	"Identity":    func(*Op) func(dst, g []float32, x, y []float32) float64 { return copyLoop },
	"Dropout":     func(*Op) func(dst, g []float32, x, y []float32) float64 { return copyLoop },
}

// sigmoidLoop: dst = g·y(1 − y).
func sigmoidLoop[T float32 | float64](dst, g []T, _, y []float32) float64 {
	y, dst = y[:len(g)], dst[:len(g)]
	var s0, s1 float64
	i := 0
	for ; i+2 <= len(g); i += 2 {
		g0, g1, y0, y1 := float64(g[i]), float64(g[i+1]), float64(y[i]), float64(y[i+1])
		s0, s1 = s0+g0*g0, s1+g1*g1
		dst[i], dst[i+1] = T(g0*(y0*(1-y0))), T(g1*(y1*(1-y1)))
	}
	if i < len(g) {
		g0, y0 := float64(g[i]), float64(y[i])
		s0 += g0 * g0
		dst[i] = T(g0 * (y0 * (1 - y0)))
	}
	return s0 + s1
}

// tanhLoop: dst = g·(1 − y²).
func tanhLoop[T float32 | float64](dst, g []T, _, y []float32) float64 {
	y, dst = y[:len(g)], dst[:len(g)]
	var s0, s1 float64
	i := 0
	for ; i+2 <= len(g); i += 2 {
		g0, g1, y0, y1 := float64(g[i]), float64(g[i+1]), float64(y[i]), float64(y[i+1])
		s0, s1 = s0+g0*g0, s1+g1*g1
		dst[i], dst[i+1] = T(g0*(1-y0*y0)), T(g1*(1-y1*y1))
	}
	if i < len(g) {
		g0, y0 := float64(g[i]), float64(y[i])
		s0 += g0 * g0
		dst[i] = T(g0 * (1 - y0*y0))
	}
	return s0 + s1
}

// hardSigmoidLoop: dst = g·dHardSigmoid(x).
func hardSigmoidLoop[T float32 | float64](o *Op) func(dst, g []T, x, y []float32) float64 {
	a, b := float64(o.Float("alpha", 0.2)), float64(o.Float("beta", 0.5))
	return func(dst, g []T, x, _ []float32) float64 {
		x, dst = x[:len(g)], dst[:len(g)]
		var s0, s1 float64
		i := 0
		for ; i+2 <= len(g); i += 2 {
			g0, g1 := float64(g[i]), float64(g[i+1])
			s0, s1 = s0+g0*g0, s1+g1*g1
			dst[i], dst[i+1] = T(g0*dHardSigmoid(float64(x[i]), a, b)), T(g1*dHardSigmoid(float64(x[i+1]), a, b))
		}
		if i < len(g) {
			g0 := float64(g[i])
			s0 += g0 * g0
			dst[i] = T(g0 * dHardSigmoid(float64(x[i]), a, b))
		}
		return s0 + s1
	}
}

// hardSwishLoop: dst = g·dHardSwish(x).
func hardSwishLoop[T float32 | float64](dst, g []T, x, _ []float32) float64 {
	x, dst = x[:len(g)], dst[:len(g)]
	var s0, s1 float64
	i := 0
	for ; i+2 <= len(g); i += 2 {
		g0, g1 := float64(g[i]), float64(g[i+1])
		s0, s1 = s0+g0*g0, s1+g1*g1
		dst[i], dst[i+1] = T(g0*dHardSwish(float64(x[i]))), T(g1*dHardSwish(float64(x[i+1])))
	}
	if i < len(g) {
		g0 := float64(g[i])
		s0 += g0 * g0
		dst[i] = T(g0 * dHardSwish(float64(x[i])))
	}
	return s0 + s1
}

// hardSwish32 is hardSwishLoop for float32 gradients, the first
// len(g)&^15 elements by the vector loop where there is one (its d(x) in
// float32: x·(1/3) + 1/2 within 2⁻²³ of the float64 expression).
func hardSwish32(dst, g, x, y []float32) float64 {
	i, s := hardSwishVec(dst, g, x)
	return s + hardSwishLoop(dst[i:], g[i:], x[i:], y)
}

// copyLoop: dst = g (the identity), with Σ g².
func copyLoop(dst, g []float32, _, _ []float32) float64 {
	copy(dst, g)
	return sumSq32(g)
}

// dHardSigmoid is HardSigmoid's derivative a where 0 < a·x + b < 1, else 0
// (the generic rule's expression, small enough to be inlined).
func dHardSigmoid(x, a, b float64) float64 {
	u := a*x + b
	d := a
	if !(u > 0 && u < 1) {
		d = 0
	}
	return d
}

// dHardSwish is HardSwish's derivative: 0 below −3, x/3 + 1/2 up to 3, 1
// above (and for NaN, as the generic rule), small enough to be inlined.
func dHardSwish(x float64) float64 {
	d := 1.0
	if x <= 3 {
		d = x/3 + 0.5
	}
	if x < -3 {
		d = 0
	}
	return d
}
