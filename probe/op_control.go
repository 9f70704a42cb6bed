package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// Control flow: If, Loop, Scan. Subgraphs run through Call.RunSubgraph and read
// outer-scope values through the call's scope. Sequence- and optional-typed
// values are not supported.

func init() {
	reg("If", ifKernel, 1, 11, 13, 16, 19, 21)
	reg("Loop", loopKernel, 1, 11, 13, 16, 19, 21)
	reg("Scan", scanKernel, 8, 9, 11, 16, 19, 21)
}

// ctlTruth reads a boolean (or numeric) scalar condition.
func ctlTruth(t *tensor.Tensor, what string) (bool, error) {
	if t.Size() != 1 {
		return false, fmt.Errorf("%s must hold one element, got shape %v", what, t.Shape)
	}
	if b, ok := t.Data.([]bool); ok {
		return b[0], nil
	}
	if t.DType == tensor.String {
		return false, fmt.Errorf("%s must be bool, got %v", what, t.DType)
	}
	return t.Float64At(0) != 0, nil
}

// ctlGraph returns a graph attribute or an error naming it.
func ctlGraph(c *Call, name string) (*loader.Graph, error) {
	a := c.Attr(name)
	if a == nil || a.G == nil {
		return nil, fmt.Errorf("graph attribute %q is missing", name)
	}
	return a.G, nil
}

// ifKernel runs then_branch when the condition is true, else else_branch, and
// returns that branch's outputs.
func ifKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	cond, err := ctlTruth(c.In[0], "condition")
	if err != nil {
		return err
	}
	name := "else_branch"
	if cond {
		name = "then_branch"
	}
	g, err := ctlGraph(c, name)
	if err != nil {
		return err
	}
	outs, err := c.RunSubgraph(g, nil)
	if err != nil {
		return err
	}
	if len(outs) < c.NOut() {
		return fmt.Errorf("%s has %d outputs, the node declares %d", name, len(outs), c.NOut())
	}
	for i := range c.NOut() {
		if outs[i] == nil {
			return fmt.Errorf("%s output %d has no value", name, i)
		}
		c.Set(i, outs[i])
	}
	return nil
}

// loopKernel: inputs M (max trip count, optional), cond (optional) and N
// loop-carried values. The body takes (iteration, cond, v…) and returns
// (cond, v…, scan outputs…). It runs while i < M and cond holds; the node
// outputs are the final v… followed by each scan output stacked on a new axis 0.
func loopKernel(c *Call) error {
	body, err := ctlGraph(c, "body")
	if err != nil {
		return err
	}
	nCarried := len(c.In) - 2
	if nCarried < 0 {
		nCarried = 0
	}
	if len(body.Inputs) != 2+nCarried {
		return fmt.Errorf("body takes %d inputs, want %d (iteration, condition and %d loop-carried values)", len(body.Inputs), 2+nCarried, nCarried)
	}
	nScan := len(body.Outputs) - 1 - nCarried
	if nScan < 0 {
		return fmt.Errorf("body returns %d outputs, want at least %d", len(body.Outputs), 1+nCarried)
	}
	maxTrip := -1 // unbounded
	if m := c.Input(0); m != nil {
		if maxTrip, err = ScalarInt(m); err != nil {
			return fmt.Errorf("M: %w", err)
		}
		maxTrip = max(maxTrip, 0)
	}
	cond := true
	var condT *tensor.Tensor
	if t := c.Input(1); t != nil {
		if cond, err = ctlTruth(t, "cond"); err != nil {
			return err
		}
		condT = t
	} else {
		condT = tensor.From([]bool{true})
	}
	carried := make([]*tensor.Tensor, nCarried)
	for i := range carried {
		if carried[i] = c.Input(2 + i); carried[i] == nil {
			return fmt.Errorf("loop-carried input %d is missing", i)
		}
	}
	if maxTrip < 0 && c.Input(1) == nil {
		return fmt.Errorf("neither M nor cond is given: the loop would never end")
	}
	scans := make([][]*tensor.Tensor, nScan)
	for i := 0; (maxTrip < 0 || i < maxTrip) && cond; i++ {
		ins := append([]*tensor.Tensor{tensor.From([]int64{int64(i)}), condT}, carried...)
		outs, err := c.RunSubgraph(body, ins)
		if err != nil {
			return fmt.Errorf("iteration %d: %w", i, err)
		}
		for j, o := range outs {
			if o == nil {
				return fmt.Errorf("iteration %d: body output %d has no value", i, j)
			}
		}
		condT = outs[0]
		if cond, err = ctlTruth(condT, "body condition output"); err != nil {
			return err
		}
		copy(carried, outs[1:1+nCarried])
		for k := range scans {
			scans[k] = append(scans[k], outs[1+nCarried+k])
		}
	}
	for i, t := range carried {
		c.Set(i, t)
	}
	for k, parts := range scans {
		vi := body.Outputs[1+nCarried+k]
		st, err := ctlStack(c.Arena(), parts, 0, false, vi)
		if err != nil {
			return fmt.Errorf("scan output %d: %w", k, err)
		}
		c.Set(nCarried+k, st)
	}
	return nil
}

