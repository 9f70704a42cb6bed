package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// com.microsoft fused attention operators (onnxruntime docs/ContribOperators.md),
// all computed by attnSpec (attn_core.go) in float32.
//
// Attention(input, weights, bias, mask_index?, past?, attention_bias?):
// QKV = input·weights + bias split by qkv_hidden_sizes (default three equal
// parts), num_heads heads each; past (2, B, N, P, D) is prepended to K and V
// and present (2, B, N, P+S, D) returned. Masked keys get mask_filter_value
// (default −10000) added: mask_index (B) = end positions (keys j ≥ end
// masked), (2B) = ends then starts, (B, T) or (B, S, T) = 1 attend / 0 masked;
// unidirectional = 1 masks j > P + i; attention_bias (B|1, N, S, T) is added.
//
// MultiHeadAttention(query, key, value, bias?, key_padding_mask?,
// attention_bias?, past_key?, past_value?): query (B, S, N·D); key/value
// (B, L, N·D), or (B, N, L, D) used as they are (no bias, no past).
// key_padding_mask is (B) end positions or (B, T) 1/0 as above.
// Outputs output, present_key, present_value (B, N, T, D).
//
// GroupQueryAttention(query, key, value, past_key?, past_value?, seqlens_k,
// total_sequence_length, cos_cache?, sin_cache?): query (B, S, Hq·D) (or the
// packed (B, S, (Hq+2·Hkv)·D) when key is absent), key/value (B, S, Hkv·D).
// Batch b holds T_b = seqlens_k[b]+1 tokens; with a past the new tokens sit at
// P_b = T_b − S…T_b−1 (P_b = 0 without a past); query i attends keys
// j ≤ P_b + i (always causal), and j > P_b + i − local_window_size when the
// window is set. do_rotary = 1 rotates Q and K at positions P_b + s with the
// caches (RotaryEmbedding). present_key/value are (B, Hkv, max(past buffer,
// total_sequence_length), D) with zeros after T_b.
func init() {
	Register("com.microsoft", "Attention", 1, msAttentionKernel)
	Register("com.microsoft", "MultiHeadAttention", 1, msMHAKernel)
	Register("com.microsoft", "GroupQueryAttention", 1, msGQAKernel)
}

func msFloat32(names []string, ts ...*tensor.Tensor) error {
	for i, t := range ts {
		if t != nil && t.DType != tensor.Float32 {
			return fmt.Errorf("%s must be float32, got %v", names[i], t.DType)
		}
	}
	return nil
}

// msKeyMask turns mask_index / key_padding_mask and unidirectional into an
// additive bias: masked keys get filter added (ONNX Runtime adds
// mask_filter_value rather than −∞), then attention_bias (B|1, N, S, T).
func msKeyMask(mask, abias *tensor.Tensor, B, N, S, T, past int, causal bool, filter float32) (func(b, h, i int, s []float32), error) {
	if mask == nil && abias == nil && !causal {
		return nil, nil
	}
	var mv []int
	kind := ""
	if mask != nil {
		if mask.DType.IsFloat() {
			return nil, fmt.Errorf("mask_index must be int32, got %v", mask.DType)
		}
		mv = mask.Ints()
		switch {
		case mask.Rank() == 1 && len(mv) == B:
			kind = "end"
		case mask.Rank() == 1 && len(mv) == 2*B:
			kind = "endstart"
		case mask.Rank() == 2 && mask.Shape[0] == B && mask.Shape[1] == T:
			kind = "2d"
		case mask.Rank() == 3 && mask.Shape[0] == B && mask.Shape[1] == S && mask.Shape[2] == T:
			kind = "3d"
		default:
			return nil, fmt.Errorf("mask %v is none of (B), (2B), (B, T), (B, S, T) with B=%d, S=%d, T=%d", mask.Shape, B, S, T)
		}
	}
	var bd []float32
	var bB int
	if abias != nil {
		if abias.DType != tensor.Float32 || abias.Rank() != 4 || (abias.Shape[0] != B && abias.Shape[0] != 1) || (abias.Shape[1] != N && abias.Shape[1] != 1) || abias.Shape[2] != S || abias.Shape[3] != T {
			return nil, fmt.Errorf("attention_bias %v is not float32 (B|1, N|1, S, T) with B=%d, N=%d, S=%d, T=%d", abias.Shape, B, N, S, T)
		}
		bd, bB = abias.F32(), abias.Shape[0]
	}
	var bN int
	if abias != nil {
		bN = abias.Shape[1]
	}
	return func(b, h, i int, s []float32) {
		for j := range s {
			masked := false
			switch kind {
			case "end":
				masked = j >= mv[b]
			case "endstart":
				masked = j >= mv[b] || j < mv[B+b]
			case "2d":
				masked = mv[b*T+j] == 0
			case "3d":
				masked = mv[(b*S+i)*T+j] == 0
			}
			if causal && j > past+i {
				masked = true
			}
			if masked {
				s[j] += filter
			}
		}
		if bd != nil {
			bb, hh := b, h
			if bB == 1 {
				bb = 0
			}
			if bN == 1 {
				hh = 0
			}
			row := bd[((bb*bN+hh)*S+i)*T:]
			for j := range s {
				s[j] += row[j]
			}
		}
	}, nil
}

