package stats_test

// Minimal models reproducing each class of false alarm of issue 15 (on
// trained models that work): each must give no warning or error, and where
// a control shows the same check still firing on a genuine problem, that
// control sits beside it.

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/stats"
	"github.com/vitals-health/vitals/tensor"
)

func fillT(shape []int, f func(i int) float32) *tensor.Tensor {
	t := tensor.New(tensor.Float32, shape)
	for i := range t.F32() {
		t.F32()[i] = f(i)
	}
	return t
}

func randInit(b *modelbuild.Builder, rng *rand.Rand, name string, shape []int, std float64) {
	n := 1
	for _, d := range shape {
		n *= d
	}
	w := make([]float32, n)
	for i := range w {
		w[i] = float32(rng.NormFloat64() * std)
	}
	b.Init(name, shape, w)
}

// alarms are the warning and error findings of a report.
func alarms(r *report.Report) []report.Finding {
	var out []report.Finding
	for _, f := range r.Findings {
		if f.Severity != report.Info {
			out = append(out, f)
		}
	}
	return out
}

func batchesOf(rng *rand.Rand, k int, f func() *tensor.Tensor) []*tensor.Tensor {
	out := make([]*tensor.Tensor, k)
	for i := range out {
		out[i] = f()
	}
	return out
}

// Folded BatchNorm: a convolution whose weights carry the BatchNorm scale
// (gain 8× He's √2, He et al. 2015) and feeds a healthy ReLU is no finding;
// its gain is evidence in the weights table.
func TestFalseAlarmFoldedBNConv(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 1))
	b := modelbuild.New("folded", 13)
	b.Input("x", []int{1, 3, 8, 8}, true)
	randInit(b, rng, "w1", []int{8, 3, 3, 3}, 8*math.Sqrt(2.0/27))
	randInit(b, rng, "w2", []int{4, 8, 1, 1}, math.Sqrt(2.0/8))
	b.Node("Conv", "conv1", []string{"x", "w1"}, []string{"c1"}, modelbuild.Attr{Name: "pads", Value: []int64{1, 1, 1, 1}})
	b.Node("Relu", "relu1", []string{"c1"}, []string{"r1"})
	b.Node("Conv", "conv2", []string{"r1", "w2"}, []string{"c2"})
	b.Node("GlobalAveragePool", "gap", []string{"c2"}, []string{"y"})
	b.Output("y")
	r := analyze(t, b, batchesOf(rng, 8, func() *tensor.Tensor { return gaussian(rng, 1, 16, 3, 8, 8) })...)
	if a := alarms(r); len(a) != 0 {
		t.Fatalf("folded-BN conv: %+v, want no warning or error", a)
	}
	for _, w := range r.Weights {
		if w.Name == "w1" && (w.Gain == nil || *w.Gain < 8) {
			t.Errorf("weights table: w1 gain %v, want ≈ 11 shown as evidence", w.Gain)
		}
	}
}

// seModel is x [N,8,4,4] → squeeze (GlobalAveragePool) → 1×1 conv with the
// given biases → HardSigmoid gate → Mul with x → 1×1 projection → pool: a
// squeeze-and-excitation block as mobile CNNs use it. Biases of ±10 pin a gate channel at 0 or 1.
func seModel(rng *rand.Rand, bias []float32) *modelbuild.Builder {
	b := modelbuild.New("se", 13)
	b.Input("x", []int{1, 8, 4, 4}, true)
	randInit(b, rng, "wse", []int{8, 8, 1, 1}, 0.05)
	b.Init("bse", []int{8}, bias)
	b.Node("GlobalAveragePool", "squeeze", []string{"x"}, []string{"s"})
	b.Node("Conv", "excite", []string{"s", "wse", "bse"}, []string{"e"})
	b.Node("HardSigmoid", "gate", []string{"e"}, []string{"g"}, modelbuild.Attr{Name: "alpha", Value: float32(1.0 / 6)})
	b.Node("Mul", "scale", []string{"x", "g"}, []string{"m"})
	randInit(b, rng, "wproj", []int{4, 8, 1, 1}, math.Sqrt(1.0/8))
	b.Node("Conv", "project", []string{"m", "wproj"}, []string{"p"})
	b.Node("GlobalAveragePool", "pool", []string{"p"}, []string{"y"})
	b.Output("y")
	return b
}

