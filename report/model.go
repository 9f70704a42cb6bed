// Package report holds the one report model of a vitals run (the JSON
// contract of docs/design.md) and its writers: terminal text, JSON, Markdown and HTML.
// Unknown values are nil pointers, encoded as JSON null, never made-up numbers.
package report

import "math"

// Report is the result of `vitals check` (and, with Compare set, `vitals compare`).
type Report struct {
	Tool     string    `json:"tool"`
	Version  string    `json:"version"`
	Model    Model     `json:"model"`
	Input    Input     `json:"input"`
	Layers   []Layer   `json:"layers"`
	Weights  []Weight  `json:"weights"`
	Findings []Finding `json:"findings"`
	Ranking  []Rank    `json:"ranking"`
	// Coverage says which nodes of the model (subgraph bodies included) the run observed.
	Coverage *Coverage `json:"coverage,omitempty"`
	// Output summarises the model's final output (softmax health, accuracy with labels).
	Output *Output `json:"output,omitempty"`
	// Compare is set by `vitals compare`: the old checkpoint's numbers and the differences.
	Compare *Comparison `json:"compare,omitempty"`
	// Checks are the checks that ran, each with its doc's summary and the
	// rest of its doc (the "how to read this" of the review reports).
	Checks []CheckDoc `json:"checks,omitempty"`
	// Thresholds actually used (defaults merged with --config), for the plots and writers.
	Thresholds map[string]float64 `json:"thresholds,omitempty"`
	// Gradients says how the backward pass was run (gradients.go); nil without one.
	Gradients *Gradients `json:"gradients,omitempty"`
}

// CheckDoc is one check's name and doc: Summary its first sentence, Detail the rest.
type CheckDoc struct {
	Name    string `json:"name"`
	Summary string `json:"summary"`
	Detail  string `json:"detail"`
}

// Model describes the model file.
type Model struct {
	Path       string `json:"path"`
	Opset      int64  `json:"opset"`
	Producer   string `json:"producer"`
	Nodes      int    `json:"nodes"`
	Parameters int64  `json:"parameters"`
	// Float16Weights names the initializers stored as float16 in the file.
	Float16Weights []string `json:"float16_weights,omitempty"`
}

// Coverage counts the nodes of the model, those inside If/Loop/Scan
// subgraphs included, that ran on the sample and whose outputs were observed
// (coverage.go writes it).
type Coverage struct {
	// Nodes is every node of the model; InSubgraphs of them sit in subgraphs.
	Nodes       int `json:"nodes"`
	InSubgraphs int `json:"in_subgraphs"`
	// Executed nodes belong to a graph that ran at least once (the main graph,
	// an If branch taken, a Loop or Scan body with at least one iteration).
	Executed int `json:"executed"`
	// Observed nodes had their outputs seen by the statistics at least once.
	Observed int `json:"observed"`
	// Subgraphs lists every subgraph with how often it ran.
	Subgraphs []SubgraphRun `json:"subgraphs"`
	// NotObserved lists every node not observed, with the reason.
	NotObserved []Unobserved `json:"not_observed"`
}

// SubgraphRun is one subgraph (an If branch, a Loop or Scan body) and its runs.
type SubgraphRun struct {
	// Name is the prefix of its nodes' names: control-flow node/label (docs/subgraphs.md).
	Name string `json:"name"`
	Op   string `json:"op"`
	// Nodes directly in it (not in subgraphs nested in it).
	Nodes int `json:"nodes"`
	// Runs: an If branch once per batch that took it, a body once per iteration.
	Runs int64 `json:"runs"`
}

// Unobserved is a node the run did not observe.
type Unobserved struct {
	Node   string `json:"node"`
	Op     string `json:"op"`
	Reason string `json:"reason"`
}

// Input describes the sample the statistics were computed on.
type Input struct {
	Source   string      `json:"source"` // "file" or "synthetic"
	Samples  int         `json:"samples"`
	PerInput []InputStat `json:"per_input"`
	// Note says how the sample was cut short, e.g. a merge of partial
	// states that leaves samples out (vitals merge --allow-gaps).
	Note string `json:"note,omitempty"`
}

