package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// RotaryEmbedding: ONNX opset 23 and com.microsoft.
//
// For every (batch b, position s, head h) the first R = rotary_embedding_dim
// (0: the head size D) features of the head are rotated in R/2 planes with
// c = cos[p], s = sin[p] for the position p of token (b, s):
//
//	x₁' = c·x₁ − s·x₂,   x₂' = s·x₁ + c·x₂
//
// where (x₁, x₂) are the halves (x[i], x[i+R/2]) or, with interleaved = 1,
// the pairs (x[2i], x[2i+1]); features R…D−1 pass unchanged.
// ONNX: inputs X, cos_cache, sin_cache, position_ids (optional); X is
// (B, H, S, D) or (B, S, H·D) with num_heads; without position_ids the
// caches are (B, S, R/2), with them (P, R/2) indexed by position_ids (B, S).
// com.microsoft: inputs input, position_ids, cos_cache, sin_cache; input is
// (B, S, H·D) or (B, H, S, D); position_ids is one offset (token s has
// position offset+s) or (B, S); the caches are (P, R/2).
func init() {
	reg("RotaryEmbedding", onnxRotaryKernel, 23)
	Register("com.microsoft", "RotaryEmbedding", 1, msRotaryKernel)
}

// rotaryArgs is one rotary computation over x addressed by strides.
type rotaryArgs struct {
	B, S, H, D, R int
	sB, sS, sH    int
	interleaved   bool
	// trig returns the cos and sin rows (length R/2) for token (b, s).
	trig func(b, s int) (cos, sin []float32, err error)
}

func (a rotaryArgs) run(y, x []float32) error {
	copy(y, x)
	half := a.R / 2
	for b := 0; b < a.B; b++ {
		for s := 0; s < a.S; s++ {
			cs, sn, err := a.trig(b, s)
			if err != nil {
				return err
			}
			if len(cs) < half || len(sn) < half {
				return fmt.Errorf("cos/sin rows have %d/%d values, want rotary_dim/2 = %d", len(cs), len(sn), half)
			}
			for h := 0; h < a.H; h++ {
				o := b*a.sB + s*a.sS + h*a.sH
				xs, ys := x[o:o+a.D], y[o:o+a.D]
				for i := 0; i < half; i++ {
					i1, i2 := i, i+half
					if a.interleaved {
						i1, i2 = 2*i, 2*i+1
					}
					x1, x2 := xs[i1], xs[i2]
					ys[i1] = cs[i]*x1 - sn[i]*x2
					ys[i2] = sn[i]*x1 + cs[i]*x2
				}
			}
		}
	}
	return nil
}

// rotaryLayout sets B, S, H, D and the strides for a 4-D (B, H, S, D) or
// 3-D (B, S, H·D) input.
func rotaryLayout(x *tensor.Tensor, numHeads int) (rotaryArgs, error) {
	var a rotaryArgs
	switch x.Rank() {
	case 4:
		a.B, a.H, a.S, a.D = x.Shape[0], x.Shape[1], x.Shape[2], x.Shape[3]
		a.sB, a.sH, a.sS = a.H*a.S*a.D, a.S*a.D, a.D
	case 3:
		if numHeads <= 0 || x.Shape[2]%numHeads != 0 {
			return a, fmt.Errorf("3-D input %v needs attribute num_heads dividing its hidden size, got %d", x.Shape, numHeads)
		}
		a.B, a.S, a.H, a.D = x.Shape[0], x.Shape[1], numHeads, x.Shape[2]/numHeads
		a.sB, a.sS, a.sH = a.S*a.H*a.D, a.H*a.D, a.D
	default:
		return a, fmt.Errorf("input must be 3-D or 4-D, got shape %v", x.Shape)
	}
	return a, nil
}

func rotaryDim(a *rotaryArgs, r int) error {
	if r == 0 {
		r = a.D
	}
	if r > a.D || r%2 != 0 {
		return fmt.Errorf("rotary_embedding_dim %d must be even and at most the head size %d", r, a.D)
	}
	a.R = r
	return nil
}

// cacheRow returns row p of a (P, R/2) cache.
func cacheRow(t *tensor.Tensor, p int, name string) ([]float32, error) {
	if t.Rank() != 2 {
		return nil, fmt.Errorf("%s must be 2-D (positions, rotary_dim/2) with position ids, got %v", name, t.Shape)
	}
	if p < 0 || p >= t.Shape[0] {
		return nil, fmt.Errorf("position %d is outside %s's %d rows", p, name, t.Shape[0])
	}
	w := t.Shape[1]
	return t.F32()[p*w : (p+1)*w], nil
}