// A squeeze-and-excitation gate with two channels switched off and two
// passed through is a gate, not a saturated hidden unit: no saturation
// finding, the counts as information; a gate constant in every channel is a
// warning (gate-constant).
func TestFalseAlarmSEGate(t *testing.T) {
	rng := rand.New(rand.NewPCG(22, 1))
	in := func() *tensor.Tensor { return gaussian(rng, 1, 16, 8, 4, 4) }
	r := analyze(t, seModel(rng, []float32{-10, -10, 10, 10, 0, 0, 0, 0}), batchesOf(rng, 8, in)...)
	if a := alarms(r); len(a) != 0 {
		t.Fatalf("SE gate: %+v, want no warning or error", a)
	}
	if l := r.LayerByNode("gate"); l.Role != "gate" || l.SaturatedFraction == nil || *l.SaturatedFraction < 0.4 {
		t.Fatalf("gate layer role %q saturated %v: want a gate with ≥40%% at its bounds", l.Role, l.SaturatedFraction)
	}
	fs := findings(r, "gate-constant", "gate")
	if len(fs) != 1 || fs[0].Severity != report.Info || fs[0].Evidence["always_off"] != 2 || fs[0].Evidence["always_on"] != 2 {
		t.Fatalf("gate-constant: %+v, want info with 2 off and 2 on", fs)
	}
	r = analyze(t, seModel(rng, []float32{-10, -10, 10, 10, -10, 10, -10, 10}), batchesOf(rng, 8, in)...)
	if fs := findings(r, "gate-constant", "gate"); len(fs) != 1 || fs[0].Severity != report.Warning {
		t.Fatalf("whole gate constant: %+v, want a warning", fs)
	}
}

// A sigmoid probability head (a graph output) pinned near 0 or 1 is meant
// to be confident: no saturation finding. (TestSaturationKnownFraction has
// the hidden control.)
func TestFalseAlarmSigmoidHead(t *testing.T) {
	rng := rand.New(rand.NewPCG(23, 1))
	b := modelbuild.New("head", 13)
	b.Input("x", []int{1, 4}, true)
	randInit(b, rng, "w", []int{4, 3}, 10)
	b.Node("MatMul", "fc", []string{"x", "w"}, []string{"h"})
	b.Node("Sigmoid", "prob", []string{"h"}, []string{"p"})
	b.Node("Flatten", "flat", []string{"p"}, []string{"y"})
	b.Output("y")
	r := analyze(t, b, batchesOf(rng, 8, func() *tensor.Tensor { return gaussian(rng, 1, 16, 4) })...)
	if l := r.LayerByNode("prob"); l.Role != "head" || l.SaturatedFraction == nil || *l.SaturatedFraction < 0.5 {
		t.Fatalf("prob: role %q saturated %v, want a head over half saturated", l.Role, l.SaturatedFraction)
	}
	if fs := findings(r, "saturation", ""); len(fs) != 0 {
		t.Fatalf("saturation on an output head: %+v", fs)
	}
}

// A layer of 2 units with 1 that never fires is not an error (issue 15);
// 40 of 64 dead is.
func TestFalseAlarmTinyLayer(t *testing.T) {
	rng := rand.New(rand.NewPCG(24, 1))
	mk := func(units, dead int) *modelbuild.Builder {
		b := modelbuild.New("tiny", 13)
		b.Input("x", []int{1, units}, true)
		bias := make([]float32, units)
		for i := 0; i < dead; i++ {
			bias[i] = -100
		}
		b.Init("b", []int{units}, bias)
		b.Node("Add", "lin", []string{"x", "b"}, []string{"h"})
		b.Node("Relu", "relu", []string{"h"}, []string{"r"})
		b.Node("Neg", "out", []string{"r"}, []string{"y"})
		b.Output("y")
		return b
	}
	r := analyze(t, mk(2, 1), batchesOf(rng, 8, func() *tensor.Tensor { return gaussian(rng, 1, 16, 2) })...)
	if fs := findings(r, "dead-units", ""); len(fs) != 0 {
		t.Fatalf("2-unit layer with 1 dead: %+v, want no finding", fs)
	}
	r = analyze(t, mk(64, 40), batchesOf(rng, 8, func() *tensor.Tensor { return gaussian(rng, 1, 16, 64) })...)
	if fs := findings(r, "dead-units", "relu"); len(fs) != 1 || fs[0].Severity != report.Error {
		t.Fatalf("40 of 64 dead: %+v, want an error", fs)
	}
}