// InputStat is the moments of one model input over the sample, overall and per channel.
type InputStat struct {
	Name  string   `json:"name"`
	Path  string   `json:"path,omitempty"`
	Shape []int    `json:"shape"`
	Mean  *float64 `json:"mean"`
	Std   *float64 `json:"std"`
	Min   *float64 `json:"min,omitempty"`
	Max   *float64 `json:"max,omitempty"`
	// SelfNormalised: the graph normalises this input itself (its first
	// operations are Sub/Div/Mul/Add by constants or a normalisation layer).
	SelfNormalised bool `json:"self_normalised,omitempty"`
	// RecurrentState: the input is the initial state of an LSTM/GRU/RNN
	// (a streaming model's carried state), not data to be scaled.
	RecurrentState bool `json:"recurrent_state,omitempty"`
	// FirstNorm is the first BatchNormalization downstream of the input
	// (at most 4 nodes away), whose running statistics are the training
	// data's view of this input.
	FirstNorm   string    `json:"first_norm,omitempty"`
	ChannelAxis *int      `json:"channel_axis,omitempty"`
	ChannelMean []float64 `json:"channel_mean,omitempty"`
	ChannelStd  []float64 `json:"channel_std,omitempty"`
	// ClippedFraction, LevelsUsedFraction and Quantization are set when a
	// quantizing node reads this input (see Layer).
	ClippedFraction    *float64      `json:"clipped_fraction,omitempty"`
	LevelsUsedFraction *float64      `json:"levels_used_fraction,omitempty"`
	Quantization       *Quantization `json:"quantization,omitempty"`
}

// Quantization describes how a float tensor is quantized by the node that
// reads it (QuantizeLinear or DynamicQuantizeLinear) and how its values fit
// the integer grid over the whole sample. A value v maps to
// q = saturate(round_half_even(v/scale) + zero_point).
type Quantization struct {
	Node string `json:"node"` // the quantizing node
	Op   string `json:"op"`
	Type string `json:"type"` // the integer type, e.g. "uint8"
	// Granularity is "tensor", "axis" (one scale per index of Axis), "block"
	// (one per BlockSize elements along Axis) or "dynamic" (computed from
	// each batch's range by DynamicQuantizeLinear, so nothing clips).
	Granularity string    `json:"granularity"`
	Axis        *int      `json:"axis,omitempty"`
	BlockSize   int       `json:"block_size,omitempty"`
	Scale       []float64 `json:"scale,omitempty"`
	ZeroPoint   []float64 `json:"zero_point,omitempty"`
	// Measured is "float input" when the float values the node quantizes were
	// observed: Clipped counts those with round(v/scale)+zero_point outside
	// the type's range; or "integer output" for the output of a QLinear*
	// node (its float result is never materialised): Clipped then counts
	// values at the ends of the range (the bottom end only when it is not the
	// zero point), an upper bound of the values saturated in requantization.
	// The layer's statistics are then those of the dequantized output.
	Measured string `json:"measured"`
	// Clipped counts the clipped values (see Measured), of Count.
	Clipped int64 `json:"clipped"`
	Count   int64 `json:"count"`
	// Levels is the number of integer levels of the type (256 for 8 bits); 0 when not counted (32-bit types).
	Levels int `json:"levels"`
}

