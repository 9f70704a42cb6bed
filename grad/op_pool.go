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
	if !o.Needs(0) {
		return nil
	}
	if len(o.Out) > 1 && o.Out[1] != nil && o.WantOut(1) && len(o.GOut) > 1 && o.GOut[1] != nil {
		return fmt.Errorf("MaxPool indices output takes no gradient")
	}
	X, Y := o.In[0], o.Out[0]
	win, err := memoize(o, func(w *window) bool {
		return sameShape(w.in, X.Shape[2:]) && sameShape(w.out, Y.Shape[2:])
	}, func() (*window, error) { return windowOf(o, X, Y, nil) })
	if err != nil {
		return err
	}
	planes := X.Shape[0] * X.Shape[1]
	if x32, ok := X.Data.([]float32); ok && o.has32(0) && o.want32(0) { // float32 (grad32.go)
		y32, _ := Y.Data.([]float32)
		if y32 != nil {
			g := o.G32(0)
			gx := o.Grad32(0)
			if is2x2(win) {
				gx = o.GradFull32(0)
			}
			split(planes*win.I, func(lo, hi int) {
				maxPoolPlanes(win, x32, y32, g, gx, (lo+win.I-1)/max(win.I, 1), (hi+win.I-1)/max(win.I, 1))
			})
			return nil
		}
	}
	g := o.G(0)
	gx := o.Grad(0)
	if is2x2(win) {
		gx = o.GradFull(0) // maxPool2x2Planes writes every element
	}
	// each plane's gradient lands in its own input plane: planes split freely
	split(planes*win.I, func(lo, hi int) {
		p0, p1 := (lo+win.I-1)/max(win.I, 1), (hi+win.I-1)/max(win.I, 1)
		x32, ok1 := X.Data.([]float32)
		y32, ok2 := Y.Data.([]float32)
		if ok1 && ok2 {
			maxPoolPlanes(win, x32, y32, g, gx, p0, p1)
			return
		}
		maxPoolPlanes(win, o.X(0), o.Y(0), g, gx, p0, p1)
	})
	return nil
}

// is2x2 reports 2-D 2×2 windows of stride 2 without padding or dilation,
// each inside the input: every input position in at most one window.
func is2x2(win *window) bool {
	return len(win.in) == 2 && win.k[0] == 2 && win.k[1] == 2 && win.stride[0] == 2 && win.stride[1] == 2 &&
		win.dil[0] == 1 && win.dil[1] == 1 && win.padBeg[0] == 0 && win.padBeg[1] == 0 &&
		2*win.out[0] <= win.in[0] && 2*win.out[1] <= win.in[1]
}

