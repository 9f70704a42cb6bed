package stats

import (
	"math"
	"strconv"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
)

func fmtG(x float64) string { return strconv.FormatFloat(x, 'g', 4, 64) }

// Collected is everything the checks read: the report's layers, weights,
// inputs and output, plus the graph structure they need.
type Collected struct {
	Report *report.Report
	// Stacks are chains of activation layers (indices into Report.Layers) with
	// no normalisation between consecutive members, in depth order.
	Stacks []Stack
	// BatchNorms compares each BatchNormalization's input statistics with its stored running statistics.
	BatchNorms []BNStat
	// LayerKind[i] is the activation kind of Report.Layers[i].
	LayerKind []ActKind
	// Graph is the flat view of the model the layer and weight names refer
	// to (probe.Flat): subgraph nodes and initializers under qualified names.
	Graph *loader.Graph
}

// Stack is a chain of activation layers and the weights of the linear layers between them.
type Stack struct {
	Layers  []int // indices into Report.Layers
	Weights []int // indices into Report.Weights, in order
	// Merged: a node between two members reads two data paths (a residual
	// Add, a Concat, a gating Mul); the chain follows one of them, so the
	// product of its weight gains does not predict the spread.
	Merged bool
}

// BNStat holds per-channel drift numbers of one BatchNormalization node.
type BNStat struct {
	Node      string
	Channels  int
	MeanShift []float64 // |μ_sample − μ_run| / √(var_run + ε)
	VarRatio  []float64 // var_sample / var_run
	GammaZero int       // channels with |γ| < 1e-3
	VarZero   int       // channels with running var < 1e-6 (besides ε)
	// Initial: every running mean is 0 and every running variance 1, the
	// values BatchNorm starts from: never updated by training, or reset.
	Initial bool
}

// reluLike lists activations whose reference gain is √2 (He et al. 2015's
// derivation is for ReLU; the smooth ReLU-like units are treated the same, common practice).
var reluLike = map[string]bool{"Relu": true, "LeakyRelu": true, "PRelu": true, "ThresholdedRelu": true,
	"HardSwish": true, "Gelu": true, "Mish": true, "Swish": true, "Elu": true, "Celu": true}

var activationOps = map[string]bool{"Relu": true, "LeakyRelu": true, "PRelu": true, "ThresholdedRelu": true,
	"HardSwish": true, "Gelu": true, "Mish": true, "Swish": true, "Elu": true, "Celu": true, "Selu": true,
	"Tanh": true, "Sigmoid": true, "HardSigmoid": true, "Softsign": true, "Softplus": true, "Clip": true}

var normOps = map[string]bool{"BatchNormalization": true, "LayerNormalization": true, "InstanceNormalization": true,
	"GroupNormalization": true, "LRN": true, "MeanVarianceNormalization": true, "RMSNormalization": true,
	"LpNormalization": true, "SimplifiedLayerNormalization": true}

