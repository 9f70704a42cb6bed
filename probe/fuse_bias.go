package probe

import "github.com/vitals-health/vitals/tensor"

// A dense layer exported as MatMul(x, W) then Add(product, bias) (PyTorch's
// nn.Linear on inputs of rank 3 and more) writes the product, then reads it
// back to write product + bias into a second buffer. When no hook reads the
// product (vitals check does not: the layer is the Add, as a Gemm's is its
// output with the bias in it), the MatMul step adds the bias into the
// product's own buffer, which becomes the Add's output, and the product is
// left unwritten (the hook gets nil for it). Each value is the Add kernel's
// fl(product + bias), its operands in the Add node's order: bit-identical.

// markBiasAdds links each float MatMul step whose output only an Add step
// reads, the Add's other operand an initializer, to that Add
// (Step.biasAdd, −1 when none). Whether the bias broadcasts along the
// product's last axis alone is checked at run time (biasInPlace).
func (p *Plan) markBiasAdds(readers map[string][]int, outputs map[string]bool) {
	for i := range p.Steps {
		p.Steps[i].biasAdd = -1
	}
	for i := range p.Steps {
		m := p.Steps[i].Node
		if m.OpType != "MatMul" || normDomain(m.Domain) != "" || len(m.Outputs) != 1 || m.Outputs[0] == "" || p.Steps[i].fuseWith >= 0 {
			continue
		}
		v := m.Outputs[0]
		r := readers[v]
		if len(r) != 1 || r[0] <= i || outputs[v] || p.producedAt[v] != i {
			continue
		}
		j := r[0]
		a := p.Steps[j].Node
		if a.OpType != "Add" || normDomain(a.Domain) != "" || len(a.Inputs) != 2 || len(a.Outputs) != 1 || a.Outputs[0] == "" ||
			p.Steps[j].inChain || p.chains[j] != nil || (a.Inputs[0] == v) == (a.Inputs[1] == v) {
			continue
		}
		b := a.Inputs[0]
		if b == v {
			b = a.Inputs[1]
		}
		if _, ok := p.Graph.Initializers[b]; !ok {
			continue
		}
		p.Steps[i].biasAdd = j
	}
}

// biasInPlace adds step i's bias into product (step i's output, float32)
// when its Add may be computed so (see above): the bias broadcasts to the
// product's shape along the last axis alone (shape [n] or [1, …, 1, n], no
// wider than the product) and product is no input of the Add's other
// operand. It returns the Add's output (product's own tensor) or nil.
func (p *Plan) biasInPlace(i int, product *tensor.Tensor, env *Scope) *tensor.Tensor {
	a := p.Steps[p.Steps[i].biasAdd].Node
	pos := 0
	if a.Inputs[1] == p.Steps[i].Node.Outputs[0] {
		pos = 1
	}
	bias, ok := env.Get(a.Inputs[1-pos])
	if !ok || bias == nil || bias.DType != tensor.Float32 || product.DType != tensor.Float32 || product.Rank() == 0 {
		return nil
	}
	r := product.Rank()
	n := product.Shape[r-1]
	if bias.Rank() == 0 || bias.Rank() > r || bias.Shape[bias.Rank()-1] != n || bias.Size() != n || n == 0 {
		return nil
	}
	out := product.F32()
	in := [2][]float32{}
	shapes := [2][]int{}
	in[pos], shapes[pos] = out, product.Shape
	in[1-pos], shapes[1-pos] = bias.F32(), bias.Shape
	arithF32(addT, out, product.Shape, in[0], shapes[0], in[1], shapes[1])
	return product
}