// ctlSub returns data[lo:hi] for any tensor storage slice.
func ctlSub(data any, lo, hi int) any {
	switch d := data.(type) {
	case []float32:
		return d[lo:hi]
	case []float64:
		return d[lo:hi]
	case []int64:
		return d[lo:hi]
	case []int32:
		return d[lo:hi]
	case []int16:
		return d[lo:hi]
	case []int8:
		return d[lo:hi]
	case []uint8:
		return d[lo:hi]
	case []uint16:
		return d[lo:hi]
	case []uint32:
		return d[lo:hi]
	case []uint64:
		return d[lo:hi]
	case []bool:
		return d[lo:hi]
	case []string:
		return d[lo:hi]
	}
	panic(fmt.Sprintf("control flow: unsupported storage %T", data))
}

// ctlSplitDims returns the products of dims before and after axis.
func ctlSplitDims(shape []int, axis int) (outer, inner int) {
	outer, inner = 1, 1
	for _, d := range shape[:axis] {
		outer *= d
	}
	for _, d := range shape[axis+1:] {
		inner *= d
	}
	return outer, inner
}

// ctlTake returns slice i of t along axis, with that axis removed.
func ctlTake(ar *tensor.Arena, t *tensor.Tensor, axis, i int) *tensor.Tensor {
	outer, inner := ctlSplitDims(t.Shape, axis)
	n := t.Shape[axis]
	shape := append(append([]int{}, t.Shape[:axis]...), t.Shape[axis+1:]...)
	out := ar.New(t.DType, shape)
	if inner == 0 {
		return out
	}
	for o := 0; o < outer; o++ {
		src := (o*n + i) * inner
		tensor.CopyData(ctlSub(out.Data, o*inner, (o+1)*inner), ctlSub(t.Data, src, src+inner))
	}
	return out
}

// ctlStack stacks equally shaped parts along a new axis (in reverse order when
// reverse is set). With no parts it returns an empty tensor typed from vi.
func ctlStack(ar *tensor.Arena, parts []*tensor.Tensor, axis int, reverse bool, vi loader.ValueInfo) (*tensor.Tensor, error) {
	if len(parts) == 0 {
		dt := vi.DType
		if !dt.Supported() || dt == tensor.Undefined {
			dt = tensor.Float32
		}
		shape := []int{0}
		for _, d := range vi.Shape {
			shape = append(shape, max(d, 0))
		}
		return ar.New(dt, shape), nil
	}
	first := parts[0]
	if axis < 0 || axis > first.Rank() {
		return nil, fmt.Errorf("axis %d out of range for stacking rank-%d values", axis, first.Rank())
	}
	for j, p := range parts {
		if p.DType != first.DType || !tensor.SameShape(p.Shape, first.Shape) {
			return nil, fmt.Errorf("iteration %d produced %v, iteration 0 produced %v", j, p, first)
		}
	}
	n := len(parts)
	shape := append(append(append([]int{}, first.Shape[:axis]...), n), first.Shape[axis:]...)
	if _, err := tensor.NumElements(shape); err != nil {
		return nil, err
	}
	out := ar.New(first.DType, shape)
	outer, inner := ctlSplitDims(shape, axis)
	if inner == 0 {
		return out, nil
	}
	for j, p := range parts {
		pos := j
		if reverse {
			pos = n - 1 - j
		}
		for o := 0; o < outer; o++ {
			dst := (o*n + pos) * inner
			tensor.CopyData(ctlSub(out.Data, dst, dst+inner), ctlSub(p.Data, o*inner, (o+1)*inner))
		}
	}
	return out, nil
}

