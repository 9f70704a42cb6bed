package probe

import (
	"github.com/vitals-health/vitals/gemm"
	"github.com/vitals-health/vitals/tensor"
)

// Fusion of a bias Add, and of the erf form of GELU after it, into a MatMul.
//
// A float32 MatMul with a constant 2-D B whose output p is read by one Add
// only, of p and a bias varying along the last axis (u = Add(bias, p) or
// Add(p, bias), the bias known when the MatMul runs), computes u too, row
// block by row block while the product's block is in cache. When u feeds
// the erf form of GELU,
//
//	d = Div(u, √2), e = Erf(d), a = Add(e, 1), m = Mul(u, a), y = Mul(m, ½)
//
// (operands of Add and the Muls in either order, the constants float32
// scalars known when the MatMul runs, u read by the Div and the first Mul
// only, and d, e, a, m each by the next step only: the same rule as
// stats/composite.go's), the MatMul computes d, e, a, m and y as well, in
// the same pass. Every output is still written in full, and each value by
// the very slice function the step's own kernel applies to it (vvF32 and
// vsF32 with the same operand order, erfF32), on ranges that start at a
// multiple of 16 values as the kernels' own chunks do, so the vector and
// scalar parts of those functions cover the same elements and every value,
// NaN payloads included, is bit-identical. The plan hands each tensor to
// its step instead of running that step's kernel (fuse.go).

// matChain is what a MatMul computes beyond its product: the chain's steps
// (the Add, then the five GELU steps when present), resolved at run time.
type matChain struct {
	steps []int
	outs  []*tensor.Tensor // one per step, set by the kernel when it fused
	bias  []float32
	// biasFirst: the Add reads the bias first (Add(bias, p))
	biasFirst bool
	gelu      bool
	// the GELU's scalars and operand orders (see fuse_matmul.go's header)
	sqrt2, one, half            float32
	oneFirst, aFirst, halfFirst bool
	// rank is the largest rank of the bias and the scalars: the product's
	// must be at least this for the steps' outputs to have its shape
	rank int
}

// pick is the index of a two-input step's constant operand: 0 when it
// comes first.
func pick(first bool) int {
	if first {
		return 0
	}
	return 1
}

// fits reports whether the chain can be computed for a product of the
// given shape: the bias varies along the last axis only, with its length,
// and no operand's rank exceeds the product's (the steps' outputs then have
// the product's shape).
func (ch *matChain) fits(shape []int) bool {
	return len(shape) >= ch.rank && len(shape) > 0 && len(ch.bias) == shape[len(shape)-1]
}

// chainBlockRows is the row block of a fused MatMul: a multiple of every
// kernel's MR (8 and 6) and of 16, so each block starts at a multiple of 16
// values; it is also the kernels' mc, so the packed B is streamed once per
// block as the whole product streams it (gemm's driver).
const chainBlockRows = 96

// chainWhole makes matMulChain run the product whole first (benchmarks).
var chainWhole = false

// chainNoGELU leaves the GELU to its steps' kernels (benchmarks).
var chainNoGELU = false

// chainSpan is the number of values of each tensor one pass of the GELU
// chain covers at a time (common practice: six 8 KiB spans stay in L1).
const chainSpan = 2048

// markMatMulChain links MatMul step i, whose output v has the readers
// given, to the bias Add (and GELU) it may compute (Step.fuseChain).
func (p *Plan) markMatMulChain(i int, v string, readers map[string][]int) {
	n := p.Steps[i].Node
	if len(n.Inputs) != 2 || len(n.Outputs) != 1 {
		return
	}
	j, ok := p.onlyReader(v, i, readers)
	if !ok {
		return
	}
	add := p.Steps[j].Node
	if !p.plainNode(j, "Add", 2) || p.Steps[j].Opset < 7 {
		return
	}
	bias := add.Inputs[0]
	if bias == v {
		bias = add.Inputs[1]
	} else if add.Inputs[1] != v {
		return
	}
	if bias == v || !p.knownBefore(bias, i) {
		return
	}
	chain := []int{j}
	if g, ok := p.geluAfter(add.Outputs[0], i, j, readers); ok {
		chain = append(chain, g...)
	}
	p.Steps[i].fuseChain = chain
}

// plainNode: step k is op in the default domain with nIn inputs (all
// named) and one named output.
func (p *Plan) plainNode(k int, op string, nIn int) bool {
	n := p.Steps[k].Node
	if n.OpType != op || normDomain(n.Domain) != "" || len(n.Inputs) != nIn || len(n.Outputs) != 1 || n.Outputs[0] == "" {
		return false
	}
	for _, in := range n.Inputs {
		if in == "" {
			return false
		}
	}
	return true
}

