package stats

import (
	"fmt"
	"math"
	"sync"
	"sync/atomic"

	"github.com/vitals-health/vitals/internal/actkind"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/tensor"
)

// ActKind says which unit statistics a node's output gets.
type ActKind int

// Activation kinds.
const (
	ActNone       ActKind = iota
	ActReLU               // ReLU family: a unit is dead if never > 0
	ActSaturating         // bounded: share of outputs at the bounds
)

// actInfo describes one activation node: its kind and saturation rule.
type actInfo struct {
	kind ActKind
	// With hasSat, a value y counts as saturated when y <= satLo or
	// y >= satHi (y < satLo or y > satHi when strict; passParams turns a
	// strict bound into the next float32 inward). Without it the node has
	// no saturation rule and no saturated fraction.
	satLo, satHi float64
	strict       bool
	hasSat       bool
	smooth       bool // a smooth ReLU-like unit (actkind.Smooth)
	note         string
}

// classify decides from op type and attributes what kind of activation a
// node is, using the one list of activation operators (internal/actkind);
// op is the node's op type, or the actkind name of the composite activation
// (x·sigmoid(x), erf-GELU) the node ends.
// Saturation limits: tanh |y|>0.99, sigmoid y<0.01 or y>0.99, softsign |y|>0.99
// (common practice: the derivative there is under ~2% of its peak);
// softplus y<0.01 (its derivative 1−e^(−y) is then under 1%, the same rule);
// hard variants (HardSigmoid, HardTanh-style Clip) at their clip bounds.
// Smooth ReLU-like units (GELU, SiLU/Swish, Mish, ELU, CELU, SELU,
// HardSwish) are > 0 exactly when their input is > 0, so "never > 0" is
// counted as dead like a ReLU unit, with a note that they still pass a small
// gradient.
func classify(n *loader.Node, op string, g *loader.Graph) actInfo {
	a, ok := actkind.Lookup(op)
	if !ok {
		return actInfo{}
	}
	switch op {
	case "LeakyRelu":
		alpha := float32(0.01)
		if a := n.Attrs["alpha"]; a != nil {
			alpha = a.F
		}
		return actInfo{kind: ActReLU, note: "LeakyRelu slope " + report.FmtFloat(float64(alpha)) + ": a dead unit still passes that share of the gradient"}
	case "PRelu":
		return actInfo{kind: ActReLU, note: "PRelu: a dead unit still passes its learned negative slope"}
	case "Tanh", "Softsign":
		return actInfo{kind: ActSaturating, hasSat: true, satLo: -0.99, satHi: 0.99, strict: true}
	case "Sigmoid":
		return actInfo{kind: ActSaturating, hasSat: true, satLo: 0.01, satHi: 0.99, strict: true}
	case "Softplus":
		return actInfo{kind: ActSaturating, hasSat: true, satLo: 0.01, satHi: math.Inf(1), strict: true}
	case "HardSigmoid":
		return actInfo{kind: ActSaturating, hasSat: true, satLo: 0, satHi: 1}
	case "Clip":
		lo, hi, ok := clipBounds(n, g)
		if !ok {
			return actInfo{}
		}
		if lo == 0 {
			if math.IsInf(hi, 1) {
				return actInfo{kind: ActReLU, note: "Clip(0, ∞) treated as ReLU"}
			}
			h := report.FmtFloat(hi)
			return actInfo{kind: ActReLU, note: "Clip(0, " + h + ") treated as ReLU" + h,
				hasSat: true, satLo: math.Inf(-1), satHi: hi}
		}
		if !math.IsInf(lo, -1) && !math.IsInf(hi, 1) {
			return actInfo{kind: ActSaturating, hasSat: true, satLo: lo, satHi: hi, note: "Clip treated as hard tanh"}
		}
		return actInfo{}
	}
	switch a.Family {
	case actkind.ReLU:
		return actInfo{kind: ActReLU}
	case actkind.Smooth:
		name := op
		if op != n.OpType {
			name = compositeForm[op] + " read as " + op
		}
		note := name + ": > 0 only for inputs > 0; a dead unit still passes a small gradient"
		return actInfo{kind: ActReLU, smooth: true, note: note}
	}
	return actInfo{}
}

