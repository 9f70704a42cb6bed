package grad

import (
	"fmt"
	"math"
)

// Softmax and LogSoftmax along one axis (opset ≥ 13) or over the flattened
// axes from axis on (before 13). Softmax: dL/dx = y·(G − Σ G·y);
// LogSoftmax: dL/dx = G − eʸ·Σ G.

func init() {
	register("Softmax", func(o *Op) error { return softmaxVJP(o, false) })
	register("LogSoftmax", func(o *Op) error { return softmaxVJP(o, true) })
}

func softmaxVJP(o *Op, log bool) error {
	gx := o.Grad(0)
	if gx == nil {
		return nil
	}
	X := o.In[0]
	r := X.Rank()
	def := int64(-1)
	if o.Opset < 13 {
		def = 1
	}
	axis := int(o.Int("axis", def))
	if axis < 0 {
		axis += r
	}
	if axis < 0 || axis >= max(r, 1) {
		return fmt.Errorf("softmax axis %d out of range for %v", o.Int("axis", def), X.Shape)
	}
	outer, n, inner := prod(X.Shape[:axis]), X.Shape[axis], prod(X.Shape[axis+1:])
	if o.Opset < 13 { // the axes from axis on form one row
		n, inner = n*inner, 1
	}
	y, g := o.Y(0), o.G(0)
	for a := 0; a < outer; a++ {
		for b := 0; b < inner; b++ {
			base := a*n*inner + b
			s := 0.0
			for k := 0; k < n; k++ {
				i := base + k*inner
				if log {
					s += g[i]
				} else {
					s += g[i] * y[i]
				}
			}
			for k := 0; k < n; k++ {
				i := base + k*inner
				if log {
					gx[i] = g[i] - math.Exp(y[i])*s
				} else {
					gx[i] = y[i] * (g[i] - s)
				}
			}
		}
	}
	return nil
}