// onlyReader is the one step after step i that reads v (once).
func (p *Plan) onlyReader(v string, i int, readers map[string][]int) (int, bool) {
	r := readers[v]
	if len(r) != 1 || r[0] <= i {
		return 0, false
	}
	return r[0], true
}

// knownBefore: value name is known when step i runs (an initializer, a
// graph or outer-scope input, an earlier step's output, or a Constant
// step's, which fuseFor evaluates ahead).
func (p *Plan) knownBefore(name string, i int) bool {
	at, ok := p.producedAt[name]
	return !ok || at < i || p.isConstantStep(at)
}

// geluAfter finds the erf GELU reading u (the output of step j, fused into
// step i) and returns its five steps in order: Div, Erf, Add, Mul, Mul.
func (p *Plan) geluAfter(u string, i, j int, readers map[string][]int) ([]int, bool) {
	r := readers[u]
	if len(r) != 2 || r[0] <= j || r[1] <= r[0] {
		return nil, false
	}
	div, mul := r[0], r[1]
	other := func(k int, v string) (string, bool) { // the other input of a two-input step reading v
		in := p.Steps[k].Node.Inputs
		switch {
		case in[0] == v && in[1] != v:
			return in[1], true
		case in[1] == v && in[0] != v:
			return in[0], true
		}
		return "", false
	}
	if !p.plainNode(div, "Div", 2) || p.Steps[div].Node.Inputs[0] != u || !p.knownBefore(p.Steps[div].Node.Inputs[1], i) {
		return nil, false
	}
	d := p.Steps[div].Node.Outputs[0]
	erf, ok := p.onlyReader(d, div, readers)
	if !ok || !p.plainNode(erf, "Erf", 1) {
		return nil, false
	}
	e := p.Steps[erf].Node.Outputs[0]
	add, ok := p.onlyReader(e, erf, readers)
	if !ok || !p.plainNode(add, "Add", 2) || p.Steps[add].Opset < 7 {
		return nil, false
	}
	if c, ok := other(add, e); !ok || !p.knownBefore(c, i) {
		return nil, false
	}
	a := p.Steps[add].Node.Outputs[0]
	if k, ok := p.onlyReader(a, add, readers); !ok || k != mul || !p.plainNode(mul, "Mul", 2) || p.Steps[mul].Opset < 7 {
		return nil, false
	}
	if x, ok := other(mul, a); !ok || x != u {
		return nil, false
	}
	m := p.Steps[mul].Node.Outputs[0]
	half, ok := p.onlyReader(m, mul, readers)
	if !ok || !p.plainNode(half, "Mul", 2) || p.Steps[half].Opset < 7 {
		return nil, false
	}
	if c, ok := other(half, m); !ok || !p.knownBefore(c, i) {
		return nil, false
	}
	if p.Steps[div].Opset < 7 {
		return nil, false
	}
	return []int{div, erf, add, mul, half}, true
}

// chainFor resolves step i's chain at run time (nil when it cannot be
// fused: the bias or a scalar is not float32 of the expected size).
func (p *Plan) chainFor(i int, env *Scope, parent *Call) *fusedAct {
	steps := p.Steps[i].fuseChain
	get := func(name string) *tensor.Tensor {
		t, ok := env.Get(name)
		if !ok {
			t, _ = p.evalConstant(name, env, parent)
		}
		return t
	}
	v := p.Steps[i].Node.Outputs[0]
	add := p.Steps[steps[0]].Node
	ch := &matChain{steps: steps, biasFirst: add.Inputs[1] == v}
	scalar := func(name string) (float32, bool) {
		t := get(name)
		if t == nil || t.DType != tensor.Float32 || t.Size() != 1 {
			return 0, false
		}
		ch.rank = max(ch.rank, t.Rank())
		return t.F32()[0], true
	}
	bname := add.Inputs[0]
	if !ch.biasFirst {
		bname = add.Inputs[1]
	}
	b := get(bname)
	if b == nil || b.DType != tensor.Float32 || b.Size() < 2 {
		return nil
	}
	for _, d := range b.Shape[:b.Rank()-1] {
		if d != 1 {
			return nil
		}
	}
	ch.bias, ch.rank = b.F32(), b.Rank()
	if len(steps) == 6 {
		u := add.Outputs[0]
		div, addOne, mul, half := p.Steps[steps[1]].Node, p.Steps[steps[3]].Node, p.Steps[steps[4]].Node, p.Steps[steps[5]].Node
		var ok1, ok2, ok3 bool
		ch.sqrt2, ok1 = scalar(div.Inputs[1])
		ch.oneFirst = addOne.Inputs[0] != p.Steps[steps[2]].Node.Outputs[0]
		ch.one, ok2 = scalar(addOne.Inputs[pick(ch.oneFirst)])
		ch.aFirst = mul.Inputs[0] != u
		ch.halfFirst = half.Inputs[0] != mul.Outputs[0]
		ch.half, ok3 = scalar(half.Inputs[pick(ch.halfFirst)])
		if ok1 && ok2 && ok3 && !chainNoGELU {
			ch.gelu = true
		} else {
			ch.steps, ch.rank = steps[:1], b.Rank()
		}
	}
	return &fusedAct{chain: ch}
}