// actOp is the activation a node is, by its actkind name ("" for none):
// its op type when that is an activation operator, or the composite
// activation it ends; a node inside a composite activation is none.
func (c *Collector) actOp(n *loader.Node) string {
	if name, ok := c.composite.top[n]; ok {
		return name
	}
	if _, in := c.composite.inner[n]; in || !actkind.Is(n.OpType) {
		return ""
	}
	return n.OpType
}

// classifyNode is classify for a node of the collector's graph.
// qlinearActs are the quantized operators whose dequantized output is
// classified like an activation (classifyQuantized).
var qlinearActs = map[string]bool{"QLinearLeakyRelu": true, "QLinearSigmoid": true, "QLinearConv": true, "QLinearMatMul": true, "QGemm": true}

func (c *Collector) classifyNode(n *loader.Node) actInfo {
	if _, ok := qlinearActs[n.OpType]; ok {
		return classifyQuantized(n, c.flat.Graph)
	}
	op := c.actOp(n)
	if op == "" {
		return actInfo{}
	}
	return classify(n, op, c.flat.Graph)
}

// clipBounds reads Clip's bounds from attributes (opset<11) or constant inputs.
func clipBounds(n *loader.Node, g *loader.Graph) (lo, hi float64, ok bool) {
	lo, hi = math.Inf(-1), math.Inf(1)
	if a := n.Attrs["min"]; a != nil {
		lo = float64(a.F)
	}
	if a := n.Attrs["max"]; a != nil {
		hi = float64(a.F)
	}
	for i, dst := range []*float64{&lo, &hi} {
		if len(n.Inputs) > i+1 && n.Inputs[i+1] != "" {
			t, found := constValue(g, n.Inputs[i+1])
			if !found || t.Size() < 1 {
				return 0, 0, false
			}
			*dst = t.Float64At(0)
		}
	}
	return lo, hi, true
}

// constValue finds a tensor that is an initializer or the output of a
// Constant node, also through Identity nodes: exporters that store equal
// initializers once alias the others with an Identity (PyTorch does, for
// example, for BatchNorm running statistics still at their initial 0 and 1).
func constValue(g *loader.Graph, name string) (*tensor.Tensor, bool) {
	return constTensor(g, name, true)
}

// plainConst is constValue without dequantization: a tensor stored in the
// model as it is (a quantized model's dequantized weights are not one).
func plainConst(g *loader.Graph, name string) (*tensor.Tensor, bool) {
	return constTensor(g, name, false)
}

// constTensor is constValue, a DequantizeLinear of constants counting as a
// constant only with dequant.
func constTensor(g *loader.Graph, name string, dequant bool) (*tensor.Tensor, bool) {
	for hop := 0; hop < 16; hop++ {
		if t, ok := g.Initializers[name]; ok {
			return t, true
		}
		next := ""
		for _, n := range g.Nodes {
			if len(n.Outputs) == 0 || n.Outputs[0] != name {
				continue
			}
			switch {
			case n.OpType == "Constant":
				if a := n.Attrs["value"]; a != nil && a.T != nil {
					return a.T, true
				}
				if a := n.Attrs["value_float"]; a != nil {
					return tensor.From([]float32{a.F}), true
				}
			case n.OpType == "Identity" && len(n.Inputs) == 1:
				next = n.Inputs[0]
			case n.OpType == "DequantizeLinear" && dequant: // quantized weights of a QDQ model (quant.go)
				return dequantConst(g, n)
			}
			break
		}
		if next == "" {
			return nil, false
		}
		name = next
	}
	return nil, false
}