func rotaryFloat(ts ...*tensor.Tensor) error {
	for _, t := range ts {
		if t.DType != tensor.Float32 {
			return fmt.Errorf("RotaryEmbedding computes in float32, got %v", t.DType)
		}
	}
	return nil
}

func onnxRotaryKernel(c *Call) error {
	if err := c.Need(3); err != nil {
		return err
	}
	x, cosC, sinC, pos := c.In[0], c.In[1], c.In[2], c.Input(3)
	if err := rotaryFloat(x, cosC, sinC); err != nil {
		return err
	}
	a, err := rotaryLayout(x, int(c.Int("num_heads", 0)))
	if err != nil {
		return err
	}
	if err := rotaryDim(&a, int(c.Int("rotary_embedding_dim", 0))); err != nil {
		return err
	}
	a.interleaved = c.Int("interleaved", 0) != 0
	if pos != nil {
		ids := pos.Ints()
		if len(ids) != a.B*a.S {
			return fmt.Errorf("position_ids %v does not match (batch, sequence) = (%d, %d)", pos.Shape, a.B, a.S)
		}
		a.trig = func(b, s int) ([]float32, []float32, error) {
			p := ids[b*a.S+s]
			cs, err := cacheRow(cosC, p, "cos_cache")
			if err != nil {
				return nil, nil, err
			}
			sn, err := cacheRow(sinC, p, "sin_cache")
			return cs, sn, err
		}
	} else {
		if cosC.Rank() != 3 || cosC.Shape[0] != a.B || cosC.Shape[1] != a.S || !tensor.SameShape(cosC.Shape, sinC.Shape) {
			return fmt.Errorf("without position_ids cos_cache %v and sin_cache %v must be (batch, sequence, rotary_dim/2) = (%d, %d, %d)", cosC.Shape, sinC.Shape, a.B, a.S, a.R/2)
		}
		w := cosC.Shape[2]
		a.trig = func(b, s int) ([]float32, []float32, error) {
			o := (b*a.S + s) * w
			return cosC.F32()[o : o+w], sinC.F32()[o : o+w], nil
		}
	}
	y := c.Arena().NewUninit(tensor.Float32, x.Shape)
	if err := a.run(y.F32(), x.F32()); err != nil {
		return err
	}
	c.Set(0, y)
	return nil
}

func msRotaryKernel(c *Call) error {
	if err := c.Need(4); err != nil {
		return err
	}
	x, pos, cosC, sinC := c.In[0], c.In[1], c.In[2], c.In[3]
	if err := rotaryFloat(x, cosC, sinC); err != nil {
		return err
	}
	if c.Int("is_packed_batching", 0) != 0 {
		return fmt.Errorf("is_packed_batching = 1 is not supported")
	}
	a, err := rotaryLayout(x, int(c.Int("num_heads", 0)))
	if err != nil {
		return err
	}
	r := int(c.Int("rotary_embedding_dim", 0))
	if r == 0 && cosC.Rank() == 2 {
		r = 2 * cosC.Shape[1]
	}
	if err := rotaryDim(&a, r); err != nil {
		return err
	}
	a.interleaved = c.Int("interleaved", 0) != 0
	ids := pos.Ints()
	switch len(ids) {
	case 1:
		off := ids[0]
		a.trig = func(b, s int) ([]float32, []float32, error) {
			cs, err := cacheRow(cosC, off+s, "cos_cache")
			if err != nil {
				return nil, nil, err
			}
			sn, err := cacheRow(sinC, off+s, "sin_cache")
			return cs, sn, err
		}
	case a.B * a.S:
		a.trig = func(b, s int) ([]float32, []float32, error) {
			p := ids[b*a.S+s]
			cs, err := cacheRow(cosC, p, "cos_cache")
			if err != nil {
				return nil, nil, err
			}
			sn, err := cacheRow(sinC, p, "sin_cache")
			return cs, sn, err
		}
	default:
		return fmt.Errorf("position_ids %v is neither one offset nor (batch, sequence) = (%d, %d)", pos.Shape, a.B, a.S)
	}
	y := c.Arena().NewUninit(tensor.Float32, x.Shape)
	if err := a.run(y.F32(), x.F32()); err != nil {
		return err
	}
	c.Set(0, y)
	return nil
}