// Finish turns the accumulators into the report model and the structure the checks need.
func (c *Collector) Finish(source string) *Collected {
	c.Wait()
	g := c.flat.Graph // subgraph nodes and weights included
	r := &report.Report{Tool: "vitals", Thresholds: map[string]float64{}}
	r.Model = report.Model{Path: c.Model.Path, Opset: c.Model.Opsets[""], Producer: c.Model.Producer,
		Nodes: len(g.Nodes), Parameters: ParameterCount(g)}
	r.Coverage = c.coverage()
	if c.Model.ProducerVersion != "" {
		r.Model.Producer += " " + c.Model.ProducerVersion
	}
	r.Input = report.Input{Source: source, Samples: c.Samples, PerInput: []report.InputStat{}}
	for _, name := range c.inputOrder {
		la := c.inputs[name]
		is := report.InputStat{Name: name, Shape: la.shape, Mean: report.Num(la.mom.Mean), Std: report.Num(la.mom.Std())}
		if la.mom.N == 0 {
			is.Mean, is.Std = nil, nil
		}
		if len(la.perChan) > 0 && len(la.shape) > 0 {
			ax := 1
			if len(la.shape) < 3 {
				ax = len(la.shape) - 1
			}
			is.ChannelAxis = report.IntPtr(ax)
			for _, m := range la.perChan {
				is.ChannelMean = append(is.ChannelMean, m.Mean)
				is.ChannelStd = append(is.ChannelStd, m.Std())
			}
		}
		r.Input.PerInput = append(r.Input.PerInput, is)
	}
	col := &Collected{Report: r, Graph: g}
	layerIdx := map[*layerAcc]int{}
	for _, la := range c.layers {
		if la.mom.N == 0 && la.mom.Nonfinite == 0 {
			continue // never observed (not float, or not run)
		}
		l := report.Layer{Node: la.node.Name, Op: la.node.OpType, Output: la.output, Depth: la.depth,
			Shape: la.shape, Count: la.mom.N + la.mom.Nonfinite, Nonfinite: la.mom.Nonfinite, Note: la.act.note}
		if la.mom.N > 0 {
			l.Mean, l.Std = report.Num(la.mom.Mean), report.Num(la.mom.Std())
			l.Min, l.Max = report.Num(la.mom.Min), report.Num(la.mom.Max)
			l.ZeroFraction = report.Num(float64(la.mom.Zeros) / float64(la.mom.N+la.mom.Nonfinite))
			e, cnt := la.hist.Trimmed()
			if cnt != nil {
				l.Histogram = &report.Histogram{Edges: e, Counts: cnt}
				l.P01, l.P99 = report.Num(la.hist.Quantile(0.01)), report.Num(la.hist.Quantile(0.99))
			}
		}
		if la.act.kind != ActNone && len(la.everPos) > 0 {
			l.Units = report.IntPtr(len(la.everPos))
			l.UnitAxis = report.IntPtr(la.unitAxis)
			if la.act.kind == ActReLU {
				l.Activation = "relu"
				dead := 0
				for _, e := range la.everPos {
					if !e {
						dead++
					}
				}
				l.DeadFraction = report.Num(float64(dead) / float64(len(la.everPos)))
			} else {
				l.Activation = "saturating"
			}
			if la.act.hasSat && la.satN > 0 {
				l.SaturatedFraction = report.Num(float64(la.sat) / float64(la.satN))
			}
		}
		layerIdx[la] = len(r.Layers)
		r.Layers = append(r.Layers, l)
		col.LayerKind = append(col.LayerKind, la.act.kind)
	}
	r.Weights = WeightStats(g, c.followerOf)
	if r.Weights == nil {
		r.Weights = []report.Weight{}
	}
	if r.Layers == nil {
		r.Layers = []report.Layer{}
	}
	col.Stacks = c.stacks(layerIdx, r)
	col.BatchNorms = c.batchNorms()
	if c.out != nil && c.out.rows > 0 {
		o := c.out
		ro := &report.Output{Name: o.name, Classes: o.classes, IsDistribution: o.distRows == o.rows,
			MeanMaxProb: report.Num(o.sumMaxProb / float64(o.rows)), Labeled: int(o.labeled)}
		if o.labeled > 0 {
			ro.Accuracy = report.Num(float64(o.correct) / float64(o.labeled))
			ro.CrossEntropy = report.Num(o.sumCE / float64(o.labeled))
			ro.LnClasses = report.Num(math.Log(float64(o.classes)))
		}
		r.Output = ro
	}
	r.Findings = []report.Finding{}
	r.Ranking = []report.Rank{}
	if c.tf != nil {
		c.tf.finish(col)
	}
	return col
}

// followerOf names what follows a linear node: an activation op type,
// "normalization", or "none", looking through bias adds and reshapes.
func (c *Collector) followerOf(n *loader.Node) string {
	cons := c.consumer
	cur := n
	for step := 0; step < 8; step++ {
		if len(cur.Outputs) == 0 {
			return "none"
		}
		next := cons[cur.Outputs[0]]
		if len(next) != 1 {
			return "none"
		}
		nx := next[0]
		switch {
		case activationOps[nx.OpType]:
			return nx.OpType
		case normOps[nx.OpType]:
			return "normalization"
		case nx.OpType == "Add" || nx.OpType == "Reshape" || nx.OpType == "Flatten" || nx.OpType == "Identity" || nx.OpType == "Squeeze" || nx.OpType == "Unsqueeze" || nx.OpType == "Transpose":
			cur = nx
		default:
			return "none"
		}
	}
	return "none"
}