// layerAcc accumulates the statistics of one node output.
type layerAcc struct {
	node     *loader.Node
	output   string
	depth    int
	shape    []int
	mom      Moments
	hist     Histogram
	act      actInfo
	unitKind int // 1: channel axis (conv); 2: last axis (dense); 0: decide by rank
	unitAxis int
	everPos  []bool
	notYet   []int32 // units of everPos still false
	// deadTrail is the number of units not yet seen positive after each
	// batch (ReLU family), for the dead count at the half-way point.
	deadTrail []int32
	// firstObs is, for each unit, the index into deadTrail of the
	// observation in which the unit was first > 0 (−1: not yet); it lets
	// partial states of consecutive sample ranges rebuild the trail of the
	// whole sample (partial.go).
	firstObs []int32
	pendBuf  []int32
	// unitLo and unitHi are each unit's smallest and largest value over
	// the sample (saturating activations: a gate channel that never leaves
	// a bound is constant).
	unitLo, unitHi []float32
	sat            int64
	satN           int64
	// per-channel moments along axis 1 (only for values feeding a BatchNormalization)
	perChan []Moments
	// sameAs is the observed data input of a node that passes its values on
	// unchanged (Reshape, Transpose and the like: sameValueOps); keepLast
	// marks a layer some other layer is sameAs, whose batch result is then
	// kept in last.
	sameAs *layerAcc
	// scaleOf is the observed layer this one is 2^scaleExp times (scaled.go)
	scaleOf  *layerAcc
	scaleExp int
	keepLast bool
	// parts are a Concat's inputs or the outputs of a Split reading this
	// value, whose merged statistics are its own (concat.go); the layer
	// itself is then not observed
	parts   []*layerAcc
	last    lastBatch
	batches int64 // observe calls so far (one per batch)
}

// lastBatch is what one batch of a layer gave: its moments and the
// histogram counts added on the grid (exp, start), for its batches-th
// observation of n values.
type lastBatch struct {
	ok        bool
	seq       int64
	n         int
	mom       Moments
	counts    [HistBins]int64
	exp       int
	start     int64
	hasFinite bool
}

// sameValueOps pass their input's values on unchanged (only the shape may
// change; Transpose also the order), so their output's histogram is their
// input's, and so are the moments, up to the rounding of sums taken in
// another order.
var sameValueOps = map[string]bool{"Reshape": true, "Flatten": true, "Squeeze": true, "Unsqueeze": true, "Identity": true, "Transpose": true}

// Collector is the probe hook that gathers statistics of every float node
// output over all batches, plus input and output summaries.
type Collector struct {
	Model *loader.Model
	Plan  *probe.Plan
	// flat is the plan's flat view: the main graph's nodes and, under
	// qualified names, those of every If branch and Loop or Scan body.
	flat *probe.Flat
	// nodeIdx maps a node the hook is given to its index in flat; hits[i]
	// counts the hook calls of flat node i, runs0 the runs of each subgraph
	// (and mainRuns0 of the main graph) before this collector's first batch.
	nodeIdx   map[*loader.Node]int
	hits      []int64
	runs0     []int64
	mainRuns0 int64
	layers    []*layerAcc
	byOut     map[string]*layerAcc
	// values whose per-channel moments are wanted (BatchNormalization inputs)
	perChanWanted map[string]bool
	inputs        map[string]*layerAcc
	inputOrder    []string
	reused        atomic.Int64 // batches whose statistics reuseSame took over
	out           *outputAcc
	producer      map[string]*loader.Node
	consumer      map[string][]*loader.Node // value → the nodes that read it
	dataDep       map[string]bool
	composite     composite // activations written as subgraphs
	Samples       int
	// batchRows is the sample count of each batch given to AddInputs, in
	// order (the dead-unit trails are per batch; this places their middle).
	batchRows []int
	// jobs feeds the statistics worker: one goroutine takes node outputs in
	// the order the hook saw them, so the statistics of one node overlap
	// with the computation of the next while results stay deterministic.
	jobs  chan obsJob
	done  chan struct{}
	errMu sync.Mutex
	err   error
	// sent counts the items put on jobs, handled the ones the worker has
	// finished (in the same order); dead holds the tensors that died before
	// the worker passed them (AfterObserved).
	sent, handled atomic.Int64
	dead          tensor.Deferred
	// quant accumulates clipping and levels used of quantized tensors (quant.go); nil without quantizers.
	quant *quantSet
	// half counts float16 range problems of float16 activations (half.go); nil without float16.
	half *halfSet
	// tf observes attention and residual-stream tensors (transformer_obs.go); nil without any.
	tf *tfObserver
}