func msScale(c *Call, d int) float32 {
	if s := c.Float("scale", 0); s != 0 {
		return s
	}
	return float32(1 / math.Sqrt(float64(d)))
}

func msAttentionKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x, w, bias, past, abias := c.In[0], c.In[1], c.Input(2), c.Input(4), c.Input(5)
	if err := msFloat32([]string{"input", "weights", "bias", "past", "attention_bias"}, x, w, bias, past, abias); err != nil {
		return err
	}
	if x.Rank() != 3 || w.Rank() != 2 || w.Shape[0] != x.Shape[2] {
		return fmt.Errorf("input %v must be (B, S, in) and weights %v (in, Dq+Dk+Dv)", x.Shape, w.Shape)
	}
	N := int(c.Int("num_heads", 0))
	B, S, in := x.Shape[0], x.Shape[1], x.Shape[2]
	tot := w.Shape[1]
	sizes := c.Ints("qkv_hidden_sizes")
	if sizes == nil {
		if tot%3 != 0 {
			return fmt.Errorf("weights %v: the width is not three equal parts (set qkv_hidden_sizes)", w.Shape)
		}
		sizes = []int{tot / 3, tot / 3, tot / 3}
	}
	if len(sizes) != 3 || sizes[0]+sizes[1]+sizes[2] != tot || sizes[0] != sizes[1] {
		return fmt.Errorf("qkv_hidden_sizes %v must be three sizes (Q = K) adding up to the weights' width %d", sizes, tot)
	}
	if N <= 0 || sizes[0]%N != 0 || sizes[2]%N != 0 {
		return fmt.Errorf("num_heads %d must divide the hidden sizes %v", N, sizes)
	}
	D, Dv := sizes[0]/N, sizes[2]/N
	qkv := make([]float32, B*S*tot)
	if bias != nil {
		if bias.Size() != tot {
			return fmt.Errorf("bias %v must have %d values", bias.Shape, tot)
		}
		for r := 0; r < B*S; r++ {
			copy(qkv[r*tot:(r+1)*tot], bias.F32())
		}
	}
	linGemm(false, false, B*S, tot, in, 1, x.F32(), in, w.F32(), tot, 1, qkv, tot)
	P := 0
	if past != nil {
		if past.Rank() != 5 || past.Shape[0] != 2 || past.Shape[1] != B || past.Shape[2] != N || past.Shape[4] != D || D != Dv {
			return fmt.Errorf("past %v is not (2, B, N, P, D) = (2, %d, %d, P, %d)", past.Shape, B, N, D)
		}
		P = past.Shape[3]
	}
	T := P + S
	ar := c.Arena()
	var present *tensor.Tensor
	var kd, vd []float32
	if D == Dv {
		present = ar.NewUninit(tensor.Float32, []int{2, B, N, T, D})
		kd, vd = present.F32()[:B*N*T*D], present.F32()[B*N*T*D:]
	} else {
		kd, vd = make([]float32, B*N*T*D), make([]float32, B*N*T*Dv)
	}
	msFillKV(kd, past, 0, qkv, B, N, S, P, D, tot, sizes[0])
	msFillKV(vd, past, 1, qkv, B, N, S, P, Dv, tot, sizes[0]+sizes[1])
	maskFn, err := msKeyMask(c.Input(3), abias, B, N, S, T, P, c.Int("unidirectional", 0) != 0, c.Float("mask_filter_value", -10000))
	if err != nil {
		return err
	}
	y := ar.NewUninit(tensor.Float32, []int{B, S, N * Dv})
	spec := attnSpec{B: B, Hq: N, Hkv: N, Sq: S, T: T, D: D, Dv: Dv,
		Q: viewBSHD(qkv, S, tot, D, 0), K: viewBHSD(kd, N, T, D), V: viewBHSD(vd, N, T, Dv),
		Y: viewBSHD(y.F32(), S, N*Dv, Dv, 0), Scale: msScale(c, D), Bias: maskFn}
	spec.observe(c)
	spec.run()
	c.Set(0, y)
	if present != nil {
		c.Set(1, present)
	}
	return nil
}