// stacks builds chains of activation layers: the predecessor of an activation
// is the nearest activation upstream along data inputs, unless a normalisation
// node lies between them.
func (c *Collector) stacks(layerIdx map[*layerAcc]int, r *report.Report) []Stack {
	weightIdx := map[string]int{}
	for i, w := range r.Weights {
		weightIdx[w.Node] = i
	}
	type link struct {
		pred    *layerAcc
		weights []int
		merged  bool
	}
	links := map[*layerAcc]link{}
	var acts []*layerAcc
	for _, la := range c.layers {
		if _, ok := layerIdx[la]; !ok || !activationOps[la.node.OpType] || la.output != la.node.Outputs[0] || c.isGate(la.output) {
			continue
		}
		acts = append(acts, la)
		var lk link
		cur := la.node
		for step := 0; step < 64; step++ {
			// the signal path: the data input with the most values (a
			// gating Mul's x, not its [N, C, 1, 1] gate), the first of equals
			var p *loader.Node
			paths, most := 0, -1
			for _, in := range cur.Inputs {
				if !c.dataDep[in] {
					continue
				}
				paths++
				if n := c.valuesOf(in); n > most {
					p, most = c.producer[in], n
				}
			}
			lk.merged = lk.merged || (paths > 1 && cur != la.node)
			if p == nil || normOps[p.OpType] {
				break
			}
			if wi, ok := weightIdx[p.Name]; ok {
				lk.weights = append([]int{wi}, lk.weights...)
			}
			if activationOps[p.OpType] {
				lk.pred = c.byOut[p.Outputs[0]]
				break
			}
			cur = p
		}
		links[la] = lk
	}
	isPred := map[*layerAcc]bool{}
	for _, lk := range links {
		if lk.pred != nil {
			isPred[lk.pred] = true
		}
	}
	var out []Stack
	for _, la := range acts {
		if isPred[la] {
			continue
		}
		var chain []*layerAcc
		var ws []int
		merged := false
		for cur := la; cur != nil && len(chain) < 10000; cur = links[cur].pred {
			chain = append([]*layerAcc{cur}, chain...)
			ws = append(append([]int{}, links[cur].weights...), ws...)
			merged = merged || (links[cur].merged && links[cur].pred != nil)
		}
		if len(chain) < 2 {
			continue
		}
		st := Stack{Weights: ws, Merged: merged}
		for _, l := range chain {
			st.Layers = append(st.Layers, layerIdx[l])
		}
		out = append(out, st)
	}
	return out
}

// isGate reports whether a value only scales a larger one: every reader is
// a Mul whose other data input holds more values (a squeeze-and-excitation
// gate [N, C, 1, 1] times its feature map). A gate's spread says nothing
// about the signal's, so gate activations are in no stack.
func (c *Collector) isGate(name string) bool {
	readers := c.consumer[name]
	if len(readers) == 0 {
		return false
	}
	own := c.valuesOf(name)
	for _, n := range readers {
		if n.OpType != "Mul" || len(n.Inputs) != 2 {
			return false
		}
		other := n.Inputs[0]
		if other == name {
			other = n.Inputs[1]
		}
		if !c.dataDep[other] || c.valuesOf(other) <= own {
			return false
		}
	}
	return true
}

// valuesOf is the number of values of an observed value in its first batch
// (0 when it was not observed: a graph input, a non-float value).
func (c *Collector) valuesOf(name string) int {
	la := c.byOut[name]
	if la == nil {
		la = c.inputs[name]
	}
	if la == nil || la.shape == nil {
		return 0
	}
	n := 1
	for _, d := range la.shape {
		n *= d
	}
	return n
}

// batchNorms compares sample statistics at each BatchNormalization input with
// its stored running statistics (Ioffe & Szegedy 2015: inference normalises
// with population statistics, so they should match the data).
func (c *Collector) batchNorms() []BNStat {
	g := c.flat.Graph
	var out []BNStat
	for _, n := range g.Nodes {
		if n.OpType != "BatchNormalization" || len(n.Inputs) < 5 {
			continue
		}
		var perChan []Moments
		if la := c.byOut[n.Inputs[0]]; la != nil {
			perChan = la.perChan
		} else if la := c.inputs[n.Inputs[0]]; la != nil {
			perChan = la.perChan
		}
		gamma, ok1 := constValue(g, n.Inputs[1])
		mean, ok2 := constValue(g, n.Inputs[3])
		vr, ok3 := constValue(g, n.Inputs[4])
		if !ok1 || !ok2 || !ok3 || len(perChan) == 0 || mean.Size() != len(perChan) {
			continue
		}
		eps := 1e-5
		if a := n.Attrs["epsilon"]; a != nil {
			eps = float64(a.F)
		}
		bs := BNStat{Node: n.Name, Channels: len(perChan), Initial: true}
		for ch, m := range perChan {
			rm, rv := mean.Float64At(ch), vr.Float64At(ch)
			bs.Initial = bs.Initial && rm == 0 && rv == 1
			bs.MeanShift = append(bs.MeanShift, math.Abs(m.Mean-rm)/math.Sqrt(rv+eps))
			bs.VarRatio = append(bs.VarRatio, m.Var()/(rv+eps))
			if math.Abs(gamma.Float64At(ch)) < 1e-3 {
				bs.GammaZero++
			}
			if rv < 1e-6 {
				bs.VarZero++
			}
		}
		out = append(out, bs)
	}
	return out
}