// AfterObserved returns a function for probe.Plan.RunRecycled: it passes a
// dead tensor on to put once the statistics worker has finished every
// tensor queued before it died (the tensor itself among them, if it was
// queued), at once when it has. Sync and Wait pass on what is still
// waiting. Call the function, Sync and Wait from one goroutine.
func (c *Collector) AfterObserved(put func(*tensor.Tensor)) func(*tensor.Tensor) {
	c.dead.Put = put
	return func(t *tensor.Tensor) {
		c.dead.Add(t, c.sent.Load())
		c.dead.PassOn(c.handled.Load())
	}
}

func (c *Collector) failed() error {
	c.errMu.Lock()
	defer c.errMu.Unlock()
	return c.err
}

type obsJob struct {
	la      *layerAcc
	t       *tensor.Tensor
	isInput bool
	sync    chan struct{} // a marker: closed when the worker reaches it
}

// Sync waits until the statistics worker has processed everything queued so
// far (after it, the batch's tensors are no longer read by the collector).
func (c *Collector) Sync() error {
	if c.jobs == nil {
		c.dead.PassOn(c.sent.Load())
		return c.failed()
	}
	done := make(chan struct{})
	c.sent.Add(1)
	c.jobs <- obsJob{sync: done}
	<-done
	c.dead.PassOn(c.sent.Load())
	return c.failed()
}

// queue hands a tensor to the statistics worker, starting it on first use,
// or observes it here when it is small (inlineMax). At most a few tensors
// wait, which bounds the extra memory held. Different layers' accumulators
// are independent, so a small tensor may be observed while the worker
// handles another layer's.
func (c *Collector) queue(j obsJob) error {
	if j.sync == nil && j.t.Size() <= inlineMax {
		if err := c.failed(); err != nil {
			return err
		}
		c.process(j) // a failure shows at the next queue, Sync or Wait
		return nil
	}
	if c.jobs == nil {
		c.jobs = make(chan obsJob, 4)
		c.done = make(chan struct{})
		go c.work()
	}
	if err := c.failed(); err != nil {
		return err
	}
	c.sent.Add(1)
	c.jobs <- j
	return nil
}

func (c *Collector) work() {
	defer close(c.done)
	for j := range c.jobs {
		if j.sync != nil {
			c.handled.Add(1)
			close(j.sync)
			continue
		}
		if c.failed() == nil { // after a failure, only drain
			c.process(j)
		}
		c.handled.Add(1)
	}
}

// process observes one job's tensor, turning a panic into the collector's
// error.
func (c *Collector) process(j obsJob) {
	defer func() {
		if r := recover(); r != nil {
			c.errMu.Lock()
			c.err = fmt.Errorf("statistics of %q: internal error: %v", j.la.output, r)
			c.errMu.Unlock()
		}
	}()
	c.observe(j.la, j.t)
	if c.tf != nil && !j.isInput {
		c.tf.observe(j.la.output, j.t)
	}
	if j.isInput && j.t.Rank() >= 2 {
		j.la.perChan = perChannel(j.la.perChan, j.t, channelAxis(j.t))
	}
}

// inlineMax is the tensor size (values) up to which a tensor is observed on
// the calling goroutine instead of handed to the worker: its pass (a few
// microseconds) costs about what waking the worker costs on the machines
// measured, and a dense network at small batch has many such tensors
// (bench/hookcost on the MLP at batch 8).
const inlineMax = 1 << 14

// Wait lets the statistics worker finish everything queued and reports a
// failure of it. Finish calls it; call it before reading any accumulator.
func (c *Collector) Wait() error {
	if c.jobs != nil {
		close(c.jobs)
		<-c.done
		c.jobs = nil
	}
	c.dead.PassOn(c.sent.Load())
	return c.failed()
}