// maxPoolPlanes routes each output's gradient to the input its window took
// the maximum from (the first tap equal to the recorded maximum; failing
// that, the largest), for planes [p0, p1), in the model's own precision:
// it adds into gx, except for 2×2 windows (is2x2), where it writes every
// element of the planes.
func maxPoolPlanes[T, U float32 | float64](win *window, x, y []T, g, gx []U, p0, p1 int) {
	if is2x2(win) {
		maxPool2x2Planes(win, x, y, g, gx, p0, p1)
		return
	}
	for pl := p0; pl < p1; pl++ {
		xp, dx := x[pl*win.I:(pl+1)*win.I], gx[pl*win.I:(pl+1)*win.I]
		for p := 0; p < win.P; p++ {
			best, bv := -1, T(math.Inf(-1))
			want := y[pl*win.P+p]
			for _, off := range win.taps[p*win.K : (p+1)*win.K] {
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
}

func avgPoolVJP(o *Op) error {
	if !o.Needs(0) {
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
	planes := X.Shape[0] * X.Shape[1]
	if o.has32(0) && o.want32(0) { // float32 (grad32.go)
		avgPoolPlanes(win, div, planes, o.G32(0), o.Grad32(0))
		return nil
	}
	avgPoolPlanes(win, div, planes, o.G(0), o.Grad(0))
	return nil
}

// avgPoolPlanes adds each output's gradient, divided by div[p], to its
// window's taps inside the input.
func avgPoolPlanes[U float32 | float64](win *window, div []float64, planes int, g, gx []U) {
	for pl := 0; pl < planes; pl++ {
		dx := gx[pl*win.I : (pl+1)*win.I]
		for p := 0; p < win.P; p++ {
			if div[p] == 0 {
				continue
			}
			v := U(float64(g[pl*win.P+p]) / div[p])
			for t := 0; t < win.K; t++ {
				if off := win.taps[p*win.K+t]; off >= 0 {
					dx[off] += v
				}
			}
		}
	}
}

func globalAvgVJP(o *Op) error {
	if !o.Needs(0) {
		return nil
	}
	X := o.In[0]
	planes := X.Shape[0] * X.Shape[1]
	I := prod(X.Shape[2:])
	if o.has32(0) && o.want32(0) { // float32 (grad32.go)
		g, gx := o.G32(0), o.GradFull32(0)
		for pl := 0; pl < planes; pl++ {
			v := float32(float64(g[pl]) / float64(I))
			d := gx[pl*I : (pl+1)*I]
			for i := range d {
				d[i] = v
			}
		}
		return nil
	}
	gx := o.Grad(0)
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

// maxPool2x2Planes is maxPoolPlanes for 2×2 windows of stride 2 without
// padding (is2x2): each input position is in one window at most, so it
// writes every element of the planes (no zeroing and adding): the output's
// gradient at the first of the four taps equal to the recorded maximum, 0
// at the three others and at the rows and column no window covers. The tap
// is chosen by integer selects on the values' bits (±0 folded together, so
// that the comparison is the float one for every number) rather than
// branches, which tap holds the maximum being as good as random; a window
// whose chosen tap is not equal to the maximum as a float (a NaN maximum)
// takes the general rule.
func maxPool2x2Planes[T, U float32 | float64](win *window, x, y []T, g, gx []U, p0, p1 int) {
	H, W, OH, OW := win.in[0], win.in[1], win.out[0], win.out[1]
	// all float32 (grad32.go): the rows by the vector loop where there is one
	x32, _ := any(x).([]float32)
	y32, _ := any(y).([]float32)
	g32, _ := any(g).([]float32)
	d32, vec := any(gx).([]float32)
	vec = vec && x32 != nil && haveBN512
	for pl := p0; pl < p1; pl++ {
		xp, dx := x[pl*H*W:(pl+1)*H*W], gx[pl*H*W:(pl+1)*H*W]
		yp, gp := y[pl*OH*OW:(pl+1)*OH*OW], g[pl*OH*OW:(pl+1)*OH*OW]
		clear(dx[2*OH*W:]) // rows below the last window
		for oh := 0; oh < OH; oh++ {
			r0 := 2 * oh * W
			r1 := r0 + W
			if 2*OW < W { // the column right of the last window
				dx[r0+W-1], dx[r1+W-1] = 0, 0
			}
			if !vec || !maxPool2x2RowVec(x32[pl*H*W:(pl+1)*H*W], y32[pl*OH*OW:(pl+1)*OH*OW], g32[pl*OH*OW:(pl+1)*OH*OW], d32[pl*H*W:(pl+1)*H*W], r0, r1, oh*OW, OW) {
				maxPool2x2Row(xp, yp, gp, dx, r0, r1, oh*OW, OW)
			}
		}
	}
}

// maxPool2x2Row is maxPool2x2Planes for one row of OW windows: input rows
// starting at r0 and r1, outputs from q.
func maxPool2x2Row[T, U float32 | float64](xp, yp []T, gp, dx []U, r0, r1, q, OW int) {
	for ow := 0; ow < OW; ow++ {
		want := yp[q+ow]
		kw := floatKey(float64(want))
		i := 2 * ow
		s := 3 // tap 0..3: (r0, i), (r0, i+1), (r1, i), (r1, i+1)
		if floatKey(float64(xp[r1+i])) == kw {
			s = 2
		}
		if floatKey(float64(xp[r0+i+1])) == kw {
			s = 1
		}
		if floatKey(float64(xp[r0+i])) == kw {
			s = 0
		}
		taps := [4]int{r0 + i, r0 + i + 1, r1 + i, r1 + i + 1}
		if xp[taps[s]] != want { // NaN: the general rule
			s, bv := -1, T(math.Inf(-1))
			for t, off := range taps {
				if xp[off] > bv {
					s, bv = t, xp[off]
				}
			}
			for t, off := range taps {
				dx[off] = 0
				if t == s {
					dx[off] = gp[q+ow]
				}
			}
			continue
		}
		vb := math.Float64bits(float64(gp[q+ow]))
		var m0, m1, m2, m3 uint64
		if s == 0 {
			m0 = vb
		}
		if s == 1 {
			m1 = vb
		}
		if s == 2 {
			m2 = vb
		}
		if s == 3 {
			m3 = vb
		}
		dx[r0+i], dx[r0+i+1] = U(math.Float64frombits(m0)), U(math.Float64frombits(m1))
		dx[r1+i], dx[r1+i+1] = U(math.Float64frombits(m2)), U(math.Float64frombits(m3))
	}
}

// floatKey is v's bits (widened to float64, exactly) with −0 taken to +0:
// two numbers (not NaN) have the same key exactly when they compare equal.
func floatKey(v float64) uint64 {
	b := math.Float64bits(v)
	if b<<1 == 0 {
		b = 0
	}
	return b
}