// A narrow sample: the first half of the batches excites none of 16 units,
// the second half excites 7, so 9 (56%) stay dead but the count was still
// falling fast: projected another half-sample ahead it is 2 (12.5%), so the
// verdict is provisional information that says so. The same 9 dead on
// varied data from the start is an error.
func TestFalseAlarmNarrowSample(t *testing.T) {
	mk := func() *modelbuild.Builder {
		b := modelbuild.New("narrow", 13)
		b.Input("x", []int{1, 16}, true)
		b.Node("Relu", "relu", []string{"x"}, []string{"r"})
		b.Node("Neg", "out", []string{"r"}, []string{"y"})
		b.Output("y")
		return b
	}
	rng := rand.New(rand.NewPCG(25, 1))
	silent := func() *tensor.Tensor { return fillT([]int{16, 16}, func(int) float32 { return -1 }) }
	varied := func() *tensor.Tensor {
		return fillT([]int{16, 16}, func(i int) float32 {
			if i%16 < 7 {
				return float32(rng.NormFloat64())
			}
			return -1
		})
	}
	narrow := append(batchesOf(rng, 4, silent), batchesOf(rng, 4, varied)...)
	fs := findings(analyze(t, mk(), narrow...), "dead-units", "relu")
	if len(fs) != 1 || fs[0].Severity != report.Info || !strings.Contains(fs[0].Message, "Provisional") || fs[0].Evidence["dead_at_half"] != 16 {
		t.Fatalf("narrow sample: %+v, want provisional information with 16 dead at half", fs)
	}
	fs = findings(analyze(t, mk(), batchesOf(rng, 8, varied)...), "dead-units", "relu")
	if len(fs) != 1 || fs[0].Severity != report.Error {
		t.Fatalf("varied sample: %+v, want an error", fs)
	}
}

// inputModel feeds x straight into Abs (no normalisation of its own).
func inputModel(shape []int) *modelbuild.Builder {
	b := modelbuild.New("input", 13)
	b.Input("x", shape, true)
	b.Node("Abs", "abs", []string{"x"}, []string{"y"})
	b.Output("y")
	return b
}

func inputScale(t *testing.T, b *modelbuild.Builder, batches ...*tensor.Tensor) []report.Finding {
	t.Helper()
	return findings(analyze(t, b, batches...), "input-scale", "")
}

// Raw audio in [−1, 1] at speech amplitude (std 0.05) is information; the
// same waveform as int16 sample values (std ≈ 1600) is a warning.
func TestFalseAlarmAudioInput(t *testing.T) {
	rng := rand.New(rand.NewPCG(26, 1))
	wave := func(scale float64) func() *tensor.Tensor {
		return func() *tensor.Tensor {
			return fillT([]int{4, 1, 1600}, func(i int) float32 {
				return float32(scale * math.Max(-1, math.Min(1, 0.05*rng.NormFloat64()*math.Sin(float64(i)/40))))
			})
		}
	}
	fs := inputScale(t, inputModel([]int{1, 1, 1600}), batchesOf(rng, 4, wave(1))...)
	if len(fs) != 1 || fs[0].Severity != report.Info {
		t.Fatalf("audio in [−1,1]: %+v, want one info", fs)
	}
	fs = inputScale(t, inputModel([]int{1, 1, 1600}), batchesOf(rng, 4, wave(32767))...)
	if len(fs) != 1 || fs[0].Severity != report.Warning {
		t.Fatalf("int16 audio: %+v, want a warning", fs)
	}
}