// NewCollector prepares accumulators for every data-dependent float output of the plan.
func NewCollector(m *loader.Model, p *probe.Plan) *Collector {
	f := p.Flat()
	c := &Collector{Model: m, Plan: p, flat: f, byOut: map[string]*layerAcc{}, perChanWanted: map[string]bool{},
		inputs: map[string]*layerAcc{}, producer: map[string]*loader.Node{}, consumer: map[string][]*loader.Node{}, dataDep: map[string]bool{},
		nodeIdx: make(map[*loader.Node]int, len(f.Graph.Nodes)), hits: make([]int64, len(f.Graph.Nodes)), mainRuns0: p.Runs()}
	for i := range f.Subgraphs {
		c.runs0 = append(c.runs0, f.Subgraphs[i].Runs())
	}
	// the flat graph: every node, subgraph nodes and initializers under
	// qualified names, each subgraph's nodes before its control-flow node
	g := f.Graph
	c.composite = compositeActs(g)
	for _, in := range g.Inputs {
		c.dataDep[in.Name] = true
	}
	for _, sg := range f.Subgraphs { // bound by the control-flow node at each run
		for _, in := range sg.Inputs {
			c.dataDep[in] = true
		}
	}
	for i, n := range g.Nodes {
		c.nodeIdx[n] = i
		for _, o := range n.Outputs {
			c.producer[o] = n
		}
		for _, in := range n.Inputs {
			c.consumer[in] = append(c.consumer[in], n)
		}
		dep := false
		for _, in := range n.Inputs {
			if c.dataDep[in] {
				dep = true
			}
		}
		for _, a := range n.Attrs { // subgraphs may read data from the outer scope
			if a.G != nil || len(a.Graphs) > 0 {
				dep = true
			}
		}
		if dep {
			for _, o := range n.Outputs {
				c.dataDep[o] = true
			}
		}
		if n.OpType == "BatchNormalization" && len(n.Inputs) > 0 {
			c.perChanWanted[n.Inputs[0]] = true
		}
	}
	for i, n := range g.Nodes {
		if c.composite.folded(n) {
			// a value inside x·sigmoid(x) or the erf GELU is an elementwise
			// function of the activation's input, which is observed, and read
			// only inside the pattern (a NaN there shows at its end): its own
			// pass would repeat that layer's statistics at a quarter of the
			// encoder's statistics cost, so it is not a layer; nor is a
			// dense layer's product before its bias Add (biasedMatMul)
			continue
		}
		for _, o := range n.Outputs {
			if o == "" || !c.dataDep[o] {
				continue
			}
			la := &layerAcc{node: n, output: o, depth: f.Depth[i], mom: NewMoments(), act: c.classifyNode(n)}
			if la.act.kind != ActNone {
				la.unitKind = c.unitKindOf(n)
			}
			la.perChan = nil
			c.layers = append(c.layers, la)
			c.byOut[o] = la
		}
	}
	c.quant = newQuantSet(g, p)
	c.half = newHalfSet(g, p)
	for _, in := range g.Inputs {
		c.inputs[in.Name] = &layerAcc{output: in.Name, mom: NewMoments()}
		c.inputOrder = append(c.inputOrder, in.Name)
	}
	for _, la := range c.layers {
		n := la.node
		if !sameValueOps[n.OpType] || len(n.Inputs) == 0 || len(n.Outputs) == 0 || la.output != n.Outputs[0] {
			continue
		}
		src := c.byOut[n.Inputs[0]]
		if src == nil {
			src = c.inputs[n.Inputs[0]]
		}
		if src != nil && la.act.kind == ActNone && !la.act.hasSat && !c.perChanWanted[la.output] {
			la.sameAs, src.keepLast = src, true
		}
	}
	for _, la := range c.layers {
		if la.sameAs != nil || la.act.hasSat || c.perChanWanted[la.output] {
			continue
		}
		if src, k, ok := c.scaledSource(g, la); ok {
			la.scaleOf, la.scaleExp, src.keepLast = src, k, true
		}
	}
	c.tf = newTFObserver(c)
	c.markConcats()
	return c
}

// reuseSame takes la's batch statistics from its sameAs layer when that
// layer's last observation was of this batch (both have been observed as
// many times: each layer once per batch, the input first) with as many
// values, and on the grid la is about to use; false when it cannot, and
// nothing is changed then. The result is the one observe would compute
// (for Transpose, up to the order of the moments' sums).
func (c *Collector) reuseSame(la *layerAcc, x []float32) bool {
	s := la.sameAs
	if s == nil || !s.last.ok || len(x) == 0 || s.last.seq != la.batches || s.last.n != len(x) {
		return false
	}
	b := &s.last
	if b.hasFinite {
		mn, mx := b.mom.Min, b.mom.Max
		if la.hist.Counts != nil {
			mn, mx = math.Min(la.hist.Min, mn), math.Max(la.hist.Max, mx)
		}
		if e, st := histGrid(mn, mx); e != b.exp || st != b.start {
			return false
		}
	}
	la.mom.Merge(b.mom)
	if la.hist.prepare(b.mom.Min, b.mom.Max) {
		for i, n := range b.counts {
			la.hist.Counts[i] += n
		}
	}
	c.reused.Add(1)
	return true
}

