package probe

import (
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Scaled dot-product attention shared by the fused attention operators
// (ONNX Attention, com.microsoft Attention, MultiHeadAttention,
// GroupQueryAttention).
//
// For every batch b and query head h, with kv head g = h / (Hq/Hkv):
//
//	S = scale · Q[b,h] · K[b,g]ᵀ                (Sq × T)
//	S = softcap · tanh(S / softcap)             (only when softcap > 0)
//	S = S + bias[b,h]                           (masks as 0 / −∞ or additive terms)
//	P = softmax(S) along the key axis           (a row whose keys are all −∞ gives 0s)
//	Y[b,h] = P · V[b,g]                         (Sq × Dv)
//
// Q, K, V and Y are float32 and read through strides, so that both the
// (B, H, S, D) and the (B, S, H·D) layouts need no copy.

// attnView addresses the rows of one (batch, head) matrix inside a tensor:
// row r of head h in batch b starts at b·sB + h·sH + r·sS.
type attnView struct {
	d          []float32
	sB, sH, sS int
}

func (v attnView) at(b, h int) []float32 { return v.d[b*v.sB+h*v.sH:] }

// viewBHSD views a (B, H, S, D) contiguous tensor.
func viewBHSD(d []float32, h, s, dim int) attnView {
	return attnView{d, h * s * dim, s * dim, dim}
}

// viewBSHD views a (B, S, H·D) tensor (head h occupies columns h·D…h·D+D−1);
// off is a column offset for packed layouts whose rows are wider than H·D.
func viewBSHD(d []float32, s, rowLen, dim, off int) attnView {
	return attnView{d[off:], s * rowLen, dim, rowLen}
}

// attnSpec is one attention computation.
type attnSpec struct {
	B, Hq, Hkv, Sq, T, D, Dv int
	Q, K, V, Y               attnView
	Scale, Softcap           float32
	// Bias adds the mask of row i of (b, h) to s (length T); nil: no mask.
	Bias func(b, h, i int, s []float32)
	// Probs, when not nil, receives P as (B, Hq, Sq, T).
	Probs []float32
	// QK, when not nil, receives the scores as (B, Hq, Sq, T) at stage
	// QKStage: 0 after softcap, 1 after the mask, 2 after the softmax.
	QK      []float32
	QKStage int
}

// observe makes run keep the probabilities for the hook when the run has
// one (Call.Observe): a (B, Hq, Sq, T) tensor after the node's outputs,
// where statistics of the fused operator's heads can see them.
func (a *attnSpec) observe(c *Call) {
	if c.Observing() && a.Probs == nil {
		t := tensor.New(tensor.Float32, []int{a.B, a.Hq, a.Sq, a.T})
		a.Probs = t.F32()
		c.Observe(t)
	}
}

// run computes Y (and Probs/QK when asked).
func (a *attnSpec) run() {
	grp := 1
	if a.Hkv > 0 && a.Hq > a.Hkv {
		grp = a.Hq / a.Hkv
	}
	block := a.Sq * a.T
	s := make([]float32, block)
	for b := 0; b < a.B; b++ {
		for h := 0; h < a.Hq; h++ {
			g := h / grp
			if block > 0 && a.D > 0 {
				linGemm(false, true, a.Sq, a.T, a.D, a.Scale, a.Q.at(b, h), a.Q.sS, a.K.at(b, g), a.K.sS, 0, s, a.T)
			} else {
				clear(s)
			}
			qk := func(stage int) {
				if a.QK != nil && a.QKStage == stage {
					copy(a.QK[(b*a.Hq+h)*block:], s)
				}
			}
			if a.Softcap > 0 {
				c := float64(a.Softcap)
				for i, v := range s {
					s[i] = float32(c * math.Tanh(float64(v)/c))
				}
			}
			qk(0)
			if a.Bias != nil {
				for i := 0; i < a.Sq; i++ {
					a.Bias(b, h, i, s[i*a.T:(i+1)*a.T])
				}
			}
			qk(1)
			for i := 0; i < a.Sq; i++ {
				attnSoftmaxRow(s[i*a.T : (i+1)*a.T])
			}
			qk(2)
			if a.Probs != nil {
				copy(a.Probs[(b*a.Hq+h)*block:], s)
			}
			y := a.Y.at(b, h)
			if a.T == 0 {
				for i := 0; i < a.Sq; i++ {
					clear(y[i*a.Y.sS : i*a.Y.sS+a.Dv])
				}
				continue
			}
			linGemm(false, false, a.Sq, a.Dv, a.T, 1, s, a.T, a.V.at(b, g), a.V.sS, 0, y, a.Y.sS)
		}
	}
}

// attnSoftmaxRow replaces s by softmax(s); a row with no finite maximum
// (every key masked with −∞) becomes all zeros instead of NaN.
func attnSoftmaxRow(s []float32) {
	if len(s) == 0 {
		return
	}
	mx := float32(math.Inf(-1))
	for _, v := range s {
		if v > mx {
			mx = v
		}
	}
	if math.IsInf(float64(mx), -1) || mx != mx {
		clear(s)
		return
	}
	k0, sum := softmaxExpVec(s, s, mx)
	for k := k0; k < len(s); k++ {
		e := expNonPos(float64(s[k] - mx))
		s[k] = float32(e)
		sum += e
	}
	r := 1 / sum
	for k := range s {
		s[k] = float32(float64(s[k]) * r)
	}
}

// negInf32 is float32 −∞, the additive mask of a key that may not be attended.
var negInf32 = float32(math.Inf(-1))