// Pages of mostly white paper after ImageNet normalisation (published mean
// 0.485/0.456/0.406, std 0.229/0.224/0.225) have channel means ≈ 2: a
// legitimate input, information only. The same pages as raw 0–255 pixels
// are a warning naming 8-bit values. A graph that does its own (x−m)/s is
// not judged.
func TestFalseAlarmWhitePageImages(t *testing.T) {
	rng := rand.New(rand.NewPCG(27, 1))
	mean, std := []float64{0.485, 0.456, 0.406}, []float64{0.229, 0.224, 0.225}
	page := func(raw bool) func() *tensor.Tensor {
		return func() *tensor.Tensor {
			return fillT([]int{4, 3, 16, 16}, func(i int) float32 {
				c := (i / 256) % 3
				v := 0.97 + 0.02*rng.Float64()
				if rng.IntN(20) == 0 {
					v = 0.1 // ink
				}
				if raw {
					return float32(math.Round(255 * v))
				}
				return float32((v - mean[c]) / std[c])
			})
		}
	}
	fs := inputScale(t, inputModel([]int{1, 3, 16, 16}), batchesOf(rng, 4, page(false))...)
	if a := alarmsIn(fs); len(a) != 0 {
		t.Fatalf("ImageNet-normalised white pages: %+v, want information only", a)
	}
	fs = inputScale(t, inputModel([]int{1, 3, 16, 16}), batchesOf(rng, 4, page(true))...)
	if len(fs) != 1 || fs[0].Severity != report.Warning || !strings.Contains(fs[0].Message, "8-bit") {
		t.Fatalf("raw pages: %+v, want a warning naming 8-bit values", fs)
	}
	b := modelbuild.New("selfnorm", 13)
	b.Input("x", []int{1, 3, 16, 16}, true)
	b.Init("m", []int{1}, []float32{127.5})
	b.Init("s", []int{1}, []float32{64})
	b.Node("Sub", "center", []string{"x", "m"}, []string{"c"})
	b.Node("Div", "scale", []string{"c", "s"}, []string{"y"})
	b.Output("y")
	if fs := inputScale(t, b, batchesOf(rng, 4, page(true))...); len(fs) != 0 {
		t.Fatalf("graph normalising its own input: %+v, want not judged", fs)
	}
}

func alarmsIn(fs []report.Finding) []report.Finding {
	return alarms(&report.Report{Findings: fs})
}

// A per-pixel probability map [N,1,H,W] is not a 16-class distribution:
// no output summary, no output-health finding. A [N,5] softmax is judged.
func TestFalseAlarmMaskOutput(t *testing.T) {
	rng := rand.New(rand.NewPCG(28, 1))
	b := modelbuild.New("mask", 13)
	b.Input("x", []int{1, 1, 4, 4}, true)
	b.Node("Sigmoid", "mask", []string{"x"}, []string{"y"})
	b.Output("y")
	r := analyze(t, b, batchesOf(rng, 4, func() *tensor.Tensor { return gaussian(rng, 0.1, 8, 1, 4, 4) })...)
	if r.Output != nil || len(findings(r, "output-health", "")) != 0 {
		t.Fatalf("mask output read as classes: %+v %+v", r.Output, findings(r, "output-health", ""))
	}
	b = modelbuild.New("classes", 13)
	b.Input("x", []int{1, 5}, true)
	b.Node("Softmax", "probs", []string{"x"}, []string{"y"}, modelbuild.Attr{Name: "axis", Value: -1})
	b.Output("y")
	r = analyze(t, b, batchesOf(rng, 4, func() *tensor.Tensor { return gaussian(rng, 0.01, 8, 5) })...)
	if r.Output == nil || r.Output.Classes != 5 || len(findings(r, "output-health", "")) != 1 {
		t.Fatalf("[N,5] softmax: output %+v findings %+v, want a near-uniform note", r.Output, findings(r, "output-health", ""))
	}
}

