package stats

import (
	"fmt"
	"sort"
)

// partTransformer: the attention and residual-stream accumulators of a
// transformer (transformer_obs.go), per observed tensor: the head count
// fixed at the first batch, per-head entropy and max-probability sums and
// row counts, mask-detection row counts, the residual stream's |x|
// histogram, per-feature counts of |x| ≥ 6 and token-similarity sums, and
// the −inf count of attention scores. Every field is a sum, a count or a
// maximum, so merging is exact up to the order of float sums.
type partTransformer struct{}

func (partTransformer) Name() string { return "transformer" }

func (partTransformer) Save(c *Collector, e *Enc) {
	if c.tf == nil {
		e.Uvarint(0)
		return
	}
	names := make([]string, 0, len(c.tf.entries))
	for n := range c.tf.entries {
		names = append(names, n)
	}
	sort.Strings(names)
	e.Uvarint(uint64(len(names)))
	for _, n := range names {
		en := c.tf.entries[n]
		e.String(n)
		e.Varint(int64(en.heads))
		e.Varint(en.sc.negInf)
		e.Bool(en.attn != nil)
		if a := en.attn; a != nil {
			e.Uvarint(uint64(a.heads))
			for h := 0; h < a.heads; h++ {
				e.Float(a.entSum[h])
				e.Varint(a.entN[h])
				e.Float(a.maxSum[h])
				e.Varint(a.rows[h])
				e.Varint(a.oneHot[h])
			}
			e.Varint(a.maskedRows)
			e.Varint(a.causalRows)
			e.Varint(a.squareRows)
			e.Varint(a.totalRows)
		}
		e.Bool(en.resid != nil)
		if r := en.resid; r != nil {
			e.Uvarint(uint64(r.dim))
			e.Float(r.maxAbs)
			e.Varint(r.n)
			r.foldHist()
			for _, v := range r.hist {
				e.Varint(v)
			}
			for _, v := range r.over6 {
				e.Varint(v)
			}
			e.Varint(r.positions)
			e.Float(r.simSum)
			e.Varint(r.simN)
		}
	}
}

func (partTransformer) Load(c *Collector, d *Dec) error {
	n := d.Len(4)
	for i := 0; i < n && d.Err == nil; i++ {
		name := d.String()
		heads := int(d.Varint())
		negInf := d.Varint()
		var en *tfEntry
		if c.tf != nil {
			en = c.tf.entries[name]
		}
		if en == nil {
			return fmt.Errorf("the state has transformer tensor %q, which this model does not", name)
		}
		if en.heads == 0 {
			en.heads = heads
		}
		en.sc.negInf += negInf
		if d.Bool() {
			h := d.Len(0)
			b := newAttnAcc(h)
			for k := 0; k < h && d.Err == nil; k++ {
				b.entSum[k], b.entN[k], b.maxSum[k], b.rows[k], b.oneHot[k] = d.Float(), d.Varint(), d.Float(), d.Varint(), d.Varint()
			}
			b.maskedRows, b.causalRows, b.squareRows, b.totalRows = d.Varint(), d.Varint(), d.Varint(), d.Varint()
			if en.attn == nil {
				en.attn = newAttnAcc(h)
			}
			if en.attn.heads != h {
				return fmt.Errorf("attention tensor %q: %d heads in the state, %d here", name, h, en.attn.heads)
			}
			en.attn.merge(b)
		}
		if d.Bool() {
			dim := d.Len(0)
			b := newResidAcc(dim)
			b.maxAbs, b.n = d.Float(), d.Varint()
			for k := range b.hist {
				b.hist[k] = d.Varint()
			}
			for k := range b.over6 {
				b.over6[k] = d.Varint()
			}
			b.positions, b.simSum, b.simN = d.Varint(), d.Float(), d.Varint()
			if en.resid == nil {
				en.resid = newResidAcc(dim)
			}
			if en.resid.dim != dim {
				return fmt.Errorf("residual tensor %q: %d features in the state, %d here", name, dim, en.resid.dim)
			}
			en.resid.merge(b)
		}
	}
	return d.Err
}
