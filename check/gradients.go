package check

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/grad"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/tensor"
)

// Gradients asks Check for a backward pass (package grad) over the sample:
// the loss L is the mean over all samples, every float initializer is a
// trainable parameter, BatchNormalization uses its running statistics.
// The report then carries grad_rms on layers and grad_norm, norm,
// grad_to_weight (and with LR update_ratio) on weights, and Report.Gradients.
// Compare does not run it.
type Gradients struct {
	// Loss is "cross-entropy" (default: of the first graph output, a
	// [samples, classes] array of logits or probabilities, against
	// Sample.Labels, or the model's own top class without labels) or "mse"
	// (mean squared error against Targets).
	Loss string
	// Targets is an .npy of the target outputs for "mse", the sample axis
	// first, the first graph output's shape per sample.
	Targets string
	// LR, when > 0, is the learning rate of the predicted plain-SGD update
	// ratio lr·‖dL/dW‖/‖W‖.
	LR float64
}

// validate checks the options before anything runs.
func (g *Gradients) validate() error {
	switch g.Loss {
	case "", "cross-entropy", "mse":
	default:
		return fmt.Errorf("--loss must be cross-entropy or mse, got %q", g.Loss)
	}
	if g.Loss == "mse" && g.Targets == "" {
		return fmt.Errorf("--loss mse needs --targets FILE (.npy, one target row per sample)")
	}
	if g.Targets != "" && g.Loss != "mse" {
		return fmt.Errorf("--targets is for --loss mse")
	}
	if g.LR < 0 || math.IsNaN(g.LR) || math.IsInf(g.LR, 0) {
		return fmt.Errorf("--lr must be a positive number, got %v", g.LR)
	}
	return nil
}

// gradMemoryFactor: with a backward pass a batch keeps every activation
// (float32) until the pass is done, and the pass holds float64 gradients
// and widened copies of the values it is at; the batch is sized for about
// three times the forward pass's activations per sample.
const gradMemoryFactor = 3

// gradRun is the backward pass of one Check.
type gradRun struct {
	o       *Gradients
	m       *Model
	tape    *grad.Tape
	acc     *grad.Accumulator
	info    report.Gradients
	targets *tensor.Tensor
	done    int // samples seen (offset into targets)
	off     bool
	budget  int64 // Options.MemoryBudget (0: none)
}

func newGradRun(m *Model, o *Gradients, labels bool, budget int64) (*gradRun, error) {
	g := &gradRun{o: o, m: m, tape: grad.NewTape(m.plan), acc: grad.NewAccumulator(), budget: budget}
	g.info = report.Gradients{Loss: "cross-entropy", Target: "pseudo-labels", Missing: []string{},
		Mode: "inference mode: BatchNormalization uses its running mean and variance (no gradient into them), Dropout is the identity; every float initializer and Constant-node float tensor is a trainable parameter"}
	if labels {
		g.info.Target = "labels"
	}
	if o.Loss == "mse" {
		g.info.Loss, g.info.Target = "mse", "targets"
		t, err := loader.ReadNpy(o.Targets)
		if err != nil {
			return nil, fmt.Errorf("--targets %q: %w", o.Targets, err)
		}
		if t.DType != tensor.Float32 && t.DType != tensor.Float64 {
			return nil, fmt.Errorf("--targets %q: want float values, got %v", o.Targets, t.DType)
		}
		g.targets = t
	}
	if o.LR > 0 {
		lr := o.LR
		g.info.LR = &lr
	}
	return g, nil
}

// start begins a batch with these graph inputs.
func (g *gradRun) start(inputs map[string]*tensor.Tensor) {
	if !g.off {
		g.tape.Reset(inputs)
	}
}

func (g *gradRun) record(n *loader.Node, outs []*tensor.Tensor) {
	if !g.off {
		g.tape.Record(n, outs)
	}
}

// stop ends the backward pass for the rest of the run, saying why.
func (g *gradRun) stop(format string, args ...any) {
	g.off = true
	g.info.Stopped = fmt.Sprintf(format, args...)
}

