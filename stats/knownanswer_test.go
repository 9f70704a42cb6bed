package stats_test

import (
	"context"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/check"
	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/internal/modeltest"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/stats"
	"github.com/vitals-health/vitals/tensor"
)

// analyze builds a model and checks it through check.Check (the path
// `vitals check` runs) over the given batches of input "x", concatenated
// and cut again at the first batch's size.
func analyze(t *testing.T, b *modelbuild.Builder, batches ...*tensor.Tensor) *report.Report {
	t.Helper()
	m, err := check.Compile(modeltest.Model(t, b), check.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	x := batches[0]
	if len(batches) > 1 {
		var all []float32
		n := 0
		for _, b := range batches {
			all = append(all, b.F32()...)
			n += b.Shape[0]
		}
		x = tensor.From(all, append([]int{n}, x.Shape[1:]...)...)
	}
	sample := check.Sample{Arrays: map[string]*tensor.Tensor{"x": x}, Batch: batches[0].Shape[0]}
	r, err := check.Check(context.Background(), m, sample, check.Options{})
	if err != nil {
		t.Fatal(err)
	}
	return r
}

func gaussian(rng *rand.Rand, std float64, shape ...int) *tensor.Tensor {
	t := tensor.New(tensor.Float32, shape)
	for i := range t.F32() {
		t.F32()[i] = float32(rng.NormFloat64() * std)
	}
	return t
}

func findings(r *report.Report, check, node string) []report.Finding {
	var out []report.Finding
	for _, f := range r.Findings {
		if f.Check == check && (node == "" || f.Node == node) {
			out = append(out, f)
		}
	}
	return out
}

// A dense ReLU layer with exactly k units forced dead by large negative
// biases: dead-units must count exactly k (a count, exact by construction).
func TestDeadUnitsExactCount(t *testing.T) {
	const in, units, k = 16, 20, 7
	rng := rand.New(rand.NewPCG(1, 2))
	b := modelbuild.New("dead", 13)
	b.Input("x", []int{1, in}, true)
	w := make([]float32, in*units)
	for i := range w {
		w[i] = float32(rng.NormFloat64() * math.Sqrt(2.0/in))
	}
	bias := make([]float32, units)
	for u := 0; u < k; u++ {
		bias[u*2] = -1e4 // units 0,2,4,...,12 can never be positive for |x| of order 1
	}
	b.Init("W", []int{in, units}, w)
	b.Init("B", []int{units}, bias)
	b.Node("MatMul", "fc", []string{"x", "W"}, []string{"h"})
	b.Node("Add", "fc_bias", []string{"h", "B"}, []string{"z"})
	b.Node("Relu", "act", []string{"z"}, []string{"y"})
	b.Output("y")
	r := analyze(t, b, gaussian(rng, 1, 64, in), gaussian(rng, 1, 37, in))
	l := r.LayerByNode("act")
	if l == nil || l.DeadFraction == nil {
		t.Fatal("no dead fraction for the Relu layer")
	}
	if got := int(math.Round(*l.DeadFraction * units)); got != k {
		t.Fatalf("dead units = %d, want exactly %d", got, k)
	}
	if *l.UnitAxis != 1 { // last axis of a rank-2 dense output
		t.Errorf("unit axis %d, want 1 (features)", *l.UnitAxis)
	}
	if fs := findings(r, "dead-units", "act"); len(fs) != 1 || fs[0].Severity != report.Warning {
		t.Errorf("dead-units findings %+v, want one warning (7/20 = 35%% ≥ 25%%)", fs)
	}
}

// A tanh layer on inputs spaced evenly over [−4, 4]: |tanh(x)| > 0.99 exactly
// when |x| > atanh(0.99) = 2.6467 (analytic), so the saturated share is known.
func TestSaturationKnownFraction(t *testing.T) {
	const n = 4001
	x := tensor.New(tensor.Float32, []int{n, 1})
	want := 0
	for i := range x.F32() {
		v := -4 + 8*float64(i)/float64(n-1)
		x.F32()[i] = float32(v)
		if math.Abs(v) > math.Atanh(0.99)+1e-6 {
			want++
		}
	}
	b := modelbuild.New("sat", 13)
	b.Input("x", []int{1, 1}, true)
	b.Node("Tanh", "squash", []string{"x"}, []string{"y"})
	b.Node("Neg", "after", []string{"y"}, []string{"z"}) // the tanh is hidden, not the output head
	b.Output("z")
	r := analyze(t, b, x)
	l := r.LayerByNode("squash")
	got := *l.SaturatedFraction * n
	if math.Abs(got-float64(want)) > 2 { // two grid points may straddle the float32 rounding of the limit
		t.Fatalf("saturated count %.0f, want %d", got, want)
	}
	// 2·(4−2.6467)/8 = 33.8% ≥ 20% → warning, < 50%
	if fs := findings(r, "saturation", "squash"); len(fs) != 1 || fs[0].Severity != report.Warning {
		t.Errorf("saturation findings %+v, want one warning", fs)
	}
}

// Identical rows in a weight tensor → symmetric-units; a NaN in a weight → nonfinite names that weight.
func TestSymmetricUnitsAndNonfiniteWeight(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	b := modelbuild.New("sym", 13)
	b.Input("x", []int{1, 4}, true)
	// Gemm with transB=1: B is [units, in]; rows 1, 3 and 5 are identical
	w := make([]float32, 6*4)
	for i := range w {
		w[i] = float32(rng.NormFloat64())
	}
	for _, r := range []int{3, 5} {
		copy(w[r*4:r*4+4], w[4:8])
	}
	b.Init("W1", []int{6, 4}, w)
	b.Node("Gemm", "dense1", []string{"x", "W1"}, []string{"h"}, modelbuild.Attr{Name: "transB", Value: 1})
	b.Node("Relu", "act1", []string{"h"}, []string{"a"})
	w2 := make([]float32, 6*3)
	for i := range w2 {
		w2[i] = float32(rng.NormFloat64() * 0.5)
	}
	w2[4] = float32(math.NaN())
	b.Init("W2", []int{6, 3}, w2)
	b.Node("MatMul", "dense2", []string{"a", "W2"}, []string{"y"})
	b.Output("y")
	r := analyze(t, b, gaussian(rng, 1, 8, 4))
	fs := findings(r, "symmetric-units", "dense1")
	if len(fs) != 1 || fs[0].Evidence["identical_rows"] != 3 {
		t.Fatalf("symmetric-units on dense1: %+v, want identical_rows 3", fs)
	}
	named := false
	for _, f := range findings(r, "nonfinite", "dense2") {
		if f.Evidence["weight"] == "W2" && f.Severity == report.Error {
			named = true
		}
	}
	if !named {
		t.Fatalf("nonfinite findings %+v, want an error naming weight W2", findings(r, "nonfinite", ""))
	}
}

const bnChannels = 4

// bnDrift runs a lone BatchNormalization over 16 images of N(0, std²) with
// γ = 1 and β = 0 as initializers and its running "mean" and "var" defined
// by stats, and returns its batchnorm-drift findings.
func bnDrift(t *testing.T, std float64, stats func(b *modelbuild.Builder)) []report.Finding {
	t.Helper()
	b := modelbuild.New("bn", 13)
	b.Input("x", []int{1, bnChannels, 5, 5}, true)
	b.Init("gamma", []int{bnChannels}, []float32{1, 1, 1, 1})
	b.Init("beta", []int{bnChannels}, []float32{0, 0, 0, 0})
	stats(b)
	b.Node("BatchNormalization", "bn", []string{"x", "gamma", "beta", "mean", "var"}, []string{"y"})
	b.Output("y")
	rng := rand.New(rand.NewPCG(5, 6))
	return findings(analyze(t, b, gaussian(rng, std, 16, bnChannels, 5, 5)), "batchnorm-drift", "bn")
}

// A BatchNorm whose running mean is shifted by 3σ from the data's mean:
// batchnorm-drift fires (Ioffe & Szegedy 2015: inference uses population statistics).
func TestBatchNormDrift(t *testing.T) {
	fs := bnDrift(t, 1, func(b *modelbuild.Builder) {
		b.Init("mean", []int{bnChannels}, []float32{3, 0, 3, 0}) // data mean is 0, std 1: channels 0 and 2 drift by 3σ
		b.Init("var", []int{bnChannels}, []float32{1, 1, 1, 1})
	})
	if len(fs) != 1 || fs[0].Evidence["drifting_channels"] != 2 {
		t.Fatalf("batchnorm-drift: %+v, want 2 drifting channels", fs)
	}
	if s := fs[0].Evidence["max_mean_shift_sigmas"].(float64); math.Abs(s-3) > 0.3 {
		t.Errorf("max mean shift %.3g σ, want ≈3", s)
	}
	if fs[0].Evidence["initial_running_statistics"] != false {
		t.Errorf("running means of 3 taken for initial values: %+v", fs[0].Evidence)
	}
}

// Running statistics aliased through Identity nodes, as PyTorch's exporter
// writes equal initializers once (here mean and var at their initial 0 and
// 1, shared with beta and gamma), are still read: data with std 0.2 against
// a running variance of 1 (variance ratio 0.04 < 0.25) drifts on every
// channel (Ioffe & Szegedy 2015: inference uses population statistics).
func TestBatchNormDriftThroughIdentity(t *testing.T) {
	fs := bnDrift(t, 0.2, func(b *modelbuild.Builder) {
		b.Node("Identity", "alias_mean", []string{"beta"}, []string{"mean"})
		b.Node("Identity", "alias_var", []string{"gamma"}, []string{"var"})
	})
	if len(fs) != 1 || fs[0].Evidence["drifting_channels"] != bnChannels {
		t.Fatalf("batchnorm-drift: %+v, want all %d channels drifting", fs, bnChannels)
	}
	if v := fs[0].Evidence["worst_var_ratio"].(float64); v < 0.02 || v > 0.08 {
		t.Errorf("worst variance ratio %.3g, want ≈0.04", v)
	}
	// mean 0 and var 1 everywhere: BatchNorm's initial values, said so
	if fs[0].Evidence["initial_running_statistics"] != true || !strings.Contains(fs[0].Message, "initial mean 0 and variance 1") {
		t.Errorf("running statistics at their initial values not named: %+v", fs[0])
	}
}

// initGaussian adds a units×units initializer with entries N(0, std²) and
// returns its name.
func initGaussian(b *modelbuild.Builder, rng *rand.Rand, name string, units int, std float64) string {
	w := make([]float32, units*units)
	for i := range w {
		w[i] = float32(rng.NormFloat64() * std)
	}
	b.Init(name, []int{units, units}, w)
	return name
}

// tanhStack builds 10 fully connected tanh layers of 500 units with weights N(0, std²).
func tanhStack(rng *rand.Rand, std float64) *modelbuild.Builder {
	const units, layers = 500, 10
	b := modelbuild.New("tanh10", 13)
	b.Input("x", []int{1, units}, true)
	in := "x"
	for l := 0; l < layers; l++ {
		wn := initGaussian(b, rng, "W"+string(rune('a'+l)), units, std)
		h := b.Node("MatMul", "fc"+string(rune('a'+l)), []string{in, wn}, []string{"h" + string(rune('a'+l))})
		in = b.Node("Tanh", "tanh"+string(rune('a'+l)), []string{h}, []string{"t" + string(rune('a'+l))})
	}
	b.Output(in)
	return b
}

// The ten-layer, 500-unit tanh stack on unit-Gaussian input (Glorot & Bengio
// 2010, §4.2.1: with too-small weights activations shrink toward zero with depth).
// N(0, 0.01²): the last layer's std falls below 1e-3 of the first's → spread-collapse (error).
// std = 1/√fan_in: no spread-collapse.
func TestTanhStackSpread(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	small := analyze(t, tanhStack(rng, 0.01), gaussian(rng, 1, 200, 500))
	first, last := small.LayerByNode("tanha"), small.LayerByNode("tanhj")
	if ratio := *last.Std / *first.Std; ratio >= 1e-3 {
		t.Fatalf("N(0,0.01²): std ratio last/first = %.3g, want < 1e-3", ratio)
	}
	fs := findings(small, "spread-collapse", "tanhj")
	if len(fs) != 1 || fs[0].Severity != report.Error {
		t.Fatalf("spread-collapse findings %+v, want one error on the last layer", fs)
	}
	xavier := analyze(t, tanhStack(rng, 1/math.Sqrt(500)), gaussian(rng, 1, 200, 500))
	if fs := findings(xavier, "spread-collapse", ""); len(fs) != 0 {
		t.Fatalf("std=1/√fan_in: unexpected spread-collapse %+v", fs)
	}
}

// He et al. 2015, §2.2 (eq. 10): for ReLU layers y_l = W_l·relu(y_{l−1}) with
// Var[w] = 2/fan_in the second moment E[y²] of the pre-activations is preserved
// from layer to layer; with Var[w] = 1/fan_in it halves per layer. Over 9 layers
// the measured ratio must lie within a factor 2 of 1 and of 2⁻⁹ respectively.
func TestHeInitSecondMoment(t *testing.T) {
	const units, layers = 400, 10
	for _, tc := range []struct {
		varW float64
		want float64
	}{{2.0 / units, 1}, {1.0 / units, math.Pow(2, -9)}} {
		rng := rand.New(rand.NewPCG(9, 10))
		b := modelbuild.New("relu10", 13)
		b.Input("x", []int{1, units}, true)
		in := "x"
		for l := 0; l < layers; l++ {
			s := string(rune('a' + l))
			initGaussian(b, rng, "W"+s, units, math.Sqrt(tc.varW))
			if l > 0 {
				in = b.Node("Relu", "relu"+s, []string{in}, []string{"r" + s})
			}
			in = b.Node("MatMul", "fc"+s, []string{in, "W" + s}, []string{"y" + s})
		}
		b.Output(in)
		r := analyze(t, b, gaussian(rng, 1, 256, units))
		second := func(node string) float64 {
			l := r.LayerByNode(node)
			return *l.Std**l.Std + *l.Mean**l.Mean
		}
		ratio := second("fcj") / second("fca") // 9 layer-to-layer steps
		if ratio < tc.want/2 || ratio > tc.want*2 {
			t.Errorf("Var[w]=%.3g/fan_in: E[y²] ratio over 9 layers %.4g, want within 2× of %.4g", tc.varW*units, ratio, tc.want)
		}
	}
}

// The check list is valid: every check documented, no duplicates, thresholds named after their check.
func TestChecksValid(t *testing.T) {
	if err := stats.Validate(stats.Checks); err != nil {
		t.Fatal(err)
	}
	dup := append([]*stats.Check{}, stats.Checks...)
	dup = append(dup, stats.Checks[0])
	if stats.Validate(dup) == nil {
		t.Fatal("duplicate check not rejected")
	}
}

// reluChain builds 10 ReLU layers of 400 units with Var[w] = 1/fan_in, the
// forward second moment halving per layer (He et al. 2015, eq. 10); with
// residual set, each layer adds its activation back: y = W·relu(x) +
// relu(x), the branch first so that the chain of activations runs through
// the weights, and each product still followed by a ReLU through the Add.
func reluChain(rng *rand.Rand, residual bool) *modelbuild.Builder {
	const units, layers = 400, 10
	b := modelbuild.New("relu_chain", 13)
	b.Input("x", []int{1, units}, true)
	in := "x"
	for l := 0; l < layers; l++ {
		s := string(rune('a' + l))
		initGaussian(b, rng, "W"+s, units, 1/math.Sqrt(units))
		r := b.Node("Relu", "relu"+s, []string{in}, []string{"r" + s})
		y := b.Node("MatMul", "fc"+s, []string{r, "W" + s}, []string{"y" + s})
		if residual {
			y = b.Node("Add", "add"+s, []string{y, r}, []string{"s" + s})
		}
		in = y
	}
	b.Output(in)
	return b
}

// The compound gain predicts the spread of a plain chain: 10 ReLU layers at
// Var[w] = 1/fan_in give ∏ g/√2 = 2^−4.5 ≈ 0.044 over the 9 weights between
// the first and last activations (He et al. 2015, eq. 10: the second moment
// halves per layer). The measured spread collapses (spread-collapse), and
// weight-scale names the compound gain as the likely cause. With a residual
// Add in every layer the same weights no longer shrink the signal (the
// measured std grows), so no finding names them.
func TestCompoundGainPlainChainOnly(t *testing.T) {
	caused := func(r *report.Report) []report.Finding {
		var out []report.Finding
		for _, f := range r.Findings {
			if _, ok := f.Evidence["likely_cause"]; ok {
				out = append(out, f)
			}
		}
		return out
	}
	rng := rand.New(rand.NewPCG(11, 12))
	plain := analyze(t, reluChain(rng, false), gaussian(rng, 1, 128, 400))
	fs := caused(plain)
	if len(fs) != 1 || fs[0].Check != "spread-collapse" || !strings.Contains(fs[0].Message, "∏(g/ref)") {
		t.Fatalf("plain chain: findings with a cause %+v, want one spread-collapse naming the compound gain", fs)
	}
	if g := fs[0].Evidence["compound_gain"].(float64); math.Abs(math.Log2(g)+4.5) > 0.5 {
		t.Errorf("plain chain: compound gain %.3g, want within 2^±0.5 of 2^−4.5", g)
	}
	res := analyze(t, reluChain(rng, true), gaussian(rng, 1, 128, 400))
	if fs := caused(res); len(fs) != 0 {
		t.Errorf("residual chain: findings with a cause %+v, want none", fs)
	}
	first, last := res.LayerByNode("relua"), res.LayerByNode("reluj")
	if *last.Std <= *first.Std {
		t.Errorf("residual chain: std %.3g → %.3g, expected to grow", *first.Std, *last.Std)
	}
}