// A segmentation head's per-pixel class map [N,21,H,W], logits or a
// Softmax over the class axis 1 (the ONNX layout NCHW puts classes on axis 1,
// not the last axis), is not read as W-class rows: no output summary, no
// output-health finding, and no per-pixel softmax computed for it (the
// output-health pass once spent a quarter of a 21-class 224×224 model's run
// on exactly that).
func TestFalseAlarmSegmentationOutput(t *testing.T) {
	rng := rand.New(rand.NewPCG(30, 1))
	for _, softmax := range []bool{false, true} {
		b := modelbuild.New("seg", 13)
		b.Input("x", []int{1, 21, 4, 4}, true)
		if softmax {
			b.Node("Softmax", "probs", []string{"x"}, []string{"y"}, modelbuild.Attr{Name: "axis", Value: 1})
		} else {
			b.Node("Identity", "logits", []string{"x"}, []string{"y"})
		}
		b.Output("y")
		r := analyze(t, b, batchesOf(rng, 2, func() *tensor.Tensor { return gaussian(rng, 1, 8, 21, 4, 4) })...)
		if r.Output != nil || len(findings(r, "output-health", "")) != 0 {
			t.Fatalf("softmax %v: per-pixel map read as classes: %+v %+v", softmax, r.Output, findings(r, "output-health", ""))
		}
	}
}

// BatchNorm drift against its sampling error (the standard error of the
// sample mean, σ/√n): a 1.5σ shift of a trained running mean on 2 samples
// is within 3 standard errors (3·√(1/2) = 2.1σ) and no finding; on 64
// samples it is, and the finding says the sample differs from the training
// data at this layer (Ioffe & Szegedy 2015: running statistics estimate
// the training population's).
func TestBatchNormDriftSamplingError(t *testing.T) {
	run := func(samples int) []report.Finding {
		b := modelbuild.New("bn", 13)
		b.Input("x", []int{1, bnChannels, 1, 1}, true)
		b.Init("gamma", []int{bnChannels}, []float32{1, 1, 1, 1})
		b.Init("beta", []int{bnChannels}, []float32{0, 0, 0, 0})
		b.Init("mean", []int{bnChannels}, []float32{-1.5, -1.5, -1.5, -1.5})
		b.Init("var", []int{bnChannels}, []float32{1, 1, 1, 1})
		b.Node("BatchNormalization", "bn", []string{"x", "gamma", "beta", "mean", "var"}, []string{"y"})
		b.Output("y")
		rng := rand.New(rand.NewPCG(29, uint64(samples)))
		x := gaussian(rng, 1, samples, bnChannels, 1, 1)
		// exactly mean 0, std 1 per channel
		for c := 0; c < bnChannels; c++ {
			var s, q float64
			for n := 0; n < samples; n++ {
				s += float64(x.F32()[n*bnChannels+c])
			}
			m := s / float64(samples)
			for n := 0; n < samples; n++ {
				d := float64(x.F32()[n*bnChannels+c]) - m
				q += d * d
			}
			sd := math.Sqrt(q / float64(samples))
			for n := 0; n < samples; n++ {
				x.F32()[n*bnChannels+c] = float32((float64(x.F32()[n*bnChannels+c]) - m) / sd)
			}
		}
		return findings(analyze(t, b, x), "batchnorm-drift", "bn")
	}
	if fs := run(2); len(fs) != 0 {
		t.Fatalf("2 samples: %+v, want none (within the sampling error)", fs)
	}
	fs := run(64)
	if len(fs) != 1 || fs[0].Severity != report.Warning || !strings.Contains(fs[0].Message, "the sample differs from the training data at this layer") {
		t.Fatalf("64 samples: %+v, want a warning worded as a sample difference", fs)
	}
}