// Layer is the statistics of one node output over the whole sample.
type Layer struct {
	Node   string `json:"node"`
	Op     string `json:"op"`
	Output string `json:"output"`
	Depth  int    `json:"depth"`
	// Shape is the output shape of the first batch (the batch axis varies with --batch).
	Shape        []int    `json:"shape"`
	Count        int64    `json:"count"`
	Mean         *float64 `json:"mean"`
	Std          *float64 `json:"std"`
	Min          *float64 `json:"min"`
	Max          *float64 `json:"max"`
	ZeroFraction *float64 `json:"zero_fraction"`
	Nonfinite    int64    `json:"nonfinite"`
	// Units is the number of units (channels or features) of an activation layer; nil otherwise.
	Units *int `json:"units"`
	// UnitAxis is the axis the units were taken along (1: channels of a conv output; last: features of a dense output).
	UnitAxis          *int       `json:"unit_axis"`
	DeadFraction      *float64   `json:"dead_fraction"`
	SaturatedFraction *float64   `json:"saturated_fraction"`
	Histogram         *Histogram `json:"histogram"`
	// P01 and P99 are the 1st and 99th percentiles, interpolated from the histogram.
	P01 *float64 `json:"p01"`
	P99 *float64 `json:"p99"`
	// Activation is what kind of unit statistics were taken: "relu" (ReLU
	// family: dead fraction), "relu-like" (smooth ReLU-like units such as
	// GELU and SiLU, also when written as a subgraph: dead fraction),
	// "saturating" (bounded units: saturated fraction) or "" (none).
	Activation string `json:"activation,omitempty"`
	// Role is what an activation is for, read from the graph: "hidden",
	// "gate" (its output multiplies a larger tensor), "self-gate" (the
	// sigmoid of x·σ(x)), "head" (a graph output, or reaching one only
	// through shape and post-processing ops), "gate-branch" (feeds only a
	// gate, as the bottleneck of a squeeze-and-excitation branch),
	// "cell-gate" (multiplies a data tensor of its own size: a recurrent
	// cell's gates written out, a gated linear unit); "" for other layers.
	Role string `json:"role,omitempty"`
	// DeadAtHalf is the dead-unit count after the first half of the
	// batches (ReLU family); a final count below it was still falling.
	DeadAtHalf *int `json:"dead_at_half,omitempty"`
	// GateOff and GateOn count a gate's channels that stayed at the lower
	// or upper saturation bound on every sample (pruned in effect, or a
	// gate that does nothing).
	GateOff *int `json:"gate_off,omitempty"`
	GateOn  *int `json:"gate_on,omitempty"`
	// Note explains something particular about the layer (e.g. "LeakyRelu slope 0.01").
	Note string `json:"note,omitempty"`
	// ClippedFraction is the share of this output's values that the node
	// quantizing it clips (outside the integer range), over the whole sample;
	// LevelsUsedFraction the share of integer levels the quantized values
	// take (the mean over scales for per-axis quantization). Both nil unless a
	// quantizing node reads this output.
	ClippedFraction    *float64      `json:"clipped_fraction,omitempty"`
	LevelsUsedFraction *float64      `json:"levels_used_fraction,omitempty"`
	Quantization       *Quantization `json:"quantization,omitempty"`
	// Float16 is set when the model holds this output in float16 (vitals
	// computes it in float32). Float16OverflowFraction is the share of its
	// values beyond ±65504 (Inf in float16), Float16SubnormalFraction the
	// share of non-zero values below 2⁻¹⁴ ≈ 6.1e-5, the smallest normal float16.
	Float16                  bool     `json:"float16,omitempty"`
	Float16OverflowFraction  *float64 `json:"float16_overflow_fraction,omitempty"`
	Float16SubnormalFraction *float64 `json:"float16_subnormal_fraction,omitempty"`
	// GradRMS is √(mean of (dL/dy)²) over every element of the output over
	// the sample (backward pass only; nil without one or where no gradient
	// reaches the layer).
	GradRMS *float64 `json:"grad_rms"`
	Transformer
}

