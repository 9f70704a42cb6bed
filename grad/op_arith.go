package grad

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/probe"
)

// Binary arithmetic with numpy broadcasting. For y = f(a, b) the gradient of
// each input sums dL/dy · ∂f/∂input over the positions broadcasting
// repeated that input's element at.

func init() {
	binaryOp("Add", func(_, _, _ float64) (float64, float64) { return 1, 1 })
	binaryOp("Sub", func(_, _, _ float64) (float64, float64) { return 1, -1 })
	binaryOp("Mul", func(a, b, _ float64) (float64, float64) { return b, a })
	binaryOp("Div", func(a, b, _ float64) (float64, float64) { return 1 / b, -a / (b * b) })
	binaryOp("Pow", func(a, b, y float64) (float64, float64) { // y = aᵇ
		da := b * math.Pow(a, b-1)
		db := 0.0
		if a > 0 {
			db = y * math.Log(a)
		}
		return da, db
	})
	binaryOp("PRelu", func(a, s, _ float64) (float64, float64) { // y = a (a > 0), s·a
		if a > 0 {
			return 1, 0
		}
		return s, a
	})
	register("Sum", variadic(1))
	register("Mean", variadic(0))
	register("Where", whereVJP)
}

// binaryOp registers y = f(a, b) with partial derivatives d(a, b, y).
func binaryOp(name string, d func(a, b, y float64) (float64, float64)) {
	register(name, func(o *Op) error {
		if err := o.Need(2); err != nil {
			return err
		}
		A, B, Y := o.Input(0), o.Input(1), o.Out[0]
		if _, err := probe.Broadcast(A.Shape, B.Shape); err != nil {
			return err
		}
		if (name == "Add" || name == "Sub") && o.has32(0) {
			addSub32(o, name == "Sub")
			return nil
		}
		if name == "Mul" && o.has32(0) && mul32(o) {
			return nil
		}
		g := o.G(0)
		if name == "Add" || name == "Sub" { // ∂/∂a = 1, ∂/∂b = ±1: no forward values needed
			sgn := 1.0
			if name == "Sub" {
				sgn = -1
			}
			for i, sh := range [][]int{A.Shape, B.Shape} {
				s := []float64{1, sgn}[i]
				if sameShape(sh, Y.Shape) {
					// input 0 (factor 1) may take G itself; input 1 reads
					// G after, unchanged by it
					var gi []float64
					if i == 0 {
						gi = o.InPlace(0)
					} else {
						gi = o.GradFull(i)
					}
					if gi == nil || (s == 1 && &gi[0] == &g[0]) { // G itself: nothing to write
						continue
					}
					if s == 1 { // in parts on the workers: a serial copy waits on memory
						split(len(g), func(lo, hi int) { copy(gi[lo:hi], g[lo:hi]) })
						continue
					}
					split(len(g), func(lo, hi int) {
						for k := lo; k < hi; k++ {
							gi[k] = s * g[k]
						}
					})
					continue
				}
				gi := o.Grad(i)
				if gi == nil {
					continue
				}
				m := bcastMap(sh, Y.Shape)
				for k, v := range g {
					gi[m[k]] += s * v
				}
			}
			return nil
		}
		if name == "Mul" && mulF32(o, g) {
			return nil
		}
		a, b, y := o.X(0), o.X(1), o.Y(0)
		ma, mb := bcastMap(A.Shape, Y.Shape), bcastMap(B.Shape, Y.Shape)
		ga, gb := o.Grad(0), o.Grad(1)
		for k := range g {
			da, db := d(a[ma[k]], b[mb[k]], y[k])
			if ga != nil {
				ga[ma[k]] += g[k] * da
			}
			if gb != nil {
				gb[mb[k]] += g[k] * db
			}
		}
		return nil
	})
}

