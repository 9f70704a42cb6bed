package probe

import (
	"fmt"
	"sort"
	"strings"

	"github.com/vitals-health/vitals/tensor"
)

// Einsum: out[o] = Σ_s Π_i in_i[labels_i(o, s)] over the summed labels s.
// Repeated labels inside one operand take a diagonal, labels missing from the
// output are summed, "..." stands for broadcast leading dimensions. The
// implicit form (no "->") outputs the ellipsis dimensions then every label
// used exactly once, in character order.

// linEllipsisBase numbers the ellipsis dimensions above every letter label.
const linEllipsisBase = 1 << 10

type linEinsumSpec struct {
	terms [][]int // per operand, the label of each axis
	out   []int   // output labels
}

func linParseEinsum(eq string, ranks []int) (*linEinsumSpec, error) {
	eq = strings.ReplaceAll(eq, " ", "")
	lhs, rhs, explicit := strings.Cut(eq, "->")
	parts := strings.Split(lhs, ",")
	if len(parts) != len(ranks) {
		return nil, fmt.Errorf("equation %q has %d operands, node has %d inputs", eq, len(parts), len(ranks))
	}
	sp := &linEinsumSpec{}
	ell := 0 // number of ellipsis dimensions (the broadcast of all operands')
	parsed := make([][]int, len(parts))
	ellAt := make([]int, len(parts))
	for i, p := range parts {
		labels, at, err := linEinsumLetters(p)
		if err != nil {
			return nil, fmt.Errorf("equation %q: %w", eq, err)
		}
		parsed[i], ellAt[i] = labels, at
		e := ranks[i] - len(labels)
		if at < 0 && e != 0 || e < 0 {
			return nil, fmt.Errorf("equation term %q does not match an input of rank %d", p, ranks[i])
		}
		ell = max(ell, e)
	}
	count := map[int]int{}
	for i, labels := range parsed {
		e := ranks[i] - len(labels)
		var term []int
		for j, l := range labels {
			if j == ellAt[i] {
				for q := ell - e; q < ell; q++ {
					term = append(term, linEllipsisBase+q)
				}
			}
			term = append(term, l)
		}
		if ellAt[i] == len(labels) {
			for q := ell - e; q < ell; q++ {
				term = append(term, linEllipsisBase+q)
			}
		}
		for _, l := range term {
			count[l]++
		}
		sp.terms = append(sp.terms, term)
	}
	if explicit {
		labels, at, err := linEinsumLetters(rhs)
		if err != nil {
			return nil, fmt.Errorf("equation %q: %w", eq, err)
		}
		for j := 0; j <= len(labels); j++ {
			if j == at {
				for q := 0; q < ell; q++ {
					sp.out = append(sp.out, linEllipsisBase+q)
				}
			}
			if j < len(labels) {
				if count[labels[j]] == 0 {
					return nil, fmt.Errorf("equation %q: output label %q is not in any input", eq, rune(labels[j]))
				}
				sp.out = append(sp.out, labels[j])
			}
		}
		seen := map[int]bool{}
		for _, l := range sp.out {
			if seen[l] {
				return nil, fmt.Errorf("equation %q repeats an output label", eq)
			}
			seen[l] = true
		}
	} else {
		for q := 0; q < ell; q++ {
			sp.out = append(sp.out, linEllipsisBase+q)
		}
		var once []int
		for l, n := range count {
			if n == 1 && l < linEllipsisBase {
				once = append(once, l)
			}
		}
		sort.Ints(once)
		sp.out = append(sp.out, once...)
	}
	return sp, nil
}

// linEinsumLetters reads one term: its letter labels and the position of
// "..." among them (-1 when absent).
func linEinsumLetters(p string) ([]int, int, error) {
	at := -1
	var labels []int
	for i := 0; i < len(p); i++ {
		ch := p[i]
		switch {
		case ch == '.':
			if at >= 0 || !strings.HasPrefix(p[i:], "...") {
				return nil, 0, fmt.Errorf("bad ellipsis in term %q", p)
			}
			at = len(labels)
			i += 2
		case ch >= 'a' && ch <= 'z' || ch >= 'A' && ch <= 'Z':
			labels = append(labels, int(ch))
		default:
			return nil, 0, fmt.Errorf("bad character %q in term %q", ch, p)
		}
	}
	return labels, at, nil
}

