package grad

import (
	"fmt"

	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// Operators that only move elements. Reshape and its kin keep the element
// order: dL/dx is dL/dy. The others are traced through their own forward
// kernel: the routed inputs are fed the labels 1, 2, … (float64, exact up
// to 2⁵³) and every output element's label names the input element it was
// copied from (0: a padding constant), to which its gradient is added.
// Repeated reads (Expand, Tile, reflect padding, Gather of one row twice)
// add up.

func init() {
	for _, op := range []string{"Reshape", "Flatten", "Squeeze", "Unsqueeze"} {
		register(op, sameOrder)
	}
	for op, routed := range map[string][]int{
		"Transpose": {0}, "Slice": {0}, "Gather": {0}, "GatherElements": {0}, "GatherND": {0},
		"Expand": {0}, "Tile": {0}, "Pad": {0}, "DepthToSpace": {0}, "SpaceToDepth": {0},
		"Split": {0}, "Concat": nil,
	} {
		register(op, routeVJP(routed, false))
	}
}

func sameOrder(o *Op) error {
	if o.has32(0) && o.want32(0) { // float32 (grad32.go)
		g := o.G32(0)
		if gx := o.InPlace32(0); gx != nil {
			copy(gx, g)
		}
		return nil
	}
	g := o.G(0)
	if gx := o.InPlace(0); gx != nil {
		copy(gx, g) // nothing to move when gx is G itself
	}
	return nil
}

// routeVJP traces the inputs routed (nil: every float input); the other
// float inputs are fed zeros, or their own values with keep.
func routeVJP(routed []int, keep bool) VJP {
	return func(o *Op) error {
		k, ok := probe.Lookup(o.Node.Domain, o.Node.OpType, o.Opset)
		if !ok {
			return fmt.Errorf("no forward kernel to trace")
		}
		in := make([]*tensor.Tensor, len(o.In))
		copy(in, o.In)
		isRouted := map[int]bool{}
		if routed == nil {
			for i, t := range o.In {
				if t != nil && isFloat(t) {
					isRouted[i] = true
				}
			}
		}
		for _, i := range routed {
			if i < len(in) && in[i] != nil {
				isRouted[i] = true
			}
		}
		base := make([]int, len(in))
		next := 1
		for i, t := range o.In {
			if t == nil {
				continue
			}
			switch {
			case isRouted[i]:
				lab := make([]float64, t.Size())
				base[i] = next
				for j := range lab {
					lab[j] = float64(next + j)
				}
				next += len(lab)
				in[i] = tensor.From(lab, t.Shape...)
			case isFloat(t) && !keep: // e.g. Pad's constant value: 0 marks "no input element"
				in[i] = tensor.From(make([]float64, t.Size()), t.Shape...)
			}
		}
		c := &probe.Call{Node: o.Node, In: in, Out: make([]*tensor.Tensor, len(o.Out)), Opset: o.Opset}
		if err := k(c); err != nil {
			return fmt.Errorf("tracing the forward kernel: %w", err)
		}
		for j, lab := range c.Out {
			if lab == nil || j >= len(o.GOut) || o.GOut[j] == nil {
				continue
			}
			labels, ok := lab.Data.([]float64)
			if !ok {
				return fmt.Errorf("traced output %d is %v", j, lab.DType)
			}
			g := o.GOut[j]
			for e, l := range labels {
				id := int(l)
				if id <= 0 { // Pad's constant value
					if gc := o.Grad(2); gc != nil && o.Node.OpType == "Pad" && len(gc) == 1 {
						gc[0] += g[e]
					}
					continue
				}
				// the routed input whose label range holds id
				for i := range in {
					if !isRouted[i] || id < base[i] || id >= base[i]+o.In[i].Size() {
						continue
					}
					if gi := o.Grad(i); gi != nil {
						gi[id-base[i]] += g[e]
					}
					break
				}
			}
		}
		return nil
	}
}