// msFillKV writes (B, N, P+S, D): past[which] (2, B, N, P, D) then the
// columns off… of the (B, S, rowLen) projection.
func msFillKV(dst []float32, past *tensor.Tensor, which int, proj []float32, B, N, S, P, D, rowLen, off int) {
	T := P + S
	for b := 0; b < B; b++ {
		for n := 0; n < N; n++ {
			o := dst[(b*N+n)*T*D:]
			if past != nil {
				src := past.F32()[(((which*B+b)*N+n)*P)*D:]
				copy(o[:P*D], src[:P*D])
			}
			for s := 0; s < S; s++ {
				copy(o[(P+s)*D:(P+s+1)*D], proj[(b*S+s)*rowLen+off+n*D:])
			}
		}
	}
}

// msProject returns x (B, S, H) plus bias[off:off+H] as a new slice (x itself without bias).
func msProject(x *tensor.Tensor, bias *tensor.Tensor, off int) []float32 {
	if bias == nil {
		return x.F32()
	}
	h := x.Shape[x.Rank()-1]
	out := make([]float32, x.Size())
	bd := bias.F32()[off : off+h]
	for i, v := range x.F32() {
		out[i] = v + bd[i%h]
	}
	return out
}

func msMHAKernel(c *Call) error {
	if err := c.Need(3); err != nil {
		return fmt.Errorf("%w (packed query/key/value forms are not supported)", err)
	}
	q, k, v, bias := c.In[0], c.In[1], c.In[2], c.Input(3)
	pk, pv, abias := c.Input(6), c.Input(7), c.Input(5)
	if err := msFloat32([]string{"query", "key", "value", "bias", "attention_bias", "past_key", "past_value"}, q, k, v, bias, abias, pk, pv); err != nil {
		return err
	}
	N := int(c.Int("num_heads", 0))
	if q.Rank() != 3 || N <= 0 || q.Shape[2]%N != 0 {
		return fmt.Errorf("query %v must be (B, S, N·D) with num_heads %d dividing its width", q.Shape, N)
	}
	B, S := q.Shape[0], q.Shape[1]
	D := q.Shape[2] / N
	var Dv, L, P int
	var kd, vd []float32
	ar := c.Arena()
	var presentK, presentV *tensor.Tensor
	switch {
	case k.Rank() == 4 && v.Rank() == 4:
		if k.Shape[0] != B || k.Shape[1] != N || k.Shape[3] != D || v.Shape[0] != B || v.Shape[1] != N || v.Shape[2] != k.Shape[2] {
			return fmt.Errorf("key %v / value %v are not (B, N, L, D) for query %v", k.Shape, v.Shape, q.Shape)
		}
		L, Dv = k.Shape[2], v.Shape[3]
		kd, vd = k.F32(), v.F32()
		presentK, presentV = k, v
	case k.Rank() == 3 && v.Rank() == 3:
		if k.Shape[0] != B || k.Shape[2] != N*D || v.Shape[0] != B || v.Shape[1] != k.Shape[1] || v.Shape[2]%N != 0 {
			return fmt.Errorf("key %v / value %v are not (B, L, N·D) for query %v", k.Shape, v.Shape, q.Shape)
		}
		L, Dv = k.Shape[1], v.Shape[2]/N
		if bias != nil && bias.Size() != 2*N*D+N*Dv {
			return fmt.Errorf("bias %v must have %d values (Q, K, V widths)", bias.Shape, 2*N*D+N*Dv)
		}
		if (pk == nil) != (pv == nil) {
			return fmt.Errorf("past_key and past_value must be given together")
		}
		if pk != nil {
			if pk.Rank() != 4 || pk.Shape[0] != B || pk.Shape[1] != N || pk.Shape[3] != D || pv.Rank() != 4 || pv.Shape[2] != pk.Shape[2] || pv.Shape[3] != Dv {
				return fmt.Errorf("past_key %v / past_value %v are not (B, N, P, D)", pk.Shape, pv.Shape)
			}
			P = pk.Shape[2]
		}
		T := P + L
		presentK = ar.NewUninit(tensor.Float32, []int{B, N, T, D})
		presentV = ar.NewUninit(tensor.Float32, []int{B, N, T, Dv})
		kp, vp := msProject(k, bias, N*D), msProject(v, bias, 2*N*D)
		msFillPast(presentK.F32(), pk, kp, B, N, L, P, D)
		msFillPast(presentV.F32(), pv, vp, B, N, L, P, Dv)
		kd, vd = presentK.F32(), presentV.F32()
	default:
		return fmt.Errorf("key %v and value %v must both be 3-D or both 4-D", k.Shape, v.Shape)
	}
	T := P + L
	qd := msProject(q, bias, 0)
	maskFn, err := msKeyMask(c.Input(4), abias, B, N, S, T, P, c.Int("unidirectional", 0) != 0, c.Float("mask_filter_value", -10000))
	if err != nil {
		return err
	}
	y := ar.NewUninit(tensor.Float32, []int{B, S, N * Dv})
	spec := attnSpec{B: B, Hq: N, Hkv: N, Sq: S, T: T, D: D, Dv: Dv,
		Q: viewBSHD(qd, S, N*D, D, 0), K: viewBHSD(kd, N, T, D), V: viewBHSD(vd, N, T, Dv),
		Y: viewBSHD(y.F32(), S, N*Dv, Dv, 0), Scale: msScale(c, D), Bias: maskFn}
	spec.observe(c)
	spec.run()
	c.Set(0, y)
	c.Set(1, presentK)
	c.Set(2, presentV)
	return nil
}