// matMulChain computes the product out = A·B (rows×n, B packed or plain
// as matMulPackedB chose) and the chain's outputs of shape shape, block by
// block. When the product goes to gemm.SgemmPackedB (many rows), each
// block of chainBlockRows rows is multiplied on one core and its chain
// computed right after; otherwise the product runs whole first.
func matMulChain(ar *tensor.Arena, ch *matChain, shape []int, ad []float32, k int, pb *gemm.PackedB, b []float32, out []float32, rows, n int) {
	outs := make([][]float32, len(ch.steps))
	ch.outs = make([]*tensor.Tensor, len(ch.steps))
	for s := range ch.steps {
		ch.outs[s] = ar.NewUninit(tensor.Float32, shape)
		outs[s] = ch.outs[s].F32()
	}
	blocks := rows / chainBlockRows // the last block takes the remainder
	if pb == nil || blocks < 2 || chainWhole {
		if pb != nil {
			gemm.SgemmPackedB(false, rows, 1, ad, k, pb, 0, out, n)
		} else {
			gemm.Sgemm(false, false, rows, n, k, 1, ad, k, b, n, 0, out, n)
		}
		// as many blocks as the steps' kernels use cores (elemChunk), each
		// a multiple of 16 rows
		blocks = max(1, min(rows/16, rows*n/elemChunk))
		parFor(blocks, 1, func(lo, hi int) {
			for q := lo; q < hi; q++ {
				r0, r1 := chainRows(q, blocks, rows)
				ch.epilogue(outs, out, r0, r1, n, rows)
			}
		})
		return
	}
	parFor(blocks, 1, func(lo, hi int) {
		for q := lo; q < hi; q++ {
			r0, r1 := q*chainBlockRows, (q+1)*chainBlockRows
			if q == blocks-1 {
				r1 = rows
			}
			gemm.SgemmPackedBSerial(false, r1-r0, 1, ad[r0*k:], k, pb, 0, out[r0*n:], n)
			ch.epilogue(outs, out, r0, r1, n, rows)
		}
	})
}

// chainRows is block q of blocks over rows, cut at multiples of 16 rows
// (so at multiples of 16 values) but for the last.
func chainRows(q, blocks, rows int) (int, int) {
	r0 := rows * q / blocks &^ 15
	r1 := rows * (q + 1) / blocks &^ 15
	if q == blocks-1 {
		r1 = rows
	}
	return r0, r1
}

// epilogue computes rows [r0, r1) of the chain from the product out.
func (ch *matChain) epilogue(outs [][]float32, out []float32, r0, r1, n, rows int) {
	u := outs[0]
	for r := r0; r < r1; r++ {
		d, f := u[r*n:(r+1)*n], out[r*n:(r+1)*n]
		if ch.biasFirst {
			vvF32(addT, d, ch.bias, f)
		} else {
			vvF32(addT, d, f, ch.bias)
		}
	}
	if !ch.gelu {
		return
	}
	dv, ev, av, mv, yv := outs[1], outs[2], outs[3], outs[4], outs[5]
	for lo, end := r0*n, r1*n; lo < end; lo += chainSpan {
		hi := min(lo+chainSpan, end)
		vsF32(divT, dv[lo:hi], u[lo:hi], ch.sqrt2, false)
		erfF32(ev[lo:hi], dv[lo:hi])
		vsF32(addT, av[lo:hi], ev[lo:hi], ch.one, ch.oneFirst)
		if ch.aFirst {
			vvF32(mulT, mv[lo:hi], av[lo:hi], u[lo:hi])
		} else {
			vvF32(mulT, mv[lo:hi], u[lo:hi], av[lo:hi])
		}
		vsF32(mulT, yv[lo:hi], mv[lo:hi], ch.half, ch.halfFirst)
	}
}