func einsumKernel(c *Call) error {
	n := c.NIn()
	if n == 0 {
		return fmt.Errorf("Einsum needs at least one input")
	}
	ranks := make([]int, n)
	for i := 0; i < n; i++ {
		if c.In[i] == nil {
			return fmt.Errorf("input %d is missing", i)
		}
		if c.In[i].DType != c.In[0].DType {
			return fmt.Errorf("input types differ: %v and %v", c.In[0].DType, c.In[i].DType)
		}
		ranks[i] = c.In[i].Rank()
	}
	sp, err := linParseEinsum(c.Str("equation", ""), ranks)
	if err != nil {
		return err
	}
	// Order every label: output labels first, then the summed ones.
	order := append([]int{}, sp.out...)
	pos := map[int]int{}
	for i, l := range order {
		pos[l] = i
	}
	for _, term := range sp.terms {
		for _, l := range term {
			if _, ok := pos[l]; !ok {
				pos[l] = len(order)
				order = append(order, l)
			}
		}
	}
	dims := make([]int, len(order))
	for i := range dims {
		dims[i] = 1
	}
	fixed := make([]bool, len(order))
	for i, term := range sp.terms {
		for ax, l := range term {
			d, p := c.In[i].Shape[ax], pos[l]
			switch {
			case d == dims[p]:
			case d == 1 && l >= linEllipsisBase:
			case dims[p] == 1 && !fixed[p]:
				dims[p] = d
			default:
				return fmt.Errorf("Einsum label %q has sizes %d and %d", rune(l), dims[p], d)
			}
			if l < linEllipsisBase || d != 1 {
				fixed[p] = true
			}
		}
	}
	strides := make([][]int, n)
	for i, term := range sp.terms {
		st := make([]int, len(order))
		ts := tensor.Strides(c.In[i].Shape)
		for ax, l := range term {
			if c.In[i].Shape[ax] != 1 || dims[pos[l]] == 1 {
				st[pos[l]] += ts[ax]
			}
		}
		strides[i] = st
	}
	if n == 2 {
		var fast *tensor.Tensor
		ok := false
		a, b := c.In[0], c.In[1]
		switch a.Data.(type) {
		case []float32:
			fast, ok = linEinsumGemm[float32](c.Arena(), a, b, sp.terms[0], sp.terms[1], sp.out, dims, pos)
		case []float64:
			fast, ok = linEinsumGemm[float64](c.Arena(), a, b, sp.terms[0], sp.terms[1], sp.out, dims, pos)
		}
		if ok {
			c.Set(0, fast)
			return nil
		}
	}
	outShape := dims[:len(sp.out)]
	out := c.Arena().New(c.In[0].DType, outShape)
	switch od := out.Data.(type) {
	case []float32:
		linEinsumRun(od, linOperands[float32](c.In[:n]), strides, dims, len(sp.out))
	case []float64:
		linEinsumRun(od, linOperands[float64](c.In[:n]), strides, dims, len(sp.out))
	case []int64:
		linEinsumRun(od, linOperands[int64](c.In[:n]), strides, dims, len(sp.out))
	case []int32:
		linEinsumRun(od, linOperands[int32](c.In[:n]), strides, dims, len(sp.out))
	case []uint64:
		linEinsumRun(od, linOperands[uint64](c.In[:n]), strides, dims, len(sp.out))
	case []uint32:
		linEinsumRun(od, linOperands[uint32](c.In[:n]), strides, dims, len(sp.out))
	default:
		return fmt.Errorf("Einsum does not support %v", out.DType)
	}
	c.Set(0, out)
	return nil
}

func linOperands[T Number](ts []*tensor.Tensor) [][]T {
	out := make([][]T, len(ts))
	for i, t := range ts {
		out[i] = t.Data.([]T)
	}
	return out
}

// linEinsumRun walks every label combination with an odometer (output labels
// outermost) keeping one running offset per operand.
func linEinsumRun[T Number](out []T, ops [][]T, strides [][]int, dims []int, nOut int) {
	if len(out) == 0 {
		return
	}
	sumSize := 1
	for _, d := range dims[nOut:] {
		sumSize *= d
	}
	if sumSize == 0 {
		return // empty sum: zeros
	}
	nL := len(dims)
	idx := make([]int, nL)
	offs := make([]int, len(ops))
	for o := range out {
		var acc T
		for s := 0; s < sumSize; s++ {
			var p T = 1
			for i, op := range ops {
				p *= op[offs[i]]
			}
			acc += p
			for ax := nL - 1; ax >= 0; ax-- {
				idx[ax]++
				for i := range offs {
					offs[i] += strides[i][ax]
				}
				if idx[ax] < dims[ax] {
					break
				}
				for i := range offs {
					offs[i] -= strides[i][ax] * dims[ax]
				}
				idx[ax] = 0
			}
		}
		out[o] = acc
	}
}

