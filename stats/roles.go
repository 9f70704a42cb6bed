package stats

import "github.com/vitals-health/vitals/loader"

// Activation roles, read from the graph (see report.Layer.Role).
const (
	RoleHidden   = "hidden"
	RoleGate     = "gate"
	RoleSelfGate = "self-gate"
	RoleHead     = "head"
	RoleBranch   = "gate-branch"
	RoleCellGate = "cell-gate"
)

// postOps only reshape, select, reorder, convert or resize values: an
// activation that reaches the graph outputs through them alone is an output
// head (its values are the model's answer, meant to be confident).
var postOps = map[string]bool{"Reshape": true, "Flatten": true, "Squeeze": true, "Unsqueeze": true, "Identity": true,
	"Transpose": true, "Concat": true, "Slice": true, "Split": true, "Gather": true, "Cast": true, "ArgMax": true,
	"TopK": true, "ReduceMax": true, "Resize": true, "Upsample": true, "Expand": true, "Tile": true, "DepthToSpace": true}

// roleOf classifies an activation output:
//   - gate: every reader is a Mul whose other data input holds more values
//     (a squeeze-and-excitation gate [N, C, 1, 1] times its feature map);
//   - self-gate: a Sigmoid/HardSigmoid whose only reader multiplies it by the
//     activation's own input, x·σ(x) (SiLU, hard-swish written out), where a
//     pinned σ means the unit acts as identity or zero, as a ReLU does;
//   - cell-gate: a Sigmoid/HardSigmoid/Tanh whose every reader is a Mul
//     with another data input of as many values, not its own input (the
//     gates and candidate of a recurrent cell written out as ops, a gated
//     linear unit): elementwise gates are meant to open and close;
//   - head: the value is a graph output or reaches the outputs only through
//     postOps and arithmetic or comparisons with constants;
//   - gate-branch: the value feeds, through single-reader nodes, only a
//     gate (the bottleneck of a squeeze-and-excitation branch): its units
//     only shape the gate, which gate-constant judges;
//   - hidden otherwise.
func (c *Collector) roleOf(la *layerAcc) string {
	switch {
	case c.isGate(la.output):
		return RoleGate
	case c.isSelfGate(la.node):
		return RoleSelfGate
	case c.isCellGate(la.node):
		return RoleCellGate
	case c.onlyToOutputs(la.output, 0):
		return RoleHead
	case c.feedsGateOnly(la.output):
		return RoleBranch
	}
	return RoleHidden
}

func (c *Collector) isSelfGate(n *loader.Node) bool {
	if (n.OpType != "Sigmoid" && n.OpType != "HardSigmoid") || len(n.Inputs) == 0 || len(n.Outputs) == 0 {
		return false
	}
	readers := c.consumer[n.Outputs[0]]
	if len(readers) != 1 || readers[0].OpType != "Mul" || len(readers[0].Inputs) != 2 {
		return false
	}
	m := readers[0]
	return (m.Inputs[0] == n.Outputs[0] && m.Inputs[1] == n.Inputs[0]) || (m.Inputs[1] == n.Outputs[0] && m.Inputs[0] == n.Inputs[0])
}

// constantArith reports whether n is elementwise arithmetic or a
// comparison of one data value with constants (scaling a probability map,
// thresholding it): post-processing, not a layer.
func (c *Collector) constantArith(n *loader.Node) bool {
	switch n.OpType {
	case "Mul", "Add", "Sub", "Div", "Greater", "Less", "GreaterOrEqual", "LessOrEqual", "Equal", "Pow", "Round", "Floor", "Ceil", "Not":
	default:
		return false
	}
	data := 0
	for _, in := range n.Inputs {
		if c.dataDep[in] {
			data++
		}
	}
	return data == 1
}

// onlyToOutputs reports whether value reaches graph outputs, and only
// through postOps (depth bounds the walk).
func (c *Collector) onlyToOutputs(value string, depth int) bool {
	if depth > 32 {
		return false
	}
	isOut := false
	for _, o := range c.Model.Graph.Outputs {
		if o.Name == value {
			isOut = true
		}
	}
	readers := c.consumer[value]
	if len(readers) == 0 {
		if !isOut {
			// an If branch's output is the If node's output at the same place
			if o, ok := c.ifOutput(value); ok {
				return c.onlyToOutputs(o, depth+1)
			}
		}
		return isOut
	}
	for _, n := range readers {
		if !postOps[n.OpType] && !c.constantArith(n) {
			return false
		}
		// a post-processing op's data output; constant shape inputs do not matter
		reaches := false
		for _, o := range n.Outputs {
			if o != "" && c.onlyToOutputs(o, depth+1) {
				reaches = true
			}
		}
		if !reaches {
			return false
		}
	}
	return true
}

// feedsGateOnly follows value through nodes that are its only reader (at
// most 6) and reports whether it reaches a gate activation's output.
func (c *Collector) feedsGateOnly(value string) bool {
	cur := value
	for step := 0; step < 6; step++ {
		readers := c.consumer[cur]
		if len(readers) != 1 || len(readers[0].Outputs) == 0 {
			return false
		}
		n := readers[0]
		if (n.OpType == "Sigmoid" || n.OpType == "HardSigmoid") && c.isGate(n.Outputs[0]) {
			return true
		}
		if n.OpType == "Mul" || n.OpType == "Concat" || (n.OpType == "Add" && len(n.Inputs) > 1 && c.dataDep[n.Inputs[0]] && c.dataDep[n.Inputs[1]]) {
			return false // merges with another data path
		}
		cur = n.Outputs[0]
	}
	return false
}

func (c *Collector) isCellGate(n *loader.Node) bool {
	switch n.OpType {
	case "Sigmoid", "HardSigmoid", "Tanh":
	default:
		return false
	}
	if len(n.Inputs) == 0 || len(n.Outputs) == 0 {
		return false
	}
	out := n.Outputs[0]
	readers := c.consumer[out]
	if len(readers) == 0 {
		return false
	}
	own := c.valuesOf(out)
	for _, m := range readers {
		if m.OpType != "Mul" || len(m.Inputs) != 2 {
			return false
		}
		other := m.Inputs[0]
		if other == out {
			other = m.Inputs[1]
		}
		if other == n.Inputs[0] || other == out || !c.dataDep[other] || c.valuesOf(other) != own {
			return false
		}
	}
	return true
}

// ifOutput maps the formal output of an If branch (a qualified name in the
// flat view) to the If node's output at the same position.
func (c *Collector) ifOutput(value string) (string, bool) {
	for _, sg := range c.flat.Subgraphs {
		if sg.Owner.OpType != "If" {
			continue
		}
		for k, o := range sg.Outputs {
			if o == value && k < len(sg.Owner.Outputs) && sg.Owner.Outputs[k] != "" {
				return sg.Owner.Outputs[k], true
			}
		}
	}
	return "", false
}
