package report

import (
	"bytes"
	"encoding/json"
	"flag"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"testing"
)

var update = flag.Bool("update", false, "rewrite the sample report fixtures in testdata/")

// sampleLayer describes how to simulate one layer of the sample CNN.
type sampleLayer struct {
	node, op, act string
	shape         []int
	units         int
	gen           func(r *rand.Rand) float64
	dead, sat     *float64
	nonfinite     int64
}

func normal(mu, sigma float64) func(r *rand.Rand) float64 {
	return func(r *rand.Rand) float64 { return mu + sigma*r.NormFloat64() }
}

func relu(mu, sigma float64) func(r *rand.Rand) float64 {
	return func(r *rand.Rand) float64 { return math.Max(0, mu+sigma*r.NormFloat64()) }
}

func tanhOf(mu, sigma float64) func(r *rand.Rand) float64 {
	return func(r *rand.Rand) float64 { return math.Tanh(mu + sigma*r.NormFloat64()) }
}

// simulateLayer draws n values and summarises them like the stats package would:
// moments, extremes, zero fraction, a 40-bin histogram and interpolated percentiles.
func simulateLayer(r *rand.Rand, depth int, s sampleLayer) Layer {
	const n = 20000
	xs := make([]float64, n)
	for i := range xs {
		xs[i] = s.gen(r)
	}
	var sum, zeros float64
	for _, x := range xs {
		sum += x
		if x == 0 {
			zeros++
		}
	}
	mean := sum / n
	var ss float64
	for _, x := range xs {
		ss += (x - mean) * (x - mean)
	}
	slices.Sort(xs)
	lo, hi := xs[0], xs[n-1]
	if hi == lo {
		hi = lo + 1
	}
	const bins = 40
	edges := make([]float64, bins+1)
	for i := range edges {
		edges[i] = round4(lo + (hi-lo)*float64(i)/bins)
	}
	counts := make([]int64, bins)
	for _, x := range xs {
		b := int((x - lo) / (hi - lo) * bins)
		counts[min(b, bins-1)]++
	}
	l := Layer{
		Node: s.node, Op: s.op, Output: s.node + "_output_0", Depth: depth,
		Shape: s.shape, Count: n, Mean: Num(round4(mean)), Std: Num(round4(math.Sqrt(ss / n))),
		Min: Num(round4(xs[0])), Max: Num(round4(xs[n-1])), ZeroFraction: Num(round4(zeros / n)),
		Nonfinite: s.nonfinite, Histogram: &Histogram{Edges: edges, Counts: counts},
		P01: Num(round4(xs[n/100])), P99: Num(round4(xs[n*99/100])),
		Activation: s.act, DeadFraction: s.dead, SaturatedFraction: s.sat,
	}
	if s.units > 0 {
		l.Units = IntPtr(s.units)
		l.UnitAxis = IntPtr(1)
	}
	return l
}

func round4(x float64) float64 { return math.Round(x*1e4) / 1e4 }

// sampleLayers is a small image classifier: three conv stages and a two-layer head.
func sampleLayers() []sampleLayer {
	f := func(x float64) *float64 { return &x }
	return []sampleLayer{
		{node: "/features/conv1/Conv", op: "Conv", shape: []int{8, 16, 32, 32}, gen: normal(0.1, 0.9)},
		{node: "/features/bn1/BatchNormalization", op: "BatchNormalization", shape: []int{8, 16, 32, 32}, gen: normal(0.05, 1.0)},
		{node: "/features/relu1/Relu", op: "Relu", act: "relu", shape: []int{8, 16, 32, 32}, units: 16, gen: relu(0.2, 1.0), dead: f(0.0625)},
		{node: "/features/conv2/Conv", op: "Conv", shape: []int{8, 32, 32, 32}, gen: normal(-0.1, 1.3)},
		{node: "/features/relu2/Relu", op: "Relu", act: "relu", shape: []int{8, 32, 32, 32}, units: 32, gen: relu(-0.1, 1.3), dead: f(0.125)},
		{node: "/features/pool/MaxPool", op: "MaxPool", shape: []int{8, 32, 16, 16}, gen: relu(0.4, 1.2)},
		{node: "/layer3/layer3.0/conv/Conv", op: "Conv", shape: []int{8, 32, 16, 16}, gen: normal(-0.8, 0.6)},
		{node: "/layer3/layer3.0/relu/Relu", op: "Relu", act: "relu", shape: []int{8, 32, 16, 16}, units: 32, gen: relu(-0.8, 0.6), dead: f(0.5625)},
		{node: "/layer3/layer3.1/conv/Conv", op: "Conv", shape: []int{8, 32, 16, 16}, gen: normal(-0.01, 0.03)},
		{node: "/layer3/layer3.1/relu_1/Relu", op: "Relu", act: "relu", shape: []int{8, 32, 16, 16}, units: 32, gen: relu(-0.01, 0.03), dead: f(0.3125)},
		{node: "/head/GlobalAveragePool", op: "GlobalAveragePool", shape: []int{8, 32, 1, 1}, gen: relu(0.005, 0.01)},
		{node: "/head/Flatten", op: "Flatten", shape: []int{8, 32}, gen: relu(0.005, 0.01)},
		{node: "/head/fc1|proj/Gemm", op: "Gemm", shape: []int{8, 64}, gen: normal(0.2, 2.4), nonfinite: 3},
		{node: "/head/tanh/Tanh", op: "Tanh", act: "saturating", shape: []int{8, 64}, units: 64, gen: tanhOf(0.2, 2.4), sat: f(0.34375)},
		{node: "/head/fc2/Gemm", op: "Gemm", shape: []int{8, 10}, gen: normal(0, 3.1)},
		{node: "/head/softmax/Softmax", op: "Softmax", shape: []int{8, 10}, gen: func(r *rand.Rand) float64 { return math.Pow(r.Float64(), 6) }},
	}
}