// msFillPast writes (B, N, P+L, D) = concat(past (B, N, P, D), cur (B, L, N·D)).
func msFillPast(dst []float32, past *tensor.Tensor, cur []float32, B, N, L, P, D int) {
	T := P + L
	for b := 0; b < B; b++ {
		for n := 0; n < N; n++ {
			o := dst[(b*N+n)*T*D:]
			if past != nil {
				copy(o[:P*D], past.F32()[(b*N+n)*P*D:])
			}
			for s := 0; s < L; s++ {
				copy(o[(P+s)*D:(P+s+1)*D], cur[(b*L+s)*N*D+n*D:])
			}
		}
	}
}

func msGQAKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	q, k, v := c.In[0], c.Input(1), c.Input(2)
	pk, pv := c.Input(3), c.Input(4)
	if err := msFloat32([]string{"query", "key", "value", "past_key", "past_value"}, q, k, v, pk, pv); err != nil {
		return err
	}
	if c.Int("smooth_softmax", 0) != 0 || c.Input(11) != nil {
		return fmt.Errorf("smooth_softmax and head_sink are not supported")
	}
	if c.Input(10) != nil {
		return fmt.Errorf("attention_bias is not supported")
	}
	Hq, Hkv := int(c.Int("num_heads", 0)), int(c.Int("kv_num_heads", 0))
	if Hq <= 0 || Hkv <= 0 || Hq%Hkv != 0 || q.Rank() != 3 {
		return fmt.Errorf("num_heads %d must be a positive multiple of kv_num_heads %d and query %v 3-D", Hq, Hkv, q.Shape)
	}
	B, S := q.Shape[0], q.Shape[1]
	var D int
	var qd, kd, vd []float32
	qRow, kvRow := 0, 0
	qOff, kOff, vOff := 0, 0, 0
	if k == nil {
		if q.Shape[2]%(Hq+2*Hkv) != 0 {
			return fmt.Errorf("packed query %v is not (B, S, (num_heads+2·kv_num_heads)·D)", q.Shape)
		}
		D = q.Shape[2] / (Hq + 2*Hkv)
		qd, kd, vd = q.F32(), q.F32(), q.F32()
		qRow, kvRow = q.Shape[2], q.Shape[2]
		kOff, vOff = Hq*D, (Hq+Hkv)*D
	} else {
		if v == nil || q.Shape[2]%Hq != 0 {
			return fmt.Errorf("query %v, key, value must be given as (B, S, heads·D)", q.Shape)
		}
		D = q.Shape[2] / Hq
		if k.Rank() != 3 || v.Rank() != 3 || k.Shape[0] != B || k.Shape[1] != S || k.Shape[2] != Hkv*D || !tensor.SameShape(k.Shape, v.Shape) {
			return fmt.Errorf("key %v / value %v are not (B, S, kv_num_heads·D) = (%d, %d, %d)", k.Shape, v.Shape, B, S, Hkv*D)
		}
		qd, kd, vd = q.F32(), k.F32(), v.F32()
		qRow, kvRow = Hq*D, Hkv*D
	}
	if c.Input(5) == nil || c.Input(6) == nil {
		return fmt.Errorf("seqlens_k and total_sequence_length are required")
	}
	seqlens := c.In[5].Ints()
	if len(seqlens) != B {
		return fmt.Errorf("seqlens_k %v must have batch size %d values", c.In[5].Shape, B)
	}
	total, err := ScalarInt(c.In[6])
	if err != nil {
		return fmt.Errorf("total_sequence_length: %w", err)
	}
	Pbuf := 0
	if pk != nil {
		if pv == nil || pk.Rank() != 4 || pk.Shape[0] != B || pk.Shape[1] != Hkv || pk.Shape[3] != D || !tensor.SameShape(pk.Shape, pv.Shape) {
			return fmt.Errorf("past_key %v / past_value are not (B, kv_num_heads, P, D) = (%d, %d, P, %d)", pk.Shape, B, Hkv, D)
		}
		Pbuf = pk.Shape[2]
	}
	T := max(Pbuf, total)
	pastLen := make([]int, B)
	for b := range pastLen {
		tb := seqlens[b] + 1
		if Pbuf > 0 {
			pastLen[b] = tb - S
		}
		if pastLen[b] < 0 || pastLen[b]+S > T || pastLen[b] > Pbuf {
			return fmt.Errorf("seqlens_k[%d] = %d does not fit %d new tokens, a past of %d and total_sequence_length %d", b, seqlens[b], S, Pbuf, total)
		}
	}
	// rotate Q and K (copies) when asked
	if c.Int("do_rotary", 0) != 0 {
		cosC, sinC := c.Input(7), c.Input(8)
		if cosC == nil || sinC == nil || cosC.Rank() != 2 {
			return fmt.Errorf("do_rotary needs 2-D cos_cache and sin_cache")
		}
		posIDs := c.Input(9)
		var pids []int
		if posIDs != nil {
			if pids = posIDs.Ints(); len(pids) != B*S {
				return fmt.Errorf("position_ids %v is not (B, S)", posIDs.Shape)
			}
		}
		pos := func(b, s int) int {
			if pids != nil {
				return pids[b*S+s]
			}
			return pastLen[b] + s
		}
		rot := func(d []float32, row, off, H int) ([]float32, error) {
			a := rotaryArgs{B: B, S: S, H: H, D: D, R: 2 * cosC.Shape[1], sB: S * row, sS: row, sH: D,
				interleaved: c.Int("rotary_interleaved", 0) != 0}
			if a.R > D {
				return nil, fmt.Errorf("cos_cache %v: rotary dimension %d exceeds the head size %d", cosC.Shape, a.R, D)
			}
			a.trig = func(b, s int) ([]float32, []float32, error) {
				cs, err := cacheRow(cosC, pos(b, s), "cos_cache")
				if err != nil {
					return nil, nil, err
				}
				sn, err := cacheRow(sinC, pos(b, s), "sin_cache")
				return cs, sn, err
			}
			out := make([]float32, len(d))
			copy(out, d)
			if err := a.run(out[off:], d[off:]); err != nil {
				return nil, err
			}
			return out, nil
		}
		if qd, err = rot(qd, qRow, qOff, Hq); err != nil {
			return err
		}
		if kd, err = rot(kd, kvRow, kOff, Hkv); err != nil {
			return err
		}
	}
	ar := c.Arena()
	presentK := ar.New(tensor.Float32, []int{B, Hkv, T, D})
	presentV := ar.New(tensor.Float32, []int{B, Hkv, T, D})
	for b := 0; b < B; b++ {
		for h := 0; h < Hkv; h++ {
			ok, ov := presentK.F32()[(b*Hkv+h)*T*D:], presentV.F32()[(b*Hkv+h)*T*D:]
			if pk != nil {
				n := pastLen[b] * D
				copy(ok[:n], pk.F32()[(b*Hkv+h)*Pbuf*D:])
				copy(ov[:n], pv.F32()[(b*Hkv+h)*Pbuf*D:])
			}
			for s := 0; s < S; s++ {
				src := (b*S+s)*kvRow + h*D
				copy(ok[(pastLen[b]+s)*D:(pastLen[b]+s+1)*D], kd[kOff+src:])
				copy(ov[(pastLen[b]+s)*D:(pastLen[b]+s+1)*D], vd[vOff+src:])
			}
		}
	}
	window := int(c.Int("local_window_size", -1))
	y := ar.NewUninit(tensor.Float32, []int{B, S, Hq * D})
	spec := attnSpec{B: B, Hq: Hq, Hkv: Hkv, Sq: S, T: T, D: D, Dv: D,
		Q: viewBSHD(qd, S, qRow, D, qOff), K: viewBHSD(presentK.F32(), Hkv, T, D), V: viewBHSD(presentV.F32(), Hkv, T, D),
		Y: viewBSHD(y.F32(), S, Hq*D, D, 0), Scale: msScale(c, D), Softcap: c.Float("softcap", 0),
		Bias: func(b, h, i int, s []float32) {
			last := pastLen[b] + i
			for j := range s {
				if j > last || j > seqlens[b] || (window > 0 && j <= last-window) {
					s[j] = negInf32
				}
			}
		}}
	spec.observe(c)
	spec.run()
	c.Set(0, y)
	c.Set(1, presentK)
	c.Set(2, presentV)
	return nil
}
