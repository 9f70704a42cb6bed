package grad

import "fmt"

// Reductions: ReduceSum passes G to every element reduced into it,
// ReduceMean G/n (n elements per reduced value), ReduceSumSquare 2x·G;
// ReduceMax and ReduceMin send G to the first element equal to the result.

func init() {
	register("ReduceSum", func(o *Op) error { return reduceVJP(o, "sum", 13) })
	register("ReduceMean", func(o *Op) error { return reduceVJP(o, "mean", 18) })
	register("ReduceSumSquare", func(o *Op) error { return reduceVJP(o, "sumsq", 18) })
	register("ReduceMax", func(o *Op) error { return reduceVJP(o, "pick", 18) })
	register("ReduceMin", func(o *Op) error { return reduceVJP(o, "pick", 18) })
}

// reduceVJP: axes from the attribute before opset axesInput, from input 1
// after.
func reduceVJP(o *Op, kind string, axesInput int) error {
	gx := o.Grad(0)
	if gx == nil {
		return nil
	}
	X := o.In[0]
	r := X.Rank()
	var axes []int
	if o.Opset < axesInput {
		axes = o.Ints("axes")
	} else if t := o.Input(1); t != nil {
		a, err := Ints(t)
		if err != nil {
			return fmt.Errorf("axes: %w", err)
		}
		axes = a
	}
	red := make([]bool, r)
	if len(axes) == 0 {
		if o.Int("noop_with_empty_axes", 0) != 0 && o.Opset >= axesInput {
			copy(gx, o.G(0))
			return nil
		}
		for i := range red {
			red[i] = true
		}
	}
	for _, a := range axes {
		if a < 0 {
			a += r
		}
		if a < 0 || a >= r {
			return fmt.Errorf("axis %d out of range for %v", a, X.Shape)
		}
		red[a] = true
	}
	kept := make([]int, r)
	n := 1
	for i, d := range X.Shape {
		kept[i] = d
		if red[i] {
			kept[i] = 1
			n *= d
		}
	}
	m := bcastMap(kept, X.Shape) // input element → its reduced value
	g := o.G(0)
	switch kind {
	case "sum":
		for i := range gx {
			gx[i] = g[m[i]]
		}
	case "mean":
		for i := range gx {
			gx[i] = g[m[i]] / float64(n)
		}
	case "sumsq":
		x := o.X(0)
		for i := range gx {
			gx[i] = 2 * x[i] * g[m[i]]
		}
	case "pick":
		x, y := o.X(0), o.Y(0)
		done := make([]bool, len(y))
		for i := range gx {
			if j := m[i]; !done[j] && x[i] == y[j] {
				gx[i] = g[j]
				done[j] = true
			}
		}
	}
	return nil
}