// linEinsumGemm handles the common two-operand contraction without
// diagonals or broadcasting: A and B are permuted to [batch, m, k] and
// [batch, k, n], multiplied per batch, and the [batch, m, n] result is
// permuted to the output order. ok=false leaves the case to the general loop.
func linEinsumGemm[T Number](ar *tensor.Arena, a, b *tensor.Tensor, ta, tb, out []int, dims []int, pos map[int]int) (*tensor.Tensor, bool) {
	in := func(l int, set []int) bool {
		for _, v := range set {
			if v == l {
				return true
			}
		}
		return false
	}
	for _, term := range [][]int{ta, tb} {
		for i, l := range term {
			if in(l, term[:i]) {
				return nil, false // diagonal
			}
		}
	}
	for i, l := range ta {
		if a.Shape[i] != dims[pos[l]] || !in(l, tb) && !in(l, out) {
			return nil, false
		}
	}
	for i, l := range tb {
		if b.Shape[i] != dims[pos[l]] || !in(l, ta) && !in(l, out) {
			return nil, false
		}
	}
	var batch, ms, ns, ks []int
	for _, l := range out {
		switch {
		case in(l, ta) && in(l, tb):
			batch = append(batch, l)
		case in(l, ta):
			ms = append(ms, l)
		default:
			ns = append(ns, l)
		}
	}
	for _, l := range ta {
		if in(l, tb) && !in(l, out) {
			ks = append(ks, l)
		}
	}
	size := func(ls []int) int {
		p := 1
		for _, l := range ls {
			p *= dims[pos[l]]
		}
		return p
	}
	axesOf := func(term []int, ls ...[]int) []int {
		var perm []int
		for _, group := range ls {
			for _, l := range group {
				for i, t := range term {
					if t == l {
						perm = append(perm, i)
					}
				}
			}
		}
		return perm
	}
	ap := linPermute(a.Data.([]T), a.Shape, axesOf(ta, batch, ms, ks))
	bp := linPermute(b.Data.([]T), b.Shape, axesOf(tb, batch, ks, ns))
	nb, m, n, k := size(batch), size(ms), size(ns), size(ks)
	res := makeChecked[T](ar, nb*m*n)
	for i := 0; i < nb; i++ {
		linGemmT(false, false, m, n, k, 1, ap[i*m*k:], max(k, 1), bp[i*k*n:], max(n, 1), 0, res[i*m*n:], max(n, 1))
	}
	mid := append(append(append([]int{}, batch...), ms...), ns...)
	midShape := make([]int, len(mid))
	for i, l := range mid {
		midShape[i] = dims[pos[l]]
	}
	final := linPermute(res, midShape, axesOf(mid, out))
	outShape := make([]int, len(out))
	for i, l := range out {
		outShape[i] = dims[pos[l]]
	}
	return tensor.From(final, outShape...), true
}

// linPermute returns src (of shape) with its axes reordered: axis i of the
// result is axis perm[i] of src. The identity permutation returns src itself.
func linPermute[T any](src []T, shape, perm []int) []T {
	identity := true
	for i, p := range perm {
		identity = identity && p == i
	}
	if identity || len(src) == 0 {
		return src
	}
	r := len(shape)
	st := tensor.Strides(shape)
	oshape, ost := make([]int, r), make([]int, r)
	for i, p := range perm {
		oshape[i], ost[i] = shape[p], st[p]
	}
	out := make([]T, len(src))
	idx := make([]int, r)
	off := 0
	inner, innerSt := oshape[r-1], ost[r-1]
	for o := 0; o < len(out); o += inner {
		row := out[o : o+inner]
		s := off
		for j := range row {
			row[j] = src[s]
			s += innerSt
		}
		for d := r - 2; d >= 0; d-- {
			idx[d]++
			off += ost[d]
			if idx[d] < oshape[d] {
				break
			}
			off -= ost[d] * oshape[d]
			idx[d] = 0
		}
	}
	return out
}