// scanKernel: N state values followed by M scan inputs (opset 8: a leading
// optional sequence_lens input and a batch axis 0 on every input). The body
// takes (state…, one slice of each scan input) and returns (state…, one slice
// of each scan output); the node returns the final states and the scan outputs
// stacked along scan_output_axes (reversed where scan_output_directions is 1).
func scanKernel(c *Call) error {
	body, err := ctlGraph(c, "body")
	if err != nil {
		return err
	}
	m := int(c.Int("num_scan_inputs", 0))
	if c.Opset >= 9 {
		return scanCore(c, body, c.In, m, c.Ints("scan_input_axes"), c.Ints("scan_input_directions"), c.Ints("scan_output_axes"), c.Ints("scan_output_directions"), c.Set)
	}
	// opset 8: batch axis 0 everywhere, scan axis 1 of the scan inputs
	ins := c.In[1:]
	if len(ins) == 0 || ins[0] == nil {
		return fmt.Errorf("no inputs")
	}
	batch := ins[0].Shape
	if len(batch) == 0 {
		return fmt.Errorf("opset-8 Scan inputs need a batch axis, got a scalar")
	}
	nb := batch[0]
	var lens []int
	if sl := c.Input(0); sl != nil {
		lens = sl.Ints()
		if len(lens) != nb {
			return fmt.Errorf("sequence_lens has %d elements, want %d", len(lens), nb)
		}
	}
	dirs := c.Ints("directions")
	results := make([][]*tensor.Tensor, c.NOut())
	for b := 0; b < nb; b++ {
		sub := make([]*tensor.Tensor, len(ins))
		for i, t := range ins {
			if t == nil || t.Rank() == 0 || t.Shape[0] != nb {
				return fmt.Errorf("input %d must have batch axis %d", i+1, nb)
			}
			sub[i] = ctlTake(c.Arena(), t, 0, b)
			if lens != nil && i >= len(ins)-m {
				if lens[b] < 0 || sub[i].Rank() == 0 || lens[b] > sub[i].Shape[0] {
					return fmt.Errorf("sequence_lens[%d] = %d out of range", b, lens[b])
				}
				if lens[b] != sub[i].Shape[0] {
					return fmt.Errorf("sequence_lens shorter than the sequence are not supported")
				}
			}
		}
		set := func(i int, t *tensor.Tensor) { results[i] = append(results[i], t) }
		if err := scanCore(c, body, sub, m, nil, dirs, nil, nil, set); err != nil {
			return err
		}
	}
	for i, parts := range results {
		st, err := ctlStack(c.Arena(), parts, 0, false, loader.ValueInfo{})
		if err != nil {
			return fmt.Errorf("output %d: %w", i, err)
		}
		c.Set(i, st)
	}
	return nil
}

// scanCore runs one scan over ins (states then m scan inputs) and passes each node output to set.
func scanCore(c *Call, body *loader.Graph, ins []*tensor.Tensor, m int, inAxes, inDirs, outAxes, outDirs []int, set func(int, *tensor.Tensor)) error {
	nState := len(ins) - m
	if m <= 0 || nState < 0 {
		return fmt.Errorf("num_scan_inputs %d does not fit %d inputs", m, len(ins))
	}
	if len(body.Inputs) != len(ins) {
		return fmt.Errorf("body takes %d inputs, the node gives %d", len(body.Inputs), len(ins))
	}
	nOut := len(body.Outputs) - nState
	if nOut < 0 {
		return fmt.Errorf("body returns %d outputs, want at least %d states", len(body.Outputs), nState)
	}
	at := func(l []int, i int) int {
		if i < len(l) {
			return l[i]
		}
		return 0
	}
	seq := -1
	axes := make([]int, m)
	for j := 0; j < m; j++ {
		t := ins[nState+j]
		if t == nil {
			return fmt.Errorf("scan input %d is missing", j)
		}
		if t.Rank() == 0 {
			return fmt.Errorf("scan input %d is a scalar: it has no axis to scan", j)
		}
		ax, err := NormAxis(at(inAxes, j), t.Rank())
		if err != nil {
			return fmt.Errorf("scan input %d: %w", j, err)
		}
		axes[j] = ax
		if seq >= 0 && t.Shape[ax] != seq {
			return fmt.Errorf("scan input %d has %d steps, scan input 0 has %d", j, t.Shape[ax], seq)
		}
		seq = t.Shape[ax]
	}
	state := append([]*tensor.Tensor{}, ins[:nState]...)
	scans := make([][]*tensor.Tensor, nOut)
	for s := 0; s < seq; s++ {
		step := append([]*tensor.Tensor{}, state...)
		for j := 0; j < m; j++ {
			idx := s
			if at(inDirs, j) != 0 {
				idx = seq - 1 - s
			}
			step = append(step, ctlTake(c.Arena(), ins[nState+j], axes[j], idx))
		}
		outs, err := c.RunSubgraph(body, step)
		if err != nil {
			return fmt.Errorf("step %d: %w", s, err)
		}
		for i, o := range outs {
			if o == nil {
				return fmt.Errorf("step %d: body output %d has no value", s, i)
			}
		}
		copy(state, outs[:nState])
		for k := range scans {
			scans[k] = append(scans[k], outs[nState+k])
		}
	}
	for i, t := range state {
		set(i, t)
	}
	for k, parts := range scans {
		ax := at(outAxes, k)
		if len(parts) > 0 && ax < 0 {
			ax += parts[0].Rank() + 1
		}
		st, err := ctlStack(c.Arena(), parts, ax, at(outDirs, k) != 0, body.Outputs[nState+k])
		if err != nil {
			return fmt.Errorf("scan output %d: %w", k, err)
		}
		set(nState+k, st)
	}
	return nil
}
