package stats

import (
	"math"
	"testing"

	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/tensor"
)

// Known answers of the normalised entropy H/ln K (Shannon entropy; a uniform
// distribution over K keys has H = ln K): a uniform head scores 1; a head
// with p = 1−ε on one key and ε/(K−1) on the others scores ≈ 0 (the exact
// value from the formula: H = −(1−ε)ln(1−ε) − ε ln(ε/(K−1))).
func TestAttentionEntropyKnownAnswers(t *testing.T) {
	const B, H, S = 2, 2, 6
	x := make([]float32, B*H*S*S)
	eps := 1e-6
	for b := 0; b < B; b++ {
		for i := 0; i < S; i++ {
			for j := 0; j < S; j++ {
				x[((b*H+0)*S+i)*S+j] = 1.0 / S // head 0 uniform
				v := eps / (S - 1)
				if j == (i+1)%S {
					v = 1 - eps
				}
				x[((b*H+1)*S+i)*S+j] = float32(v) // head 1 one-hot up to ε
			}
		}
	}
	a := newAttnAcc(H)
	a.observe(tensor.From(x, B, H, S, S))
	ent := a.entropy()
	if math.Abs(ent[0]-1) > 1e-6 {
		t.Errorf("uniform head: entropy %.8f, want 1", ent[0])
	}
	e32 := float64(float32(eps / (S - 1)))
	p1 := float64(float32(1 - eps))
	want := (-p1*math.Log(p1) - (S-1)*e32*math.Log(e32)) / math.Log(S)
	if math.Abs(ent[1]-want) > 1e-9 || ent[1] > 1e-4 {
		t.Errorf("one-hot head: entropy %.3g, want %.3g (≈ 0)", ent[1], want)
	}
	if mp := a.maxProb(); math.Abs(mp[0]-1.0/S) > 1e-7 || math.Abs(mp[1]-(1-eps)) > 1e-6 {
		t.Errorf("max probabilities %v", mp)
	}
	// masked keys (probability 0) are left out of K: a uniform row over the
	// 3 unmasked of 6 keys still scores 1; a row with one key left out
	y := []float32{1.0 / 3, 1.0 / 3, 1.0 / 3, 0, 0, 0, 1, 0, 0, 0, 0, 0}
	m := newAttnAcc(1)
	m.observe(tensor.From(y, 1, 2, 6))
	if e := m.entropy(); math.Abs(e[0]-1) > 1e-6 || m.oneHot[0] != 1 || m.entN[0] != 1 {
		t.Errorf("masked rows: entropy %v, one-hot rows %d, rows used %d", e, m.oneHot[0], m.entN[0])
	}
}

// Merging two accumulators equals observing both batches in one (the
// statistics are sums and counts).
func TestTransformerAccMerge(t *testing.T) {
	mk := func(seed int, n int) *tensor.Tensor {
		x := make([]float32, n*4*16)
		s := uint32(seed)
		for i := range x {
			s = s*1664525 + 1013904223
			x[i] = (float32(s>>8)/float32(1<<24) - 0.5) * 20
		}
		return tensor.From(x, n, 4, 16)
	}
	a, b := mk(1, 3), mk(2, 5)
	whole := newResidAcc(16)
	whole.observe(tensor.From(append(append([]float32{}, a.F32()...), b.F32()...), 8, 4, 16))
	p, q := newResidAcc(16), newResidAcc(16)
	p.observe(a)
	q.observe(b)
	p.merge(q)
	if p.maxAbs != whole.maxAbs || p.median() != whole.median() || math.Abs(p.simSum-whole.simSum) > 1e-12 || p.simN != whole.simN ||
		p.positions != whole.positions {
		t.Fatalf("merged %+v, whole %+v", p, whole)
	}
	for d := range p.over6 {
		if p.over6[d] != whole.over6[d] {
			t.Fatalf("dim %d: merged %d, whole %d", d, p.over6[d], whole.over6[d])
		}
	}
	// median from the histogram within 1.1% of NumPy-style exact median (half a bin of 2^(1/32))
	all := append(append([]float32{}, a.F32()...), b.F32()...)
	abs := make([]float64, len(all))
	for i, v := range all {
		abs[i] = math.Abs(float64(v))
	}
	exact := quantileSorted(abs)
	if math.Abs(whole.median()/exact-1) > 0.011 {
		t.Errorf("median %g, exact %g", whole.median(), exact)
	}
}

// quantileSorted returns the lower median (the ⌈n/2⌉-th smallest) of v.
func quantileSorted(v []float64) float64 {
	s := append([]float64{}, v...)
	for i := 1; i < len(s); i++ {
		for j := i; j > 0 && s[j] < s[j-1]; j-- {
			s[j], s[j-1] = s[j-1], s[j]
		}
	}
	return s[(len(s)+1)/2-1]
}

func residLayer(node string, idx int, sim, ratio float64) report.Layer {
	l := report.Layer{Node: node, Op: "Add", Min: report.Num(-1), Max: report.Num(ratio)}
	l.MedianAbs, l.MaxOverMedian = report.Num(1), report.Num(ratio)
	l.Structure, l.Block, l.ResidualIndex, l.TokenSimilarity = "residual-stream", report.IntPtr(idx/2), report.IntPtr(idx), report.Num(sim)
	d := []int{}
	l.OutlierDims = &d
	return l
}

// token-similarity (Dong et al. 2021): a stream whose last tensor reaches
// the thresholds (common practice 0.9 / 0.99, rise 0.2) is reported on that
// tensor; one carrying massive activations only as information.
func TestTokenSimilarityCheck(t *testing.T) {
	for _, tc := range []struct {
		first, last, ratio float64
		want               report.Severity
	}{{0.1, 0.5, 5, ""}, {0.1, 0.93, 5, report.Warning}, {0.1, 0.995, 5, report.Error}, {0.85, 0.95, 5, ""}, {0.1, 0.995, 5000, report.Info}} {
		r := &report.Report{Layers: []report.Layer{residLayer("r0", 0, tc.first, tc.ratio), residLayer("r1", 1, (tc.first+tc.last)/2, tc.ratio), residLayer("r2", 2, tc.last, tc.ratio)}}
		fs := checkOn(t, tokenSimilarityCheck, &Collected{Report: r}, nil)
		switch {
		case tc.want == "" && len(fs) != 0:
			t.Errorf("%v: unexpected %v", tc, fs)
		case tc.want != "" && (len(fs) != 1 || fs[0].Severity != tc.want || fs[0].Node != "r2"):
			t.Errorf("%v: got %v, want one %s on r2", tc, fs, tc.want)
		}
	}
}

// attention-uniform is information only and names block and head; a head
// at 0.98 is not reported, 0.995 is.
func TestAttentionUniformCheck(t *testing.T) {
	l := report.Layer{Node: "sm", Op: "Softmax"}
	l.Structure, l.Block, l.AttentionEntropy = "attention-probabilities", report.IntPtr(3), []float64{0.98, 0.995}
	fs := checkOn(t, attentionUniformCheck, &Collected{Report: &report.Report{Layers: []report.Layer{l}}}, nil)
	if len(fs) != 1 || fs[0].Severity != report.Info || fs[0].Evidence["block"] != 3 || fs[0].Evidence["head"] != 1 {
		t.Fatalf("got %v", fs)
	}
}
