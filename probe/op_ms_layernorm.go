package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// com.microsoft normalisation operators (onnxruntime docs/ContribOperators.md).
// Every one normalises over the last axis (hidden size H):
//
//	LayerNorm(x)  = (x − μ)/√(σ² + ε)·γ + β       μ, σ² the row's mean and population variance
//	RMSNorm(x)    = x/√(mean(x²) + ε)·γ
//
//	SkipLayerNormalization(input, skip, γ, β?, bias?)   s = input + skip + bias; LayerNorm(s)
//	SkipSimplifiedLayerNormalization(input, skip, γ, bias?)        RMSNorm(input + skip + bias)
//	SimplifiedLayerNormalization(X, γ)                  RMSNorm over axes [axis, rank) (also in the default domain, as ONNX Runtime writes it)
//	EmbedLayerNormalization(ids, segment_ids?, word, position, segment?, γ, β, mask?, position_ids?)
//	    e[b,s] = word[ids[b,s]] + position[pos[b,s]] + segment[segment_ids[b,s]],  pos default s;
//	    output LayerNorm(e), mask_index[b] = Σ_s mask[b,s] (int32; 0s without mask), embedding_sum e.
//
// skip is (B, S, H), (1, S, H) or (S, H). The Skip operators' optional
// outputs are mean, inv_std_var (shape input.shape[:-1]+[1]) and
// input_skip_bias_sum s. ε is attribute epsilon (default 1e-12 for the
// Skip and Embed operators, 1e-5 for SimplifiedLayerNormalization).
func init() {
	Register("com.microsoft", "SkipLayerNormalization", 1, msSkipNormKernel(false))
	Register("com.microsoft", "SkipSimplifiedLayerNormalization", 1, msSkipNormKernel(true))
	Register("com.microsoft", "SimplifiedLayerNormalization", 1, msSimplifiedLNKernel)
	reg("SimplifiedLayerNormalization", msSimplifiedLNKernel, 1)
	Register("com.microsoft", "EmbedLayerNormalization", 1, msEmbedLNKernel)
}

// msParam reads an optional float32 vector of length h.
func msParam(t *tensor.Tensor, h int, what string) ([]float64, error) {
	if t == nil {
		return nil, nil
	}
	p, err := normF64(t)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", what, err)
	}
	if len(p) != h {
		return nil, fmt.Errorf("%s %v must have the hidden size %d values", what, t.Shape, h)
	}
	return p, nil
}

func msSkipNormKernel(rms bool) Kernel {
	return func(c *Call) error {
		if err := c.Need(3); err != nil {
			return err
		}
		x, skip := c.In[0], c.In[1]
		if x.DType != tensor.Float32 || skip.DType != tensor.Float32 {
			return fmt.Errorf("input and skip must be float32, got %v and %v", x.DType, skip.DType)
		}
		if x.Rank() < 2 {
			return fmt.Errorf("input must have rank ≥ 2, got shape %v", x.Shape)
		}
		h := x.Shape[x.Rank()-1]
		if out, err := Broadcast(x.Shape, skip.Shape); err != nil || !tensor.SameShape(out, x.Shape) {
			return fmt.Errorf("skip %v does not broadcast to input %v", skip.Shape, x.Shape)
		}
		gamma, err := msParam(c.In[2], h, "gamma")
		if err != nil {
			return err
		}
		var beta []float64
		biasIdx := 3
		if !rms {
			if beta, err = msParam(c.Input(3), h, "beta"); err != nil {
				return err
			}
			biasIdx = 4
		}
		bias, err := msParam(c.Input(biasIdx), h, "bias")
		if err != nil {
			return err
		}
		ar := c.Arena()
		sum := ar.NewUninit(tensor.Float32, x.Shape)
		sd, xd := sum.F32(), x.F32()
		skd := skip.F32()
		if len(skd) != len(xd) {
			skd = BroadcastTo(ar, skip, x.Shape).F32()
		}
		for i := range sd {
			v := float64(xd[i]) + float64(skd[i])
			if bias != nil {
				v += bias[i%h]
			}
			sd[i] = float32(v)
		}
		rows := len(sd) / max(h, 1)
		means, inv := make([]float64, rows), make([]float64, rows)
		y := ar.NewUninit(tensor.Float32, x.Shape)
		normRows(y.F32(), sd, h, gamma, beta, float64(c.Float("epsilon", 1e-12)), rms, means, inv)
		st := append(shapeOf(x)[:x.Rank()-1], 1)
		c.Set(0, y)
		if c.WantOut(1) {
			c.Set(1, normFromF64(tensor.Float32, means, st))
		}
		if c.WantOut(2) {
			c.Set(2, normFromF64(tensor.Float32, inv, st))
		}
		c.Set(3, sum)
		return nil
	}
}

func msSimplifiedLNKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x := c.In[0]
	if x.DType != tensor.Float32 {
		return fmt.Errorf("input must be float32, got %v", x.DType)
	}
	axis, err := NormAxis(int(c.Int("axis", -1)), x.Rank())
	if err != nil {
		return err
	}
	m := 1
	for _, d := range x.Shape[axis:] {
		m *= d
	}
	scale, err := msParam(c.In[1], m, "scale")
	if err != nil {
		return err
	}
	rows := x.Size() / max(m, 1)
	inv := make([]float64, rows)
	y := c.Arena().NewUninit(tensor.Float32, x.Shape)
	normRows(y.F32(), x.F32(), m, scale, nil, float64(c.Float("epsilon", 1e-5)), true, nil, inv)
	c.Set(0, y)
	if c.WantOut(1) {
		st := shapeOf(x)
		for i := axis; i < len(st); i++ {
			st[i] = 1
		}
		c.Set(1, normFromF64(tensor.Float32, inv, st))
	}
	return nil
}

// msIDs reads an integer id tensor of B·S values.
func msIDs(t *tensor.Tensor, n int, what string) ([]int, error) {
	if t.DType.IsFloat() {
		return nil, fmt.Errorf("%s must be integer, got %v", what, t.DType)
	}
	ids := t.Ints()
	if len(ids) != n {
		return nil, fmt.Errorf("%s %v does not have the %d values of (batch, sequence)", what, t.Shape, n)
	}
	return ids, nil
}

func msEmbedLNKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	for _, i := range []int{2, 3, 5, 6} {
		if c.Input(i) == nil {
			return fmt.Errorf("input %d (word_embedding, position_embedding, gamma, beta) is missing", i)
		}
	}
	idsT := c.In[0]
	if idsT.Rank() != 2 {
		return fmt.Errorf("input_ids must be (batch, sequence), got %v", idsT.Shape)
	}
	B, S := idsT.Shape[0], idsT.Shape[1]
	word, pos := c.In[2], c.In[3]
	if word.Rank() != 2 || pos.Rank() != 2 || word.DType != tensor.Float32 || pos.DType != tensor.Float32 || pos.Shape[1] != word.Shape[1] {
		return fmt.Errorf("word_embedding %v and position_embedding %v must be float32 (rows, hidden) with the same hidden size", word.Shape, pos.Shape)
	}
	h := word.Shape[1]
	ids, err := msIDs(idsT, B*S, "input_ids")
	if err != nil {
		return err
	}
	var segIDs []int
	var seg *tensor.Tensor
	if c.Input(1) != nil && c.Input(4) != nil {
		seg = c.In[4]
		if seg.Rank() != 2 || seg.DType != tensor.Float32 || seg.Shape[1] != h {
			return fmt.Errorf("segment_embedding %v must be float32 (segments, %d)", seg.Shape, h)
		}
		if segIDs, err = msIDs(c.In[1], B*S, "segment_ids"); err != nil {
			return err
		}
	}
	posIDs := make([]int, B*S)
	if p := c.Input(8); p != nil {
		v := p.Ints()
		switch len(v) {
		case B * S:
			copy(posIDs, v)
		case S:
			for b := 0; b < B; b++ {
				copy(posIDs[b*S:], v)
			}
		default:
			return fmt.Errorf("position_ids %v is neither (batch, sequence) nor (1, sequence)", p.Shape)
		}
	} else {
		for i := range posIDs {
			posIDs[i] = i % S
		}
	}
	gamma, err := msParam(c.In[5], h, "gamma")
	if err != nil {
		return err
	}
	beta, err := msParam(c.In[6], h, "beta")
	if err != nil {
		return err
	}
	ar := c.Arena()
	emb := ar.NewUninit(tensor.Float32, []int{B, S, h})
	ed, wd, pd := emb.F32(), word.F32(), pos.F32()
	row := func(t *tensor.Tensor, d []float32, i int, what string) ([]float32, error) {
		if i < 0 || i >= t.Shape[0] {
			return nil, fmt.Errorf("%s id %d is outside the table's %d rows", what, i, t.Shape[0])
		}
		return d[i*h : (i+1)*h], nil
	}
	for t := 0; t < B*S; t++ {
		w, err := row(word, wd, ids[t], "word")
		if err != nil {
			return err
		}
		p, err := row(pos, pd, posIDs[t], "position")
		if err != nil {
			return err
		}
		o := ed[t*h : (t+1)*h]
		for j := range o {
			o[j] = w[j] + p[j]
		}
		if seg != nil {
			s, err := row(seg, seg.F32(), segIDs[t], "segment")
			if err != nil {
				return err
			}
			for j := range o {
				o[j] += s[j]
			}
		}
	}
	y := ar.NewUninit(tensor.Float32, []int{B, S, h})
	normRows(y.F32(), ed, h, gamma, beta, float64(c.Float("epsilon", 1e-12)), false, nil, nil)
	mi := make([]int32, B)
	if m := c.Input(7); m != nil {
		v := m.Ints()
		if len(v) != B*S {
			return fmt.Errorf("mask %v is not (batch, sequence) = (%d, %d)", m.Shape, B, S)
		}
		for b := 0; b < B; b++ {
			for s := 0; s < S; s++ {
				mi[b] += int32(v[b*S+s])
			}
		}
	}
	c.Set(0, y)
	c.Set(1, tensor.From(mi, B))
	c.Set(2, emb)
	return nil
}