// unitKindOf walks upstream from an activation through elementwise and
// normalisation nodes to the nearest linear operator: Conv/ConvTranspose
// make units channels (axis 1), Gemm/MatMul make them features (last axis).
func (c *Collector) unitKindOf(n *loader.Node) int {
	cur := n
	for step := 0; step < 32 && cur != nil; step++ {
		// follow the data through Add(bias), Mul, BatchNormalization,
		// Reshape...: the first input computed from the model's inputs (a
		// constant may come first, as in Mul(½, x) or Add(bias, x))
		in := ""
		for _, name := range cur.Inputs {
			if c.dataDep[name] {
				in = name
				break
			}
		}
		p := c.producer[in]
		if p == nil {
			return 0
		}
		switch p.OpType {
		case "Conv", "ConvTranspose", "QLinearConv", "ConvInteger":
			return 1
		case "Gemm", "MatMul", "MatMulInteger", "Einsum":
			return 2
		}
		cur = p
	}
	return 0
}

// InSubgraph reports whether a node the hook is given sits inside an If
// branch or a Loop or Scan body.
func (c *Collector) InSubgraph(n *loader.Node) bool {
	i, ok := c.nodeIdx[n]
	return ok && c.flat.In[i] >= 0
}

// Hook is the probe.Hook that feeds the collector.
func (c *Collector) Hook(n *loader.Node, outs []*tensor.Tensor) error {
	if i, ok := c.nodeIdx[n]; ok {
		c.hits[i]++
	}
	if c.tf != nil {
		c.tf.hook(n, outs)
	}
	for i, t := range outs {
		if t == nil || i >= len(n.Outputs) {
			continue
		}
		t = c.quant.observe(n.Outputs[i], t) // a QLinear* output is observed dequantized
		c.half.observe(n.Outputs[i], t)
		la := c.byOut[n.Outputs[i]]
		if la == nil {
			continue
		}
		if la.parts != nil { // merged from its parts at Finish
			if la.shape == nil {
				la.shape = append([]int{}, t.Shape...)
			}
			la.batches++
			continue
		}
		if err := c.queue(obsJob{la: la, t: t}); err != nil {
			return err
		}
	}
	return nil
}

// AddInputs records the moments of one batch of model inputs (call before Run).
func (c *Collector) AddInputs(batch map[string]*tensor.Tensor) {
	rows := 0
	for _, t := range batch {
		if t != nil && t.Rank() > 0 && (rows == 0 || t.Shape[0] < rows) {
			rows = t.Shape[0]
		}
	}
	c.batchRows = append(c.batchRows, rows)
	if c.tf != nil {
		c.tf.inputs(batch)
	}
	for name, t := range batch {
		c.quant.observe(name, t)
		c.half.observe(name, t)
		if la := c.inputs[name]; la != nil {
			c.queue(obsJob{la: la, t: t, isInput: true})
		}
	}
}

// channelAxis is the axis of an input's channels: 1 for images [N,C,H,W] and
// sequences [N,C,L], the last axis for tabular [N,F].
func channelAxis(t *tensor.Tensor) int {
	if t.Rank() >= 3 {
		return 1
	}
	return t.Rank() - 1
}

func (c *Collector) observe(la *layerAcc, t *tensor.Tensor) {
	la.last.ok = false // whatever happens below, no earlier batch's result stays
	la.batches++
	x, ok := t.Data.([]float32)
	if !ok {
		f, ok64 := t.Data.([]float64)
		if !ok64 {
			return
		}
		x = make([]float32, len(f))
		for i, v := range f {
			x[i] = float32(v)
		}
	}
	if la.shape == nil {
		la.shape = append([]int{}, t.Shape...) // the first batch's shape
	}
	if c.reuseSame(la, x) {
		la.keepBatch(x, la.sameAs.last.mom, &la.sameAs.last.counts)
		return
	}
	// One read of the batch gives its moments, saturation count and
	// histogram counts on the grid of the batches before. The grid depends
	// only on the overall min and max, so when the batch leaves it unchanged
	// those counts are the ones a count on the new grid would give; otherwise
	// (first batch, or a batch that widens the range) the batch is counted
	// again on the new grid.
	if !c.reuseScaled(la, x) {
		c.passBatch(la, t, x)
	}
	la.unitStats(t, x)
}