// batch runs the backward pass of a batch of k samples that has run.
func (g *gradRun) batch(outs map[string]*tensor.Tensor, labels []int64, k int) {
	defer func() { g.done += k }()
	if g.off {
		return
	}
	name := g.m.model.Graph.Outputs[0].Name
	out := outs[name]
	if out == nil || (out.DType != tensor.Float32 && out.DType != tensor.Float64) {
		g.stop("the first output %q is not a float array: no loss", name)
		return
	}
	var (
		loss float64
		seed []float64
		err  error
	)
	if g.targets != nil {
		row := out.Size() / max(k, 1)
		t := grad.F64(g.targets)
		if g.targets.Rank() == 0 || g.targets.Size()/max(g.targets.Shape[0], 1) != row {
			g.stop("--targets %q: %v has rows of %d values, output %q %v has %d per sample", g.o.Targets, g.targets.Shape, g.targets.Size()/max(g.targets.Shape[0], 1), name, out.Shape, row)
			return
		}
		if (g.done+k)*row > len(t) {
			g.stop("--targets %q has %d rows, the sample has more", g.o.Targets, g.targets.Shape[0])
			return
		}
		loss, seed, err = grad.SquaredError(out, t[g.done*row:(g.done+k)*row])
	} else {
		if out.Rank() != 2 || out.Shape[0] != k || out.Shape[1] < 2 {
			g.stop("the first output %q is %v, not [samples, classes]: no cross-entropy (use --loss mse --targets FILE)", name, out.Shape)
			return
		}
		if labels == nil {
			labels = grad.TopClass(out)
		}
		loss, seed, err = grad.CrossEntropy(out, labels, grad.IsDistribution(out))
	}
	if err != nil {
		g.stop("loss on samples %d–%d: %v", g.done, g.done+k-1, err)
		return
	}
	if b := g.tape.Bytes(); g.budget > 0 && b > g.budget {
		g.stop("the backward pass of a batch of %d samples needs about %d MiB of gradients, over the memory budget of %d MiB: use a smaller --batch or a larger --max-memory", k, b>>20, g.budget>>20)
		return
	}
	if err := g.acc.Add(g.tape, name, loss, seed, k); err != nil {
		g.stop("%v", err)
		return
	}
	g.info.Batches++
	g.info.Batch = max(g.info.Batch, k)
	g.tape.Reset(nil) // the batch's values may be reused now
}

// fill writes the gradient statistics into the report.
func (g *gradRun) fill(r *report.Report) {
	info := g.info
	info.Samples = g.acc.Samples
	if g.acc.Samples > 0 {
		v := g.acc.Loss()
		info.Value = &v
	}
	info.Missing = append(info.Missing, missingLines(g.acc.Missing())...)
	r.Gradients = &info
	for i := range r.Layers {
		if v, ok := g.acc.RMS(r.Layers[i].Output); ok {
			r.Layers[i].GradRMS = &v
		}
	}
	params := map[string]*tensor.Tensor{}
	for name, t := range g.m.model.Graph.Initializers {
		params[name] = t
	}
	for _, n := range g.m.model.Graph.Nodes { // weights given as Constant nodes
		if t := grad.ConstantParam(n); t != nil && len(n.Outputs) > 0 {
			params[n.Outputs[0]] = t
		}
	}
	for i := range r.Weights {
		w := &r.Weights[i]
		gn, ok := g.acc.ParamNorm(w.Name)
		t := params[w.Name]
		if !ok || t == nil {
			continue
		}
		wn := 0.0
		for _, v := range grad.F64(t) {
			wn += v * v
		}
		wn = math.Sqrt(wn)
		w.GradNorm, w.Norm = &gn, &wn
		if wn > 0 {
			ratio := gn / wn
			w.GradToWeight = &ratio
			if g.o.LR > 0 {
				u := g.o.LR * ratio
				w.UpdateRatio = &u
			}
		}
	}
}

func missingLines(m map[string][]string) []string {
	r := &grad.Result{Missing: m}
	return r.MissingLines()
}
