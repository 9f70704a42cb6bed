package stats

import (
	"math"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
)

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
	// FeedWeight maps an activation layer (index into Report.Layers) to the
	// weight (index into Report.Weights) of the linear layer that feeds it
	// with no normalisation between them.
	FeedWeight map[int]int
	// Baseline is OLD's statistics when `vitals compare` judges NEW
	// against it (nil otherwise), OldToNew maps OLD layer nodes to the
	// matched NEW ones, and WeightChanges are the finite relative weight
	// changes ‖W_new − W_old‖/‖W_old‖.
	Baseline      *Collected
	OldToNew      map[string]string
	WeightChanges []float64
	// SQNR is the float-against-quantized comparison of OLD and NEW (nil
	// otherwise); set it on NEW before Compare, which writes its sqnr_db
	// onto the compare layers before the compare checks read it.
	SQNR *SQNR
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

var normOps = map[string]bool{"BatchNormalization": true, "LayerNormalization": true, "InstanceNormalization": true,
	"GroupNormalization": true, "LRN": true, "MeanVarianceNormalization": true, "RMSNormalization": true,
	"LpNormalization": true, "SimplifiedLayerNormalization": true}

// globalPoolOps reduce every position of a feature map to one value per
// channel: a chain of activations ends there, as at a normalisation (the
// spread of a mean over H·W positions is not comparable with the
// per-position spread before it).
var globalPoolOps = map[string]bool{"GlobalAveragePool": true, "GlobalMaxPool": true, "GlobalLpPool": true}

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
		} else {
			is.Min, is.Max = report.Num(la.mom.Min), report.Num(la.mom.Max)
		}
		is.SelfNormalised = c.selfNormalised(name)
		is.RecurrentState = c.isRecurrentState(name, 0)
		is.FirstNorm = c.firstNorm(name)
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
		is.ClippedFraction, is.LevelsUsedFraction, is.Quantization = c.quant.quantFor(name)
		r.Input.PerInput = append(r.Input.PerInput, is)
	}
	if c.half != nil {
		r.Model.Float16Weights = c.half.weights
	}
	col := &Collected{Report: r, Graph: g}
	c.mergeConcats()
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
		if la.act.kind != ActNone && la.output == la.node.Outputs[0] {
			l.Role = c.roleOf(la)
		}
		if la.act.kind != ActNone && len(la.everPos) > 0 {
			l.Units = report.IntPtr(len(la.everPos))
			l.UnitAxis = report.IntPtr(la.unitAxis)
			if la.act.kind == ActReLU {
				l.Activation = "relu"
				if la.act.smooth {
					l.Activation = "relu-like"
				}
				dead := 0
				for _, e := range la.everPos {
					if !e {
						dead++
					}
				}
				l.DeadFraction = report.Num(float64(dead) / float64(len(la.everPos)))
				if h := c.halfBatch(len(la.deadTrail)); h >= 0 {
					l.DeadAtHalf = report.IntPtr(int(la.deadTrail[h]))
				}
			} else {
				l.Activation = "saturating"
			}
			if la.act.hasSat && la.satN > 0 {
				l.SaturatedFraction = report.Num(float64(la.sat) / float64(la.satN))
			}
			if l.Role == RoleGate && len(la.unitLo) > 0 {
				lo, hi := la.act.satBounds() // NaN bounds (no rule) match nothing
				off, on := 0, 0
				for u := range la.unitLo {
					if la.unitHi[u] <= lo {
						off++
					}
					if la.unitLo[u] >= hi {
						on++
					}
				}
				l.GateOff, l.GateOn = report.IntPtr(off), report.IntPtr(on)
			}
		}
		l.ClippedFraction, l.LevelsUsedFraction, l.Quantization = c.quant.quantFor(la.output)
		if isHalf, over, sub := c.half.result(la.output); isHalf {
			l.Float16, l.Float16OverflowFraction, l.Float16SubnormalFraction = true, report.Num(over), report.Num(sub)
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
	col.Stacks, col.FeedWeight = c.stacks(layerIdx, r)
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

// halfBatch is the index of the batch after which half the sample has been
// seen (by the rows AddInputs counted, else by batches), for a trail of n
// batches; −1 when there are fewer than 2.
func (c *Collector) halfBatch(n int) int {
	if n < 2 {
		return -1
	}
	if len(c.batchRows) == n {
		total := 0
		for _, r := range c.batchRows {
			total += r
		}
		cum := 0
		for i, r := range c.batchRows {
			cum += r
			if 2*cum >= total {
				return min(i, n-2) // never the last batch: the second half needs one
			}
		}
	}
	return (n+1)/2 - 1
}

// selfNormalised reports whether every reader of a graph input is a
// normalisation layer or an elementwise Sub/Div/Mul/Add with a constant
// (the graph does its own preprocessing, (x − mean)/std).
func (c *Collector) selfNormalised(name string) bool {
	readers := c.consumer[name]
	if len(readers) == 0 {
		return false
	}
	for _, n := range readers {
		switch {
		case normOps[n.OpType]:
		case (n.OpType == "Sub" || n.OpType == "Div" || n.OpType == "Mul" || n.OpType == "Add") && len(n.Inputs) == 2:
			other := n.Inputs[0]
			if other == name {
				other = n.Inputs[1]
			}
			if _, ok := constValue(c.Model.Graph, other); !ok {
				return false
			}
		default:
			return false
		}
	}
	return true
}

// firstNorm is the nearest BatchNormalization downstream of value, at most
// 4 nodes away, breadth first ("" if none).
func (c *Collector) firstNorm(value string) string {
	frontier := []string{value}
	seen := map[string]bool{}
	for depth := 0; depth < 4 && len(frontier) > 0; depth++ {
		var next []string
		for _, v := range frontier {
			for _, n := range c.consumer[v] {
				if n.OpType == "BatchNormalization" {
					return n.Name
				}
				for _, o := range n.Outputs {
					if o != "" && !seen[o] {
						seen[o] = true
						next = append(next, o)
					}
				}
			}
		}
		frontier = next
	}
	return ""
}

// isRecurrentState reports whether value reaches an LSTM/GRU/RNN as its
// initial state (input 5 or 6), through reshaping ops only.
func (c *Collector) isRecurrentState(value string, depth int) bool {
	readers := c.consumer[value]
	if len(readers) == 0 || depth > 8 {
		return false
	}
	for _, n := range readers {
		switch {
		case n.OpType == "LSTM" || n.OpType == "GRU" || n.OpType == "RNN":
			for i, in := range n.Inputs {
				if in == value && i < 5 {
					return false
				}
			}
		case sameValueOps[n.OpType] && len(n.Outputs) > 0 && len(n.Inputs) > 0 && n.Inputs[0] == value:
			if !c.isRecurrentState(n.Outputs[0], depth+1) {
				return false
			}
		default:
			return false
		}
	}
	return true
}

// followerOf names what follows a linear node: an activation (its actkind
// name, also for one written as a subgraph such as x·sigmoid(x)),
// "normalization", or "none", looking through bias adds and reshapes.
func (c *Collector) followerOf(n *loader.Node) string {
	cons := c.consumer
	cur := n
	for step := 0; step < 8; step++ {
		if len(cur.Outputs) == 0 {
			return "none"
		}
		next := cons[cur.Outputs[0]]
		if top := c.oneComposite(next); top != nil {
			return c.composite.top[top]
		}
		if len(next) != 1 {
			return "none"
		}
		nx := next[0]
		switch {
		case c.actOp(nx) != "":
			return c.actOp(nx)
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

// oneComposite returns the top of the composite activation when every node
// in readers belongs to it (x·sigmoid(x) reads x in the Sigmoid and the
// Mul), else nil.
func (c *Collector) oneComposite(readers []*loader.Node) *loader.Node {
	var top *loader.Node
	for _, n := range readers {
		t := c.composite.inner[n]
		if _, ok := c.composite.top[n]; ok {
			t = n
		}
		if t == nil || (top != nil && t != top) {
			return nil
		}
		top = t
	}
	return top
}

// stacks builds chains of activation layers: the predecessor of an activation
// is the nearest activation upstream along data inputs, unless a normalisation
// node or a global pooling lies between them.
func (c *Collector) stacks(layerIdx map[*layerAcc]int, r *report.Report) ([]Stack, map[int]int) {
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
	feed := map[int]int{}
	var acts []*layerAcc
	for _, la := range c.layers {
		if _, ok := layerIdx[la]; !ok || c.actOp(la.node) == "" || la.output != la.node.Outputs[0] || c.isGate(la.output) {
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
				if sg := c.producer[in]; sg != nil && c.isSelfGate(sg) {
					continue // x·σ(x) is one path: the σ(x) of a SiLU/hard-swish written out
				}
				paths++
				if n := c.valuesOf(in); n > most {
					p, most = c.producer[in], n
				}
			}
			lk.merged = lk.merged || (paths > 1 && cur != la.node)
			if p == nil || normOps[p.OpType] || globalPoolOps[p.OpType] {
				break
			}
			if wi, ok := weightIdx[p.Name]; ok {
				lk.weights = append([]int{wi}, lk.weights...)
			}
			if c.actOp(p) != "" {
				lk.pred = c.byOut[p.Outputs[0]]
				break
			}
			cur = p
		}
		links[la] = lk
		if len(lk.weights) > 0 {
			feed[layerIdx[la]] = lk.weights[len(lk.weights)-1]
		}
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
	return out, feed
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