func sampleWeights() []Weight {
	w := func(name, node string, shape []int, std float64, followed string) Weight {
		fan, fanOut := shape[1], shape[0]
		for _, d := range shape[2:] {
			fan *= d
			fanOut *= d
		}
		g := std * math.Sqrt(float64(fan))
		return Weight{Name: name, Node: node, Shape: shape, FanIn: fan, FanOut: fanOut, Std: Num(std), Gain: Num(round4(g)),
			ScaleVsHe: Num(round4(g / math.Sqrt2)), ScaleVsXavier: Num(round4(g)), Rows: shape[0], FollowedBy: followed}
	}
	ws := []Weight{
		w("features.conv1.weight", "/features/conv1/Conv", []int{16, 3, 3, 3}, 0.25, "BatchNormalization"),
		w("features.conv2.weight", "/features/conv2/Conv", []int{32, 16, 3, 3}, 0.11, "Relu"),
		w("layer3.0.conv.weight", "/layer3/layer3.0/conv/Conv", []int{32, 32, 3, 3}, 0.085, "Relu"),
		w("layer3.1.conv.weight", "/layer3/layer3.1/conv/Conv", []int{32, 32, 3, 3}, 0.0124, "Relu"),
		w("head.fc1|proj.weight", "/head/fc1|proj/Gemm", []int{64, 32}, 0.19, "Tanh"),
		w("head.fc2.weight", "/head/fc2/Gemm", []int{10, 64}, 0.14, ""),
	}
	ws[5].IdenticalRows = 2
	return ws
}

func sampleFindings() ([]Finding, []Rank) {
	fs := []Finding{
		{Check: "dead-units", Severity: Error, Node: "/layer3/layer3.0/relu/Relu",
			Message:  "18 of 32 units (56%) never fire on the sample",
			Evidence: map[string]any{"dead_fraction": 0.5625, "dead_units": 18, "units": 32, "threshold": 0.5}},
		{Check: "nonfinite", Severity: Error, Node: "/head/fc1|proj/Gemm",
			Message:  "3 NaN/Inf values in the output",
			Evidence: map[string]any{"nonfinite": 3}},
		{Check: "spread-collapse", Severity: Warning, Node: "/layer3/layer3.1/relu_1/Relu",
			Message:  "activation std falls from 0.62 to 0.017 across the stack (ratio 0.027)",
			Evidence: map[string]any{"first_std": 0.62, "last_std": 0.017, "ratio": 0.027, "threshold": 0.1}},
		{Check: "dead-units", Severity: Warning, Node: "/layer3/layer3.1/relu_1/Relu",
			Message:  "10 of 32 units (31%) never fire on the sample",
			Evidence: map[string]any{"dead_fraction": 0.3125, "dead_units": 10, "units": 32, "threshold": 0.25}},
		{Check: "saturation", Severity: Warning, Node: "/head/tanh/Tanh",
			Message:  "22 of 64 units (34%) sit beyond |y|>0.99",
			Evidence: map[string]any{"saturated_fraction": 0.34375, "threshold": 0.2}},
		{Check: "weight-scale", Severity: Warning, Node: "/layer3/layer3.1/conv/Conv",
			Message:  "gain 0.21 is 0.15× the He reference √2",
			Evidence: map[string]any{"gain": 0.2104, "reference": 1.4142, "ratio": 0.1488}},
		{Check: "output-health", Severity: Info, Node: "/head/softmax/Softmax",
			Message:  "mean top-1 probability 0.91 over 512 samples",
			Evidence: map[string]any{"mean_max_prob": 0.91}},
	}
	rk := []Rank{
		{Node: "/layer3/layer3.0/relu/Relu", Score: 3.1, Checks: []string{"dead-units"}},
		{Node: "/head/fc1|proj/Gemm", Score: 3.0, Checks: []string{"nonfinite"}},
		{Node: "/layer3/layer3.1/relu_1/Relu", Score: 2.4, Checks: []string{"spread-collapse", "dead-units"}},
		{Node: "/head/tanh/Tanh", Score: 1.7, Checks: []string{"saturation"}},
		{Node: "/layer3/layer3.1/conv/Conv", Score: 1.5, Checks: []string{"weight-scale"}},
		{Node: "/head/softmax/Softmax", Score: 0.1, Checks: []string{"output-health"}},
	}
	return fs, rk
}