// Transformer holds the transformer-structure fields of a layer entry
// (docs/transformers.md); all empty for other layers.
type Transformer struct {
	// Structure is "attention-probabilities", "attention (fused)" (the first output
	// of a fused attention node, which carries its heads' statistics),
	// "attention-scores" (a tensor on the
	// way into an attention Softmax, where −inf is a mask), "residual-stream"
	// or "normalisation (<kind>)".
	Structure string `json:"structure,omitempty"`
	// Block is the attention block (0-based in depth order) of an
	// attention-probabilities entry, or for a residual-stream entry the last
	// attention block before it (0 before the first).
	Block *int `json:"block,omitempty"`
	// ResidualIndex is a residual-stream entry's position in the stream (0-based, depth order).
	ResidualIndex *int `json:"residual_index,omitempty"`
	// AttentionEntropy[h] is head h's mean over query rows with K > 1 of
	// H/ln K, H = −Σ p ln p over the K keys with non-zero probability.
	AttentionEntropy []float64 `json:"attention_entropy,omitempty"`
	// AttentionMaxProb[h] is head h's mean over all rows of max_j p_j.
	AttentionMaxProb []float64 `json:"attention_max_prob,omitempty"`
	// AttentionOneHotRows[h] counts head h's rows with K = 1 (left out of the entropy).
	AttentionOneHotRows []int64 `json:"attention_one_hot_rows,omitempty"`
	// AttentionMask says how masked keys were detected.
	AttentionMask string `json:"attention_mask,omitempty"`
	// MaskedValues counts the −inf values of an attention-scores tensor (a
	// mask, not counted in Nonfinite).
	MaskedValues int64 `json:"masked_values,omitempty"`
	// MedianAbs is the median of |x| from a log-spaced histogram (32 bins per
	// octave); MaxOverMedian = max|x| / MedianAbs.
	MedianAbs     *float64 `json:"median_abs,omitempty"`
	MaxOverMedian *float64 `json:"max_over_median,omitempty"`
	// OutlierDims are the feature indices (last axis) with |x| ≥ 6 at ≥ 6% of
	// positions (Dettmers et al. 2022).
	OutlierDims *[]int `json:"outlier_dims,omitempty"`
	// TokenSimilarity is the mean over sequences of the mean pairwise cosine
	// similarity of the token vectors (rank-3 tensors (B, S, D)).
	TokenSimilarity *float64 `json:"token_similarity,omitempty"`
}

// Histogram has len(Counts) == len(Edges)-1 bins over [Edges[0], Edges[last]];
// the counts sum to the layer's finite count (NaN/Inf are counted in Layer.Nonfinite).
type Histogram struct {
	Edges  []float64 `json:"edges"`
	Counts []int64   `json:"counts"`
}

// Weight is the statistics of one weight tensor of a Conv, Gemm or MatMul node.
type Weight struct {
	Name  string `json:"name"`
	Node  string `json:"node"`
	Shape []int  `json:"shape"`
	FanIn int    `json:"fan_in"`
	// FanOut is dims[0]·∏k for a convolution, the output units of a dense layer.
	FanOut int      `json:"fan_out"`
	Std    *float64 `json:"std"`
	// Gain is std·√fan_in.
	Gain *float64 `json:"gain"`
	// ScaleVsHe is gain/√2 (He et al. 2015); ScaleVsXavier is gain/1 (Glorot & Bengio 2010).
	ScaleVsHe     *float64 `json:"scale_vs_he"`
	ScaleVsXavier *float64 `json:"scale_vs_xavier"`
	IdenticalRows int      `json:"identical_rows"`
	ZeroRows      int      `json:"zero_rows"`
	Rows          int      `json:"rows"`
	Nonfinite     int64    `json:"nonfinite"`
	// FollowedBy is the activation (or normalisation) that follows the layer, which sets the reference gain.
	FollowedBy string `json:"followed_by,omitempty"`
	// Backward pass only (nil otherwise): GradNorm is the Frobenius norm
	// ‖dL/dW‖_F, Norm is ‖W‖_F, GradToWeight their ratio, UpdateRatio the
	// plain-SGD step lr·‖dL/dW‖/‖W‖ (with a learning rate).
	GradNorm     *float64 `json:"grad_norm"`
	Norm         *float64 `json:"norm"`
	GradToWeight *float64 `json:"grad_to_weight"`
	UpdateRatio  *float64 `json:"update_ratio"`
}

// Severity of a finding.
type Severity string

// Severities in increasing order.
const (
	Info    Severity = "info"
	Warning Severity = "warning"
	Error   Severity = "error"
)

// Level orders severities: info 0, warning 1, error 2.
func (s Severity) Level() int {
	switch s {
	case Error:
		return 2
	case Warning:
		return 1
	}
	return 0
}

// Finding is one verdict of one check on one node, with the numbers it was judged on.
type Finding struct {
	Check    string         `json:"check"`
	Severity Severity       `json:"severity"`
	Node     string         `json:"node"`
	Message  string         `json:"message"`
	Evidence map[string]any `json:"evidence"`
	// Strength says how far past its threshold the value is, for ranking:
	// 1 + log₂(value/threshold), between 1 and 8 (stats.Pass.Emit); a
	// compare regression adds 1 to the finding it repeats.
	Strength float64 `json:"-"`
}

