package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Attention (ONNX opset 23; opset 24 adds input 6, nonpad_kv_seqlen).
//
// Inputs Q, K, V, attn_mask, past_key, past_value, nonpad_kv_seqlen;
// outputs Y, present_key, present_value, qk_matmul_output.
// Q is (B, Hq, Sq, D) or (B, Sq, Hq·D) with attribute q_num_heads; K and V
// are (B, Hkv, S, D|Dv) or (B, S, Hkv·D) with kv_num_heads; Hq must be a
// multiple of Hkv (grouped-query attention repeats each kv head Hq/Hkv times).
// present_key = concat(past_key, K) on the sequence axis (likewise value);
// scale defaults to 1/√D. The mask (bool: true attends; float: added) is
// broadcast to (B, Hq, Sq, T) and padded with "masked" up to T keys when
// shorter. is_causal masks key j for query i when j > i + offset, offset =
// the past length, or nonpad_kv_seqlen[b] − Sq without a past; keys
// j ≥ nonpad_kv_seqlen[b] are masked. softcap > 0 maps scores to
// softcap·tanh(score/softcap) before the mask is added. qk_matmul_output is
// the scores after softcap (modes 0 and 1), after the mask (2) or the
// probabilities (3), as in the ONNX reference implementation.
func init() {
	reg("Attention", onnxAttentionKernel, 23, 24)
}

func onnxAttentionKernel(c *Call) error {
	if err := c.Need(3); err != nil {
		return err
	}
	q, k, v := c.In[0], c.In[1], c.In[2]
	for i, t := range []*tensor.Tensor{q, k, v} {
		if t.DType != tensor.Float32 {
			return fmt.Errorf("input %d: Attention computes in float32, got %v", i, t.DType)
		}
	}
	if q.Rank() != k.Rank() || q.Rank() != v.Rank() || (q.Rank() != 3 && q.Rank() != 4) {
		return fmt.Errorf("Q, K, V must all be 3-D or all 4-D, got %v, %v, %v", q.Shape, k.Shape, v.Shape)
	}
	B := q.Shape[0]
	var Hq, Hkv, Sq, Skv, D, Dv int
	var Q attnView
	var kc, vc []float32 // K and V as (B, Hkv, Skv, ·)
	if q.Rank() == 4 {
		Hq, Sq, D = q.Shape[1], q.Shape[2], q.Shape[3]
		Hkv, Skv, Dv = k.Shape[1], k.Shape[2], v.Shape[3]
		if k.Shape[3] != D || v.Shape[1] != Hkv || v.Shape[2] != Skv {
			return fmt.Errorf("K %v and V %v do not fit Q %v", k.Shape, v.Shape, q.Shape)
		}
		Q = viewBHSD(q.F32(), Hq, Sq, D)
		kc, vc = k.F32(), v.F32()
	} else {
		Hq, Hkv = int(c.Int("q_num_heads", 0)), int(c.Int("kv_num_heads", 0))
		if Hq <= 0 || Hkv <= 0 {
			return fmt.Errorf("3-D inputs need attributes q_num_heads and kv_num_heads > 0, got %d and %d", Hq, Hkv)
		}
		if q.Shape[2]%Hq != 0 || k.Shape[2]%Hkv != 0 || v.Shape[2]%Hkv != 0 {
			return fmt.Errorf("hidden sizes %d, %d, %d are not multiples of the head counts %d and %d", q.Shape[2], k.Shape[2], v.Shape[2], Hq, Hkv)
		}
		Sq, D = q.Shape[1], q.Shape[2]/Hq
		Skv, Dv = k.Shape[1], v.Shape[2]/Hkv
		if k.Shape[2]/Hkv != D || v.Shape[1] != Skv {
			return fmt.Errorf("K %v and V %v do not fit Q %v", k.Shape, v.Shape, q.Shape)
		}
		Q = viewBSHD(q.F32(), Sq, Hq*D, D, 0)
		kc = bshdToBHSD(k.F32(), B, Skv, Hkv, D)
		vc = bshdToBHSD(v.F32(), B, Skv, Hkv, Dv)
	}
	if k.Shape[0] != B || v.Shape[0] != B {
		return fmt.Errorf("batch sizes differ: Q %v, K %v, V %v", q.Shape, k.Shape, v.Shape)
	}
	if Hkv == 0 || Hq%Hkv != 0 {
		return fmt.Errorf("q heads %d are not a multiple of kv heads %d", Hq, Hkv)
	}
	past := 0
	pk, pv := c.Input(4), c.Input(5)
	if (pk == nil) != (pv == nil) {
		return fmt.Errorf("past_key and past_value must be given together")
	}
	if pk != nil {
		if pk.DType != tensor.Float32 || pv.DType != tensor.Float32 || pk.Rank() != 4 || pv.Rank() != 4 ||
			pk.Shape[0] != B || pk.Shape[1] != Hkv || pk.Shape[3] != D || pv.Shape[0] != B || pv.Shape[1] != Hkv || pv.Shape[3] != Dv || pv.Shape[2] != pk.Shape[2] {
			return fmt.Errorf("past_key %v / past_value %v do not fit (B=%d, kv heads %d, head sizes %d, %d)", pk.Shape, pv.Shape, B, Hkv, D, Dv)
		}
		past = pk.Shape[2]
	}
	T := past + Skv
	ar := c.Arena()
	presentK := ar.NewUninit(tensor.Float32, []int{B, Hkv, T, D})
	presentV := ar.NewUninit(tensor.Float32, []int{B, Hkv, T, Dv})
	attnConcatSeq(presentK.F32(), pk, kc, B*Hkv, past, Skv, D)
	attnConcatSeq(presentV.F32(), pv, vc, B*Hkv, past, Skv, Dv)

	spec := attnSpec{B: B, Hq: Hq, Hkv: Hkv, Sq: Sq, T: T, D: D, Dv: Dv, Q: Q,
		K: viewBHSD(presentK.F32(), Hkv, T, D), V: viewBHSD(presentV.F32(), Hkv, T, Dv),
		Scale: c.Float("scale", float32(1/math.Sqrt(float64(D)))), Softcap: c.Float("softcap", 0)}
	var y *tensor.Tensor
	if q.Rank() == 4 {
		y = ar.NewUninit(tensor.Float32, []int{B, Hq, Sq, Dv})
		spec.Y = viewBHSD(y.F32(), Hq, Sq, Dv)
	} else {
		y = ar.NewUninit(tensor.Float32, []int{B, Sq, Hq * Dv})
		spec.Y = viewBSHD(y.F32(), Sq, Hq*Dv, Dv, 0)
	}
	bias, err := onnxAttnMask(c, B, Hq, Sq, T, past)
	if err != nil {
		return err
	}
	spec.Bias = bias
	var qk *tensor.Tensor
	if c.WantOut(3) {
		qk = ar.New(tensor.Float32, []int{B, Hq, Sq, T})
		spec.QK = qk.F32()
		switch mode := c.Int("qk_matmul_output_mode", 0); mode {
		case 0, 1:
			spec.QKStage = 0
		case 2:
			spec.QKStage = 1
		case 3:
			spec.QKStage = 2
		default:
			return fmt.Errorf("qk_matmul_output_mode %d is not 0–3", mode)
		}
	}
	spec.observe(c)
	spec.run()
	c.Set(0, y)
	c.Set(1, presentK)
	c.Set(2, presentV)
	if qk != nil {
		c.Set(3, qk)
	}
	return nil
}

