package grad

import (
	"fmt"
	"math"
)

// Pooling. MaxPool sends dL/dy to the input element that was the window's
// maximum (the first one on ties, padding never); AveragePool spreads it
// evenly over the window, dividing by the taps inside the input, or by
// the taps inside the padded input with count_include_pad; the global
// pools do the same over the whole spatial extent.

func init() {
	register("MaxPool", maxPoolVJP)
	register("AveragePool", avgPoolVJP)
	register("GlobalAveragePool", globalAvgVJP)
	register("GlobalMaxPool", globalMaxVJP)
}

func maxPoolVJP(o *Op) error {
	gx := o.Grad(0)
	if gx == nil {
		return nil
	}
	if len(o.Out) > 1 && o.Out[1] != nil && o.WantOut(1) && len(o.GOut) > 1 && o.GOut[1] != nil {
		return fmt.Errorf("MaxPool indices output takes no gradient")
	}
	X, Y := o.In[0], o.Out[0]
	win, err := windowOf(o, X, Y, nil)
	if err != nil {
		return err
	}
	x, y, g := o.X(0), o.Y(0), o.G(0)
	planes := X.Shape[0] * X.Shape[1]
	for pl := 0; pl < planes; pl++ {
		xp, dx := x[pl*win.I:(pl+1)*win.I], gx[pl*win.I:(pl+1)*win.I]
		for p := 0; p < win.P; p++ {
			best, bv := -1, math.Inf(-1)
			want := y[pl*win.P+p]
			for t := 0; t < win.K; t++ {
				off := win.taps[p*win.K+t]
				if off < 0 {
					continue
				}
				if xp[off] == want { // the recorded maximum
					best = off
					break
				}
				if xp[off] > bv {
					best, bv = off, xp[off]
				}
			}
			if best >= 0 {
				dx[best] += g[pl*win.P+p]
			}
		}
	}
	return nil
}

func avgPoolVJP(o *Op) error {
	gx := o.Grad(0)
	if gx == nil {
		return nil
	}
	X, Y := o.In[0], o.Out[0]
	win, err := windowOf(o, X, Y, nil)
	if err != nil {
		return err
	}
	incl := o.Int("count_include_pad", 0) != 0
	nd := len(win.in)
	pads := o.Ints("pads")
	padEnd := make([]int, nd)
	if pads != nil && o.Str("auto_pad", "NOTSET") == "NOTSET" {
		copy(padEnd, pads[nd:])
	}
	div := make([]float64, win.P)
	op := make([]int, nd)
	for p := 0; p < win.P; p++ {
		inside := 0
		for t := 0; t < win.K; t++ {
			if win.taps[p*win.K+t] >= 0 {
				inside++
			}
		}
		div[p] = float64(inside)
		if incl { // taps inside the padded extent
			cnt := 1
			for d := 0; d < nd; d++ {
				n := 0
				for t := 0; t < win.k[d]; t++ {
					c := op[d]*win.stride[d] - win.padBeg[d] + t*win.dil[d]
					if c < win.in[d]+padEnd[d] {
						n++
					}
				}
				cnt *= n
			}
			div[p] = float64(cnt)
		}
		incr(op, win.out)
	}
	g := o.G(0)
	planes := X.Shape[0] * X.Shape[1]
	for pl := 0; pl < planes; pl++ {
		dx := gx[pl*win.I : (pl+1)*win.I]
		for p := 0; p < win.P; p++ {
			if div[p] == 0 {
				continue
			}
			v := g[pl*win.P+p] / div[p]
			for t := 0; t < win.K; t++ {
				if off := win.taps[p*win.K+t]; off >= 0 {
					dx[off] += v
				}
			}
		}
	}
	return nil
}

func globalAvgVJP(o *Op) error {
	gx := o.Grad(0)
	if gx == nil {
		return nil
	}
	X := o.In[0]
	planes := X.Shape[0] * X.Shape[1]
	I := prod(X.Shape[2:])
	g := o.G(0)
	for pl := 0; pl < planes; pl++ {
		v := g[pl] / float64(I)
		for i := pl * I; i < (pl+1)*I; i++ {
			gx[i] = v
		}
	}
	return nil
}

func globalMaxVJP(o *Op) error {
	gx := o.Grad(0)
	if gx == nil {
		return nil
	}
	X := o.In[0]
	planes := X.Shape[0] * X.Shape[1]
	I := prod(X.Shape[2:])
	x, y, g := o.X(0), o.Y(0), o.G(0)
	for pl := 0; pl < planes; pl++ {
		for i := pl * I; i < (pl+1)*I; i++ {
			if x[i] == y[pl] {
				gx[i] = g[pl]
				break
			}
		}
	}
	return nil
}