// passBatch folds one batch into la by the fused pass (the statistics of
// the whole tensor and its histogram counts).
func (c *Collector) passBatch(la *layerAcc, t *tensor.Tensor, x []float32) {
	p := passParams{}
	p.satLo, p.satHi = la.act.satBounds()
	hadGrid := la.hist.Counts != nil
	e0, s0 := la.hist.Exp, la.hist.Start
	if hadGrid {
		p.lo, p.inv = la.hist.Lo, 1/la.hist.Width
	} else {
		p.noHist = true
	}
	r := tensorPass(x, p)
	b := r.mom
	la.mom.Merge(b)
	if c.perChanWanted[la.output] && t.Rank() >= 2 {
		la.perChan = perChannel(la.perChan, t, 1)
	}
	if la.hist.prepare(b.Min, b.Max) {
		if !hadGrid || la.hist.Exp != e0 || la.hist.Start != s0 {
			p.lo, p.inv, p.noHist = la.hist.Lo, 1/la.hist.Width, false
			p.histOnly = true // the moments are b already
			r.counts = tensorPass(x, p).counts
		}
		for i, n := range r.counts {
			la.hist.Counts[i] += n
		}
	} else {
		r.counts = [HistBins]int64{}
	}
	la.keepBatch(x, b, &r.counts)
	if la.act.hasSat {
		la.sat += r.sat
		la.satN += int64(len(x))
	}
}

// unitStats folds one batch into an activation layer's per-unit
// statistics (units never positive, a gate unit's range).
func (la *layerAcc) unitStats(t *tensor.Tensor, x []float32) {
	if la.act.kind != ActNone && t.Rank() > 0 {
		axis := t.Rank() - 1
		if la.unitKind == 1 || (la.unitKind == 0 && t.Rank() >= 3) {
			axis = 1
		}
		la.unitAxis = axis
		units := t.Shape[axis]
		if len(la.everPos) != units {
			la.everPos = make([]bool, units)
			la.notYet = notPositive(la.everPos)
		}
		inner := 1
		for _, d := range t.Shape[axis+1:] {
			inner *= d
		}
		if la.act.kind == ActReLU {
			la.pendBuf = append(la.pendBuf[:0], la.notYet...)
			la.notYet = everPositivePending(la.everPos, la.notYet, x, units, inner)
			la.markFirst(la.pendBuf, int32(len(la.deadTrail)))
			la.deadTrail = append(la.deadTrail, int32(len(la.notYet)))
		}
		// one value per unit and sample ([N, C], [N, C, 1, 1]: the shape of
		// a squeeze-and-excitation gate); wider maps skip this extra pass
		if la.act.kind == ActSaturating && inner == 1 {
			la.unitLo, la.unitHi = unitRange(la.unitLo, la.unitHi, x, units, inner)
		}
	}
}

// perChannel merges the batch's per-channel moments along axis, reading each
// channel's contiguous runs in place.
func perChannel(acc []Moments, t *tensor.Tensor, axis int) []Moments {
	x, ok := t.Data.([]float32)
	if !ok {
		return acc
	}
	ch := t.Shape[axis]
	if len(acc) != ch {
		acc = make([]Moments, ch)
		for i := range acc {
			acc[i] = NewMoments()
		}
	}
	inner := 1
	for _, d := range t.Shape[axis+1:] {
		inner *= d
	}
	block := ch * inner
	if inner == 1 {
		columnMomentsInto(acc, x, ch)
		return acc
	}
	for cc := 0; cc < ch; cc++ {
		b := NewMoments()
		for o := 0; o+block <= len(x); o += block {
			b.Merge(chunkMoments(x[o+cc*inner : o+(cc+1)*inner]))
		}
		acc[cc].Merge(b)
	}
	return acc
}