// An LSTM-style cell written out as ops: c' = σ(f)·c + σ(i)·tanh(g), with
// the forget gate pinned open (pre-activation +8, as trained forget gates
// often are) — elementwise gates that open and close, not saturated hidden
// units: no saturation finding. The same sigmoid feeding an Add instead is
// hidden and is judged.
func TestFalseAlarmRecurrentCellGate(t *testing.T) {
	rng := rand.New(rand.NewPCG(30, 1))
	mk := func(gated bool) *modelbuild.Builder {
		b := modelbuild.New("cell", 13)
		b.Input("x", []int{1, 16}, true)
		b.Input("c", []int{1, 16}, true)
		b.Init("fbias", []int{16}, []float32{8, 8, 8, 8, 8, 8, 8, 8, 8, 8, 8, 8, 8, 8, 8, 8})
		b.Node("Add", "fpre", []string{"x", "fbias"}, []string{"fp"})
		b.Node("Sigmoid", "forget", []string{"fp"}, []string{"f"})
		if gated {
			b.Node("Mul", "keep", []string{"f", "c"}, []string{"kept"})
		} else {
			b.Node("Add", "keep", []string{"f", "c"}, []string{"kept"})
		}
		b.Node("Sigmoid", "input_gate", []string{"x"}, []string{"i"})
		b.Node("Tanh", "candidate", []string{"x"}, []string{"g"})
		b.Node("Mul", "write", []string{"i", "g"}, []string{"w"})
		b.Node("Add", "cell", []string{"kept", "w"}, []string{"y"})
		b.Output("y")
		return b
	}
	batches := batchesOf(rng, 8, func() *tensor.Tensor { return gaussian(rng, 1, 16, 16) })
	run := func(gated bool) *report.Report {
		m, p := stats.BuildPlan(t, mk(gated))
		c := stats.NewCollector(m, p)
		for _, x := range batches {
			in := map[string]*tensor.Tensor{"x": x, "c": x}
			c.AddInputs(in)
			if _, err := p.Run(in, c.Hook); err != nil {
				t.Fatal(err)
			}
			c.Samples += 16
		}
		col := c.Finish("file")
		if err := stats.Run(col, stats.Checks, nil); err != nil {
			t.Fatal(err)
		}
		return col.Report
	}
	r := run(true)
	if l := r.LayerByNode("forget"); l.Role != "cell-gate" || *l.SaturatedFraction < 0.9 {
		t.Fatalf("forget gate: role %q saturated %v, want a cell-gate pinned open", l.Role, *l.SaturatedFraction)
	}
	if fs := findings(r, "saturation", ""); len(fs) != 0 {
		t.Fatalf("saturation on cell gates: %+v", fs)
	}
	if fs := findings(run(false), "saturation", "forget"); len(fs) != 1 || fs[0].Severity != report.Error {
		t.Fatalf("the same sigmoid as a hidden unit: %+v, want an error", fs)
	}
}

// A probability map scaled and thresholded by constants before the output
// (post-processing: Mul by 255, Greater than 127) is still an output head.
func TestHeadThroughPostProcessing(t *testing.T) {
	rng := rand.New(rand.NewPCG(33, 1))
	b := modelbuild.New("post", 13)
	b.Input("x", []int{1, 1, 4, 4}, true)
	b.Init("k", []int{1}, []float32{255})
	b.Init("t", []int{1}, []float32{127})
	b.Node("Sigmoid", "mask", []string{"x"}, []string{"p"})
	b.Node("Mul", "to_bytes", []string{"p", "k"}, []string{"q"})
	b.Node("Greater", "binarise", []string{"q", "t"}, []string{"y"})
	b.Output("y")
	b.Output("q")
	r := analyze(t, b, batchesOf(rng, 4, func() *tensor.Tensor { return gaussian(rng, 10, 8, 1, 4, 4) })...)
	if l := r.LayerByNode("mask"); l.Role != "head" {
		t.Fatalf("mask role %q, want head", l.Role)
	}
	if fs := findings(r, "saturation", ""); len(fs) != 0 {
		t.Fatalf("saturation on a post-processed head: %+v", fs)
	}
}

// Classes on the last axis of a rank-3 output [N, T, C] are recognised
// when a Softmax over the last axis makes them; the same values without
// it (a [N, C, L] feature map, say) are not read as classes.
func TestOutputClassesLastAxis(t *testing.T) {
	rng := rand.New(rand.NewPCG(34, 1))
	mk := func(softmax bool) *report.Report {
		b := modelbuild.New("seq", 13)
		b.Input("x", []int{1, 6, 5}, true)
		if softmax {
			b.Node("Softmax", "probs", []string{"x"}, []string{"y"}, modelbuild.Attr{Name: "axis", Value: -1})
		} else {
			b.Node("Relu", "feat", []string{"x"}, []string{"y"})
		}
		b.Output("y")
		return analyze(t, b, batchesOf(rng, 4, func() *tensor.Tensor { return gaussian(rng, 1, 8, 6, 5) })...)
	}
	if r := mk(true); r.Output == nil || r.Output.Classes != 5 || !r.Output.IsDistribution {
		t.Fatalf("[N,T,C] softmax: %+v, want 5 classes", r.Output)
	}
	if r := mk(false); r.Output != nil {
		t.Fatalf("[N,C,L] map read as classes: %+v", r.Output)
	}
}