// sampleCheckReport is a plausible `vitals check` report of a small CNN on 512 images.
func sampleCheckReport() *Report {
	r := rand.New(rand.NewPCG(7, 11))
	var layers []Layer
	for i, s := range sampleLayers() {
		layers = append(layers, simulateLayer(r, i, s))
	}
	fs, rk := sampleFindings()
	return &Report{
		Tool: "vitals", Version: "0.1.0-test",
		Model: Model{Path: "models/smallcnn.onnx", Opset: 17, Producer: "pytorch 2.3", Nodes: 16, Parameters: 34218},
		Input: Input{Source: "file", Samples: 512, PerInput: []InputStat{{Name: "images", Path: "data/val.npy",
			Shape: []int{512, 3, 32, 32}, Mean: Num(0.012), Std: Num(0.98)}}},
		Layers: layers, Weights: sampleWeights(), Findings: fs, Ranking: rk,
		Output: &Output{Name: "probs", IsDistribution: true, Classes: 10, MeanMaxProb: Num(0.91), Accuracy: Num(0.874),
			CrossEntropy: Num(0.41), LnClasses: Num(round4(math.Log(10))), Labeled: 512},
		Thresholds: map[string]float64{"dead-units.warning": 0.25, "dead-units.error": 0.5,
			"saturation.warning": 0.2, "saturation.error": 0.5},
		// as stats.Docs fills it (TestReportCarriesCheckDocs in stats checks that)
		Checks: []CheckDoc{{Name: "dead-units", Summary: "ReLU-family units that never output a positive value over the whole sample.", Detail: "A dead unit passes no gradient."},
			{Name: "weight-scale", Summary: "Weight gain g = std·√fan_in against the usual initialisation rules.", Detail: "Evidence for the findings downstream."}},
	}
}

// sampleCompareReport is the check report of a NEW checkpoint compared with an OLD one
// whose third stage was still healthy.
func sampleCompareReport() *Report {
	rep := sampleCheckReport()
	r := rand.New(rand.NewPCG(3, 5))
	f := func(x float64) *float64 { return &x }
	olds := sampleLayers()
	olds[6].gen, olds[7].gen, olds[7].dead = normal(-0.1, 0.7), relu(-0.1, 0.7), f(0.09375)
	olds[8].gen, olds[9].gen, olds[9].dead = normal(0.0, 0.5), relu(0.0, 0.5), f(0.0625)
	olds[13].gen, olds[13].sat = tanhOf(0.1, 1.2), f(0.09375)
	olds[12].nonfinite = 0
	c := &Comparison{Old: "models/smallcnn-epoch10.onnx", New: "models/smallcnn.onnx",
		Unmatched: []string{"/head/dropout/Dropout (OLD only)"},
		Agreement: &Agreement{Output: "probs", Top1: Num(0.93), MeanKL: Num(0.041), MaxAbsDiff: Num(0.38), Samples: 512}}
	for i, s := range olds {
		ol := simulateLayer(r, i, s)
		c.OldLayers = append(c.OldLayers, ol)
		nl := rep.Layers[i]
		d := math.Abs(Val(nl.Std)-Val(ol.Std)) / math.Max(Val(nl.Std), Val(ol.Std))
		c.Layers = append(c.Layers, LayerDelta{Node: nl.Node, OldNode: ol.Node, Op: nl.Op,
			MeanOld: ol.Mean, MeanNew: nl.Mean, StdOld: ol.Std, StdNew: nl.Std,
			DeadOld: ol.DeadFraction, DeadNew: nl.DeadFraction, SaturatedOld: ol.SaturatedFraction, SaturatedNew: nl.SaturatedFraction,
			HistogramDistance: Num(round4(math.Min(1, 0.02+0.9*d)))})
	}
	for i, w := range rep.Weights {
		c.Weights = append(c.Weights, WeightDelta{Name: w.Name, Node: w.Node, RelativeChange: Num([]float64{0.04, 0.06, 0.52, 0.87, 0.11, 0.09}[i])})
	}
	rep.Compare = c
	return rep
}

// TestSampleFixtures keeps testdata/sample-*.json (also read by the plots tests)
// in step with the generators above; run with -update to rewrite them.
func TestSampleFixtures(t *testing.T) {
	for name, rep := range map[string]*Report{"sample-check.json": sampleCheckReport(), "sample-compare.json": sampleCompareReport()} {
		b, err := json.MarshalIndent(rep, "", " ")
		if err != nil {
			t.Fatal(err)
		}
		b = append(b, '\n')
		path := filepath.Join("testdata", name)
		if *update {
			if err := os.MkdirAll("testdata", 0o755); err != nil {
				t.Fatal(err)
			}
			if err := os.WriteFile(path, b, 0o644); err != nil {
				t.Fatal(err)
			}
			continue
		}
		old, err := os.ReadFile(path)
		if err != nil {
			t.Fatalf("%v (run go test ./report -run TestSampleFixtures -update)", err)
		}
		if !bytes.Equal(old, b) {
			t.Errorf("%s is stale: run go test ./report -run TestSampleFixtures -update", path)
		}
	}
}
