package check_test

// The transformer statistics and checks on the generated models of
// testdata/gen/transformer_models.py (torch 1.13 export; goldens computed
// there with NumPy from the tensors the eager torch model exposes).

import (
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/check"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/tensor"
)

type tfGolden struct {
	Blocks []struct {
		Block            int       `json:"block"`
		AttentionEntropy []float64 `json:"attention_entropy"`
		AttentionMaxProb []float64 `json:"attention_max_prob"`
		OneHotRows       []int64   `json:"one_hot_rows"`
		Residual         []struct {
			MaxAbs          float64 `json:"max_abs"`
			MedianAbs       float64 `json:"median_abs"`
			MaxOverMedian   float64 `json:"max_over_median"`
			OutlierDims     []int   `json:"outlier_dims"`
			TokenSimilarity float64 `json:"token_similarity"`
		} `json:"residual"`
	} `json:"blocks"`
}

func runTF(t *testing.T, name string, batch int) *report.Report {
	t.Helper()
	return runTFOn(t, name, name, batch)
}

// runTFOn checks testdata/transformer/model.onnx on sample.input.npy.
func runTFOn(t *testing.T, model, sample string, batch int) *report.Report {
	t.Helper()
	m, err := check.Load("../testdata/transformer/"+model+".onnx", check.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	r, err := check.Check(context.Background(), m, check.Sample{Data: []string{"../testdata/transformer/" + sample + ".input.npy"}, Batch: batch}, check.Options{})
	if err != nil {
		t.Fatal(err)
	}
	return r
}

func tfRole(r *report.Report, role string) []report.Layer {
	var out []report.Layer
	for _, l := range r.Layers {
		if l.Structure == role {
			out = append(out, l)
		}
	}
	return out
}

// Statistics against the NumPy goldens: entropy and max probability within
// 1e-4 absolute, residual max |x| within 1e-4 relative, the median (read
// from the 32-bins-per-octave histogram) within 1.5%, outlier dims exactly,
// token similarity within 1e-4.
func TestTransformerStatsMatchGolden(t *testing.T) {
	for _, name := range []string{"decoder_causal", "encoder_padding", "collapsed_head", "massive_activation", "torch_encoder"} {
		t.Run(name, func(t *testing.T) {
			var g tfGolden
			b, err := os.ReadFile("../testdata/transformer/" + name + ".golden.json")
			if err != nil {
				t.Fatal(err)
			}
			if err := json.Unmarshal(b, &g); err != nil {
				t.Fatal(err)
			}
			r := runTF(t, name, 0)
			attn := tfRole(r, "attention-probabilities")
			res := tfRole(r, "residual-stream")
			if len(attn) != len(g.Blocks) || len(res) != 2*len(g.Blocks) {
				t.Fatalf("found %d attention blocks and %d residual tensors, want %d and %d", len(attn), len(res), len(g.Blocks), 2*len(g.Blocks))
			}
			for _, l := range attn {
				gb := g.Blocks[*l.Block]
				for h := range gb.AttentionEntropy {
					if d := math.Abs(l.AttentionEntropy[h] - gb.AttentionEntropy[h]); d > 1e-4 {
						t.Errorf("block %d head %d: entropy %.6f, NumPy %.6f", *l.Block, h, l.AttentionEntropy[h], gb.AttentionEntropy[h])
					}
					if d := math.Abs(l.AttentionMaxProb[h] - gb.AttentionMaxProb[h]); d > 1e-4 {
						t.Errorf("block %d head %d: max prob %.6f, NumPy %.6f", *l.Block, h, l.AttentionMaxProb[h], gb.AttentionMaxProb[h])
					}
				}
				if !reflect.DeepEqual(l.AttentionOneHotRows, gb.OneHotRows) {
					t.Errorf("block %d: one-hot rows %v, NumPy %v", *l.Block, l.AttentionOneHotRows, gb.OneHotRows)
				}
			}
			for _, l := range res {
				i := *l.ResidualIndex
				gr := g.Blocks[i/2].Residual[i%2]
				mx := math.Max(-*l.Min, *l.Max)
				if math.Abs(mx-gr.MaxAbs) > 1e-4*gr.MaxAbs {
					t.Errorf("residual %d (%s): max |x| %g, NumPy %g", i, l.Node, mx, gr.MaxAbs)
				}
				if math.Abs(*l.MedianAbs-gr.MedianAbs) > 0.015*gr.MedianAbs || math.Abs(*l.MaxOverMedian-gr.MaxOverMedian) > 0.015*gr.MaxOverMedian {
					t.Errorf("residual %d (%s): median %g ratio %g, NumPy %g and %g", i, l.Node, *l.MedianAbs, *l.MaxOverMedian, gr.MedianAbs, gr.MaxOverMedian)
				}
				if gr.OutlierDims == nil {
					gr.OutlierDims = []int{}
				}
				if !reflect.DeepEqual(*l.OutlierDims, gr.OutlierDims) {
					t.Errorf("residual %d (%s): outlier dims %v, NumPy %v", i, l.Node, *l.OutlierDims, gr.OutlierDims)
				}
				if math.Abs(*l.TokenSimilarity-gr.TokenSimilarity) > 1e-4 {
					t.Errorf("residual %d (%s): token similarity %.6f, NumPy %.6f", i, l.Node, *l.TokenSimilarity, gr.TokenSimilarity)
				}
				if *l.Block != i/2 {
					t.Errorf("residual %d (%s) is in block %d, want %d", i, l.Node, *l.Block, i/2)
				}
			}
		})
	}
}

// The structure: masks detected as they were built, normalisation layers
// found in both their fused and decomposed forms, the −inf of the masks not
// reported as non-finite.
func TestTransformerStructure(t *testing.T) {
	dec := runTF(t, "decoder_causal", 0)
	for _, l := range tfRole(dec, "attention-probabilities") {
		if !strings.HasPrefix(l.AttentionMask, "causal") {
			t.Errorf("decoder %s: mask %q, want causal", l.Node, l.AttentionMask)
		}
	}
	if n := len(tfRole(dec, "normalisation (decomposed RMS)")); n != 6 {
		t.Errorf("decoder: %d decomposed RMS normalisations, want 6", n)
	}
	for _, f := range dec.Findings {
		if f.Severity != report.Info {
			t.Errorf("healthy decoder: unexpected %s %s on %s: %s", f.Severity, f.Check, f.Node, f.Message)
		}
	}
	masked := int64(0)
	for _, l := range tfRole(dec, "attention-scores") {
		masked += l.MaskedValues
	}
	// 24 sequences × 4 heads × (8·7/2) masked keys per block, 3 blocks
	if masked != 3*24*4*28 {
		t.Errorf("decoder: %d masked score values, want %d", masked, 3*24*4*28)
	}
	enc := runTF(t, "encoder_padding", 0)
	for _, l := range tfRole(enc, "attention-probabilities") {
		if !strings.HasPrefix(l.AttentionMask, "padding") {
			t.Errorf("encoder %s: mask %q, want padding", l.Node, l.AttentionMask)
		}
	}
	if n := len(tfRole(enc, "normalisation (LayerNormalization)")); n != 6 {
		t.Errorf("encoder: %d LayerNormalization layers, want 6", n)
	}
	// the same network exported at opset 15: LayerNorm written out, same heads
	old := runTFOn(t, "encoder_padding_opset15", "encoder_padding", 0)
	if n := len(tfRole(old, "normalisation (decomposed LayerNorm)")); n != 6 {
		t.Errorf("encoder at opset 15: %d decomposed LayerNorms, want 6", n)
	}
	a, b := tfRole(enc, "attention-probabilities"), tfRole(old, "attention-probabilities")
	if len(a) != 3 || len(b) != 3 {
		t.Fatalf("attention blocks: %d at opset 17, %d at opset 15", len(a), len(b))
	}
	for i := range a {
		for h := range a[i].AttentionEntropy {
			if math.Abs(a[i].AttentionEntropy[h]-b[i].AttentionEntropy[h]) > 1e-4 {
				t.Errorf("block %d head %d: entropy %.6f at opset 17, %.6f at opset 15", i, h, a[i].AttentionEntropy[h], b[i].AttentionEntropy[h])
			}
		}
	}
	for _, f := range enc.Findings {
		if f.Severity != report.Info {
			t.Errorf("healthy encoder: unexpected %s %s on %s: %s", f.Severity, f.Check, f.Node, f.Message)
		}
	}
}

// The pathologies are found where they were put, at rank 1.
func TestTransformerFindingsAtRankOne(t *testing.T) {
	r := runTF(t, "collapsed_head", 0)
	if len(r.Ranking) == 0 || r.Ranking[0].Node != "/blocks.1/Softmax" {
		t.Fatalf("collapsed_head: ranking %v, want /blocks.1/Softmax first", r.Ranking)
	}
	var heads []any
	for _, f := range r.Findings {
		if f.Check == "attention-collapse" {
			heads = append(heads, []any{f.Evidence["block"], f.Evidence["head"]})
		}
	}
	if !reflect.DeepEqual(heads, []any{[]any{1, 2}}) {
		t.Errorf("collapsed_head: attention-collapse on (block, head) %v, want only (1, 2)", heads)
	}

	r = runTF(t, "massive_activation", 0)
	if len(r.Ranking) == 0 || r.Ranking[0].Node != "/blocks.1/Add_2" {
		t.Fatalf("massive_activation: ranking %v, want /blocks.1/Add_2 (block 1's MLP residual) first", r.Ranking)
	}
	got := map[string]bool{}
	for _, f := range r.Findings {
		if f.Node == "/blocks.1/Add_2" && f.Severity == report.Warning {
			got[f.Check] = true
			if f.Check == "outlier-features" && !reflect.DeepEqual(f.Evidence["dims"], []int{5}) {
				t.Errorf("outlier-features dims %v, want [5]", f.Evidence["dims"])
			}
			if f.Evidence["block"] != 1 {
				t.Errorf("%s: block %v, want 1", f.Check, f.Evidence["block"])
			}
		}
	}
	if !got["massive-activations"] || !got["outlier-features"] {
		t.Errorf("massive_activation: warnings on /blocks.1/Add_2 %v, want massive-activations and outlier-features", got)
	}
}

// Mergeable: the statistics do not depend on how the sample is split into
// batches; torch_encoder's probabilities are one (B·H, S, S) tensor, whose
// heads are found from the batch size whatever it is.
func TestTransformerStatsBatchIndependent(t *testing.T) {
	for _, name := range []string{"encoder_padding", "torch_encoder"} {
		tfSameStats(t, runTF(t, name, 24), runTF(t, name, 5))
		tfSameStats(t, runTF(t, name, 1), runTF(t, name, 8))
	}
}

func tfSameStats(t *testing.T, a, b *report.Report) {
	t.Helper()
	for i, l := range a.Layers {
		m := b.Layers[i]
		for h := range l.AttentionEntropy {
			if math.Abs(l.AttentionEntropy[h]-m.AttentionEntropy[h]) > 1e-12 {
				t.Errorf("%s head %d: entropy %v at batch 24, %v at batch 5", l.Node, h, l.AttentionEntropy[h], m.AttentionEntropy[h])
			}
		}
		if l.TokenSimilarity != nil && math.Abs(*l.TokenSimilarity-*m.TokenSimilarity) > 1e-12 {
			t.Errorf("%s: token similarity differs between batch sizes", l.Node)
		}
		if l.MedianAbs != nil && *l.MedianAbs != *m.MedianAbs {
			t.Errorf("%s: median differs between batch sizes", l.Node)
		}
	}
}

// A fused ONNX Attention node (is_causal, 4 query heads over 2 kv heads)
// hands its probabilities to the statistics: with Q = 0 every query attends
// uniformly to the keys the causal mask leaves it, so each head's
// normalised entropy is exactly 1 (known answer: H = ln K for a uniform
// row) and the first row of each sequence (K = 1) is a one-hot row.
func TestFusedAttentionHeads(t *testing.T) {
	dir := t.TempDir()
	rnd := func(n int) []float32 {
		x := make([]float32, n)
		s := uint32(7)
		for i := range x {
			s = s*1664525 + 1013904223
			x[i] = float32(s>>8)/float32(1<<24) - 0.5
		}
		return x
	}
	write := func(name string, x *tensor.Tensor) string {
		p := filepath.Join(dir, name+".npy")
		f, err := os.Create(p)
		if err != nil {
			t.Fatal(err)
		}
		defer f.Close()
		if err := loader.WriteNpy(f, x); err != nil {
			t.Fatal(err)
		}
		return name + "=" + p
	}
	data := []string{write("Q", tensor.New(tensor.Float32, []int{6, 4, 5, 8})),
		write("K", tensor.From(rnd(6*2*5*8), 6, 2, 5, 8)), write("V", tensor.From(rnd(6*2*5*8), 6, 2, 5, 8))}
	m, err := check.Load("../testdata/transformer/ops/attention_4d_causal_gqa.onnx", check.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	r, err := check.Check(context.Background(), m, check.Sample{Data: data, Batch: 2}, check.Options{})
	if err != nil {
		t.Fatal(err)
	}
	var found bool
	for _, l := range r.Layers {
		if l.Structure != "attention (fused)" {
			continue
		}
		found = true
		if len(l.AttentionEntropy) != 4 || !strings.HasPrefix(l.AttentionMask, "causal") {
			t.Fatalf("%s: entropy %v, mask %q", l.Node, l.AttentionEntropy, l.AttentionMask)
		}
		for h, e := range l.AttentionEntropy {
			if math.Abs(e-1) > 1e-6 || l.AttentionOneHotRows[h] != 6 {
				t.Errorf("head %d: entropy %.8f (want 1), one-hot rows %d (want 6)", h, e, l.AttentionOneHotRows[h])
			}
		}
	}
	if !found {
		t.Fatal("no fused attention entry in the report")
	}
}

// The attention, outlier-feature and token-similarity findings of every generated model are
// the ones its NumPy golden statistics (testdata/gen/transformer_models.py)
// predict under the checks' default thresholds: attention-collapse for each
// head whose mean normalised entropy is under 0.2 (error under 0.1; common
// practice, Zhai et al. 2023 give no fixed line), attention-uniform for each
// head at or above 0.99 (common practice), and outlier-features for each
// feature dimension with |x| ≥ 6 at ≥ 6% of positions in ≥ 25% of the
// residual tensors (Dettmers et al. 2022), reported on the first tensor that
// has it; token-similarity when the last residual tensor's mean token cosine
// is ≥ 0.9 (error ≥ 0.99) and ≥ 0.2 above the first (common practice after
// Dong et al. 2021), as information when that tensor carries massive
// activations (max/median ≥ 1000, Sun et al. 2024). A value within 1e-3 of
// a line is not predicted either way.
func TestTransformerFindingsPredictedByGolden(t *testing.T) {
	type key struct {
		check    string
		block    int
		head     int
		severity report.Severity
	}
	const collapseWarn, collapseErr, uniform, layerShare = 0.2, 0.1, 0.99, 0.25
	near := func(x, line float64) bool { return math.Abs(x-line) < 1e-3 }
	total := map[string]int{}
	for _, name := range []string{"decoder_causal", "encoder_padding", "collapsed_head", "massive_activation", "torch_encoder"} {
		var g tfGolden
		b, err := os.ReadFile("../testdata/transformer/" + name + ".golden.json")
		if err != nil {
			t.Fatal(err)
		}
		if err := json.Unmarshal(b, &g); err != nil {
			t.Fatal(err)
		}
		want, skip := map[key]bool{}, map[key]bool{}
		for _, gb := range g.Blocks {
			for h, e := range gb.AttentionEntropy {
				switch {
				case near(e, collapseWarn) || near(e, collapseErr) || near(e, uniform):
					skip[key{"attention-collapse", gb.Block, h, ""}], skip[key{"attention-uniform", gb.Block, h, ""}] = true, true
				case e < collapseErr:
					want[key{"attention-collapse", gb.Block, h, report.Error}] = true
				case e < collapseWarn:
					want[key{"attention-collapse", gb.Block, h, report.Warning}] = true
				case e >= uniform:
					want[key{"attention-uniform", gb.Block, h, report.Info}] = true
				}
			}
		}
		// outlier dims: residual tensors in order (two per block), dims shared by ≥ 25% of them
		var dimsAt [][]int
		for _, gb := range g.Blocks {
			for _, gr := range gb.Residual {
				dimsAt = append(dimsAt, gr.OutlierDims)
			}
		}
		layers, first := map[int]int{}, map[int]int{}
		for i, ds := range dimsAt {
			for _, d := range ds {
				if layers[d] == 0 {
					first[d] = i
				}
				layers[d]++
			}
		}
		wantDims := map[int][]int{} // residual index → dims reported there
		for d, n := range layers {
			if float64(n)/float64(len(dimsAt)) >= layerShare {
				wantDims[first[d]] = append(wantDims[first[d]], d)
			}
		}
		// token similarity: the first and the last residual tensor
		type simAt struct {
			index    int
			severity report.Severity
		}
		var wantSim []simAt
		const simWarn, simErr, simRise, massive = 0.9, 0.99, 0.2, 1000
		res := g.Blocks[len(g.Blocks)-1].Residual
		a, last := g.Blocks[0].Residual[0].TokenSimilarity, res[len(res)-1]
		if bb := last.TokenSimilarity; !near(bb, simWarn) && !near(bb, simErr) && !near(bb-a, simRise) && bb >= simWarn && bb-a >= simRise {
			sev := report.Warning
			if bb >= simErr {
				sev = report.Error
			}
			if last.MaxOverMedian >= massive {
				sev = report.Info
			}
			wantSim = append(wantSim, simAt{len(dimsAt) - 1, sev})
		}
		r := runTF(t, name, 0)
		resIdx := map[string]int{}
		for _, l := range tfRole(r, "residual-stream") {
			resIdx[l.Node] = *l.ResidualIndex
		}
		got, gotDims := map[key]bool{}, map[int][]int{}
		var gotSim []simAt
		for _, f := range r.Findings {
			switch f.Check {
			case "token-similarity":
				gotSim = append(gotSim, simAt{resIdx[f.Node], f.Severity})
			case "attention-collapse", "attention-uniform":
				k := key{f.Check, f.Evidence["block"].(int), f.Evidence["head"].(int), f.Severity}
				if !skip[key{f.Check, k.block, k.head, ""}] {
					got[k] = true
				}
			case "outlier-features":
				dims := append([]int(nil), f.Evidence["dims"].([]int)...)
				gotDims[resIdx[f.Node]] = dims
			}
		}
		if !reflect.DeepEqual(got, want) {
			t.Errorf("%s: attention findings (check, block, head, severity) %v, the golden entropies predict %v", name, keys(got), keys(want))
		}
		for i := range wantDims {
			sortInts(wantDims[i])
		}
		if len(gotDims) != len(wantDims) || (len(wantDims) > 0 && !reflect.DeepEqual(gotDims, wantDims)) {
			t.Errorf("%s: outlier-features dims by residual tensor %v, the golden outlier dims predict %v", name, gotDims, wantDims)
		}
		if !reflect.DeepEqual(gotSim, wantSim) {
			t.Errorf("%s: token-similarity (residual index, severity) %v, the golden similarities predict %v", name, gotSim, wantSim)
		}
		for k := range want {
			total[k.check]++
		}
		total["outlier-features"] += len(wantDims)
		total["token-similarity"] += len(wantSim)
	}
	// the models were generated so that each check has something to find
	for _, c := range []string{"attention-collapse", "attention-uniform", "outlier-features", "token-similarity"} {
		if total[c] == 0 {
			t.Errorf("no model's golden predicts %s: the test would not notice the check missing", c)
		}
	}
}

func keys[K comparable](m map[K]bool) []K {
	var out []K
	for k := range m {
		out = append(out, k)
	}
	return out
}

func sortInts(s []int) {
	for i := 1; i < len(s); i++ {
		for j := i; j > 0 && s[j] < s[j-1]; j-- {
			s[j], s[j-1] = s[j-1], s[j]
		}
	}
}