// variadic is Sum (scale 1) and Mean (scale 0: 1/number of inputs) with
// broadcasting.
func variadic(scale float64) VJP {
	return func(o *Op) error {
		n := o.NIn()
		s := scale
		if s == 0 {
			s = 1 / float64(n)
		}
		g := o.G(0)
		for i := 0; i < n; i++ {
			gi := o.Grad(i)
			if gi == nil {
				continue
			}
			m := bcastMap(o.In[i].Shape, o.Out[0].Shape)
			for k := range g {
				gi[m[k]] += s * g[k]
			}
		}
		return nil
	}
}

// whereVJP: y = cond ? a : b.
func whereVJP(o *Op) error {
	if err := o.Need(3); err != nil {
		return err
	}
	cond, ok := o.In[0].Data.([]bool)
	if !ok {
		return fmt.Errorf("Where condition is %v, not bool", o.In[0].DType)
	}
	Y := o.Out[0]
	mc := bcastMap(o.In[0].Shape, Y.Shape)
	g := o.G(0)
	for i, pick := range []bool{true, false} {
		gi := o.Grad(i + 1)
		if gi == nil {
			continue
		}
		m := bcastMap(o.In[i+1].Shape, Y.Shape)
		for k := range g {
			if cond[mc[k]] == pick {
				gi[m[k]] += g[k]
			}
		}
	}
	return nil
}

// mulF32 is Mul's rule on float32 inputs of which at most one broadcasts,
// and only over trailing axes (a per-channel scale [N, C, 1, 1] against
// [N, C, H, W]): with f the full input, r the repeated one and L the length
// of the block each element of r covers,
//
//	dL/df[k] = G[k]·r[k/L],  dL/dr[j] = Σ_{k in block j} G[k]·f[k],
//
// the values read in place. It reports false (nothing done) otherwise.
func mulF32(o *Op, g []float64) bool {
	A, B, Y := o.In[0], o.In[1], o.Out[0]
	a, ok1 := A.Data.([]float32)
	b, ok2 := B.Data.([]float32)
	if !ok1 || !ok2 || len(g) != Y.Size() {
		return false
	}
	la, okA := trailingRepeat(A.Shape, Y.Shape)
	lb, okB := trailingRepeat(B.Shape, Y.Shape)
	if !okA || !okB || (la > 1 && lb > 1) {
		return false
	}
	fi, ri, f, r, L := 0, 1, a, b, lb // the full input first
	if la > 1 {
		fi, ri, f, r, L = 1, 0, b, a, la
	}
	gf, gr := o.GradFull(fi), o.Grad(ri)
	if L == 1 { // same shapes
		if gr != nil {
			for k, v := range g {
				gr[k] = v * float64(f[k])
			}
		}
		if gf != nil {
			for k, v := range g {
				gf[k] = v * float64(r[k])
			}
		}
		return true
	}
	for j := range r {
		blk := g[j*L : (j+1)*L]
		if gr != nil {
			fb := f[j*L : (j+1)*L]
			s := 0.0
			for k, v := range blk {
				s += v * float64(fb[k])
			}
			gr[j] += s
		}
		if gf != nil {
			rv := float64(r[j])
			d := gf[j*L : (j+1)*L]
			for k, v := range blk {
				d[k] = v * rv
			}
		}
	}
	return true
}

// trailingRepeat reports whether a value of shape in broadcast to out
// repeats each element over a block of consecutive output positions only
// (in is out's leading axes followed by 1s, after numpy's left padding),
// and the block's length (1: the same shape).
func trailingRepeat(in, out []int) (int, bool) {
	if len(in) > len(out) {
		return 0, false
	}
	pad := len(out) - len(in)
	if prod(in) == 0 || prod(out) == 0 {
		return 0, false
	}
	// leading padded axes broadcast unless out is 1 there
	a := 0 // axes [0, a) match out
	for ; a < len(out); a++ {
		d := 1
		if a >= pad {
			d = in[a-pad]
		}
		if d != out[a] {
			break
		}
	}
	for k := a; k < len(out); k++ {
		d := 1
		if k >= pad {
			d = in[k-pad]
		}
		if d != 1 {
			return 0, false
		}
	}
	return prod(out[a:]), true
}