// Rank is one node's place in the ranking of unhealthy layers.
type Rank struct {
	Node   string   `json:"node"`
	Score  float64  `json:"score"`
	Checks []string `json:"checks"`
}

// Output summarises the final output over the sample.
type Output struct {
	Name           string   `json:"name"`
	IsDistribution bool     `json:"is_distribution"`
	Classes        int      `json:"classes"`
	MeanMaxProb    *float64 `json:"mean_max_prob"`
	Accuracy       *float64 `json:"accuracy"`
	CrossEntropy   *float64 `json:"cross_entropy"`
	LnClasses      *float64 `json:"ln_classes"`
	Labeled        int      `json:"labeled"`
}

// Comparison holds what `vitals compare` adds: the old run and per-layer differences.
type Comparison struct {
	Old       string        `json:"old"`
	New       string        `json:"new"`
	OldLayers []Layer       `json:"old_layers"`
	Layers    []LayerDelta  `json:"layers"`
	Weights   []WeightDelta `json:"weights"`
	Unmatched []string      `json:"unmatched"`
	Agreement *Agreement    `json:"agreement"`
}

// LayerDelta is the change of one matched layer from OLD to NEW.
type LayerDelta struct {
	Node         string   `json:"node"`
	OldNode      string   `json:"old_node"`
	Op           string   `json:"op"`
	MeanOld      *float64 `json:"mean_old"`
	MeanNew      *float64 `json:"mean_new"`
	StdOld       *float64 `json:"std_old"`
	StdNew       *float64 `json:"std_new"`
	DeadOld      *float64 `json:"dead_old"`
	DeadNew      *float64 `json:"dead_new"`
	SaturatedOld *float64 `json:"saturated_old"`
	SaturatedNew *float64 `json:"saturated_new"`
	// HistogramDistance is the total-variation distance between the two histograms on a common grid (0..1).
	HistogramDistance *float64 `json:"histogram_distance"`
	// SQNRdB is 10·log10(Σx²/Σ(x−x̂)²) over the whole sample, x OLD's tensor and
	// x̂ NEW's (dequantized when it is an integer tensor); set when comparing a
	// float model with a quantized or float16 one. SQNRMatch says how the
	// layers were paired: "name" (same tensor name), "quantizer" (a
	// DequantizeLinear against the tensor its QuantizeLinear reads) or
	// "order" (the k-th linear layer of each graph). Both omitted otherwise.
	SQNRdB    *float64 `json:"sqnr_db,omitempty"`
	SQNRMatch string   `json:"sqnr_match,omitempty"`
}

// WeightDelta is ‖W_new − W_old‖/‖W_old‖ for one weight tensor.
type WeightDelta struct {
	Name           string   `json:"name"`
	Node           string   `json:"node"`
	RelativeChange *float64 `json:"relative_change"`
}

// Agreement compares the two checkpoints' final outputs.
type Agreement struct {
	Output     string   `json:"output"`
	Top1       *float64 `json:"top1_agreement"`
	MeanKL     *float64 `json:"mean_kl"`
	MaxAbsDiff *float64 `json:"max_abs_diff"`
	Samples    int      `json:"samples"`
}

// Num returns a pointer to x, or nil when x is NaN or ±Inf (JSON null).
func Num(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

// Val dereferences p, returning NaN for nil.
func Val(p *float64) float64 {
	if p == nil {
		return math.NaN()
	}
	return *p
}

// IntPtr returns &v.
func IntPtr(v int) *int { return &v }

// LayerByNode returns the layer of a node, or nil.
func (r *Report) LayerByNode(node string) *Layer {
	for i := range r.Layers {
		if r.Layers[i].Node == node {
			return &r.Layers[i]
		}
	}
	return nil
}

// Caution is the closing statement every human-readable report ends with.
const Caution = "These statistics describe the given sample only. A report without findings does not certify the model's accuracy, robustness, fairness or fitness for a safety-relevant use; that stays with the team's own evaluation and the rules that apply where it is deployed."