// orderKey maps a float32 to an int32 with the same order for non-NaN
// values, −0 just below +0 (the preference of Go's min and max, which
// AddFloat32 uses); it is its own inverse on the bit patterns.
func orderKey(v float32) int32 {
	b := int32(math.Float32bits(v))
	return b ^ int32(uint32(b>>31)>>1)
}

// keyFloat is the float32 of an orderKey.
func keyFloat(k int32) float64 {
	return float64(math.Float32frombits(uint32(k ^ int32(uint32(k>>31)>>1))))
}

// columnMomentsInto folds the columns of x, a row-major matrix with ch
// columns, into acc (one Moments per column), a column at a time down the
// rows with its sums in registers (the rows' cache lines serve 16 columns
// in turn). Each column is summed about a shift, its running mean (its first
// value in this batch while it is empty): s = Σ(v − shift),
// q = Σ(v − shift)² in float64, so that with n values in all
//
//	mean' = shift + s/n,  M2' = M2 + q − s²/n
//
// (one division per column, no merge of separate batch moments). Extremes
// are running order keys (branch-free: a per-batch extreme mispredicted on
// new data and cost more than the sums), with −0 below +0 as math.Min and
// math.Max order them. A column holding a NaN or ±Inf, in this batch or an
// earlier one, is folded in by AddFloat32 and Merge instead. Nothing is
// allocated unless a column has such a value.
func columnMomentsInto(acc []Moments, x []float32, ch int) {
	rows := len(x) / ch
	if rows == 0 {
		return
	}
	x = x[:rows*ch]
	for c := range acc[:ch] {
		m := &acc[c]
		shift := float64(x[c])
		mn, mx := orderKey(x[c]), orderKey(x[c])
		if m.N > 0 {
			shift = m.Mean
			mn = min(mn, orderKey(float32(m.Min)))
			mx = max(mx, orderKey(float32(m.Max)))
		}
		var s, q float64
		var zeros int64
		for i := c; i < len(x); i += ch {
			v := x[i]
			d := float64(v) - shift
			s += d
			q += d * d
			k := orderKey(v) // a NaN's key is an extreme; its column is redone below
			mn = min(mn, k)
			mx = max(mx, k)
			if v == 0 {
				zeros++
			}
		}
		if s-s != 0 || q-q != 0 { // a NaN or ±Inf, now or (through the mean) before
			col := make([]float32, rows)
			for r := range col {
				col[r] = x[r*ch+c]
			}
			b := NewMoments()
			b.AddFloat32(col)
			m.Merge(b)
			continue
		}
		n := float64(m.N + int64(rows))
		m.M2 = max(0, m.M2+q-s*s/n)
		m.Mean = shift + s/n
		m.N += int64(rows)
		m.Min, m.Max = keyFloat(mn), keyFloat(mx)
		m.Zeros += zeros
	}
}

// keepBatch records this batch's result for the layers that are sameAs la.
func (la *layerAcc) keepBatch(x []float32, b Moments, counts *[HistBins]int64) {
	if !la.keepLast || len(x) == 0 {
		return
	}
	l := &la.last
	l.ok, l.seq, l.n, l.mom, l.counts = true, la.batches, len(x), b, *counts
	l.hasFinite = la.hist.Counts != nil && !(math.IsInf(b.Min, 0) || math.IsInf(b.Max, 0) || b.Min > b.Max)
	l.exp, l.start = la.hist.Exp, la.hist.Start
}

// unitRange folds x ([…, units, inner] row-major) into each unit's running
// minimum and maximum (lo and hi are made on first use).
func unitRange(lo, hi []float32, x []float32, units, inner int) ([]float32, []float32) {
	if len(lo) != units {
		lo, hi = make([]float32, units), make([]float32, units)
		for u := range lo {
			lo[u], hi[u] = float32(math.Inf(1)), float32(math.Inf(-1))
		}
	}
	block := units * inner
	for o := 0; o+block <= len(x); o += block {
		for u := 0; u < units; u++ {
			for _, v := range x[o+u*inner : o+(u+1)*inner] {
				lo[u], hi[u] = min(lo[u], v), max(hi[u], v)
			}
		}
	}
	return lo, hi
}