// bshdToBHSD copies (B, S, H·D) to (B, H, S, D).
func bshdToBHSD(x []float32, B, S, H, D int) []float32 {
	out := make([]float32, len(x))
	for b := 0; b < B; b++ {
		for s := 0; s < S; s++ {
			for h := 0; h < H; h++ {
				copy(out[((b*H+h)*S+s)*D:((b*H+h)*S+s+1)*D], x[((b*S+s)*H+h)*D:])
			}
		}
	}
	return out
}

// attnConcatSeq writes concat(past, cur) along the sequence axis for n
// (batch·head) matrices: past (n, P, D) may be nil, cur is (n, S, D).
func attnConcatSeq(dst []float32, past *tensor.Tensor, cur []float32, n, P, S, D int) {
	for i := 0; i < n; i++ {
		o := dst[i*(P+S)*D:]
		if past != nil {
			copy(o[:P*D], past.F32()[i*P*D:(i+1)*P*D])
		}
		copy(o[P*D:(P+S)*D], cur[i*S*D:(i+1)*S*D])
	}
}

// onnxAttnMask builds the additive mask of ONNX Attention: attn_mask
// (broadcast, padded to T keys with "masked"), is_causal, nonpad_kv_seqlen.
func onnxAttnMask(c *Call, B, Hq, Sq, T, past int) (func(b, h, i int, s []float32), error) {
	m := c.Input(3)
	causal := c.Int("is_causal", 0) != 0
	var nonpad []int
	if np := c.Input(6); np != nil {
		nonpad = np.Ints()
		if len(nonpad) != B {
			return nil, fmt.Errorf("nonpad_kv_seqlen has %d values, want batch size %d", len(nonpad), B)
		}
	}
	if m == nil && !causal && nonpad == nil {
		return nil, nil
	}
	var mf []float32
	var mb []bool
	var st []int
	Tm := 0
	if m != nil {
		if m.Rank() < 2 || m.Rank() > 4 {
			return nil, fmt.Errorf("attn_mask must have rank 2–4, got shape %v", m.Shape)
		}
		switch d := m.Data.(type) {
		case []float32:
			mf = d
		case []bool:
			mb = d
		default:
			return nil, fmt.Errorf("attn_mask must be bool or float32, got %v", m.DType)
		}
		Tm = m.Shape[m.Rank()-1]
		if Tm > T {
			return nil, fmt.Errorf("attn_mask %v has more keys than the %d keys attended", m.Shape, T)
		}
		full := []int{B, Hq, Sq, Tm}
		if _, err := Broadcast(m.Shape, full); err != nil {
			return nil, fmt.Errorf("attn_mask %v does not broadcast to (B, q heads, Sq, keys) = %v", m.Shape, full)
		}
		st = BroadcastStrides(m.Shape, full)
	}
	off := make([]int, B)
	for b := range off {
		switch {
		case c.Input(4) != nil:
			off[b] = past
		case nonpad != nil:
			off[b] = nonpad[b] - Sq
		}
	}
	return func(b, h, i int, s []float32) {
		if m != nil {
			base := b*st[0] + h*st[1] + i*st[2]
			for j := range s {
				switch {
				case j >= Tm:
					s[j] = negInf32
				case mb != nil:
					if !mb[base+j*st[3]] {
						s[j] = negInf32
					}
				default:
					s[j] += mf[base+j*st[3]]
				}
			}
		}
		if causal {
			for j := max(0, i+off[b]+1); j < len(s); j++ {
				s[j] = negInf32
			}
		}
		if nonpad != nil {
			for j := max(0, nonpad[b]); j < len(s); j++ {
				s[j] = negInf32
			}
		}
	}, nil
}
