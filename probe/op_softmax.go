package probe

import (
	"fmt"
	"math"
)

// Softmax family: Softmax, LogSoftmax, Hardmax.
//
// Before opset 13 the input is coerced to 2-D [∏dims[:axis], ∏dims[axis:]]
// (default axis 1) and the operator works on each row; from opset 13 it works
// along the single axis (default −1).

func init() {
	reg("Softmax", softmaxKernel(smSoftmax), 1, 11, 13)
	reg("LogSoftmax", softmaxKernel(smLogSoftmax), 1, 11, 13)
	reg("Hardmax", softmaxKernel(smHardmax), 1, 11, 13)
}

type smKind int

const (
	smSoftmax    smKind = iota // y = exp(x−max)/Σexp(x−max)
	smLogSoftmax               // y = (x−max) − log Σexp(x−max)
	smHardmax                  // y = 1 at the first maximum, 0 elsewhere
)

func softmaxKernel(kind smKind) Kernel {
	return func(c *Call) error {
		if err := c.Need(1); err != nil {
			return err
		}
		x := c.In[0]
		if err := normCheckFloat(x); err != nil {
			return err
		}
		legacy := c.Opset < 13
		def := int64(-1)
		if legacy {
			def = 1
		}
		rank := x.Rank()
		if rank == 0 {
			return fmt.Errorf("input must have rank ≥ 1, got a scalar")
		}
		axis, err := NormAxis(int(c.Int("axis", def)), rank)
		if err != nil {
			return err
		}
		outer, m, inner := 1, 1, 1
		for _, d := range x.Shape[:axis] {
			outer *= d
		}
		if legacy {
			for _, d := range x.Shape[axis:] {
				m *= d
			}
		} else {
			m = x.Shape[axis]
			for _, d := range x.Shape[axis+1:] {
				inner *= d
			}
		}
		y := c.Arena().NewUninit(x.DType, x.Shape) // smLoop writes every element of every row
		// rows of the outer axis are independent: split them across cores
		// (each row is computed by one worker exactly as a serial run would)
		minRows := max(1, elemChunk/max(1, m*inner))
		switch d := x.Data.(type) {
		case []float32:
			yd := y.F32()
			if kind == smSoftmax && inner == 1 && m > 0 {
				// contiguous rows (attention probabilities over the key axis)
				parFor(outer, minRows, func(lo, hi int) {
					for r := lo; r < hi; r++ {
						softmaxRowF32(yd[r*m:(r+1)*m], d[r*m:(r+1)*m])
					}
				})
				break
			}
			parFor(outer, minRows, func(lo, hi int) {
				smLoop(kind, yd[lo*m*inner:hi*m*inner], d[lo*m*inner:hi*m*inner], hi-lo, m, inner)
			})
		case []float64:
			yd := y.F64()
			parFor(outer, minRows, func(lo, hi int) {
				smLoop(kind, yd[lo*m*inner:hi*m*inner], d[lo*m*inner:hi*m*inner], hi-lo, m, inner)
			})
		}
		c.Set(0, y)
		return nil
	}
}

// smLoop applies the operator along the middle axis of data laid out as [outer, m, inner].
func smLoop[T Float](kind smKind, y, x []T, outer, m, inner int) {
	if m == 0 {
		return
	}
	exp := math.Exp
	var zero T
	if _, ok := any(zero).(float32); ok {
		exp = expNonPos // float32 results: the fast exponential rounds the same (exp_f32.go)
	}
	for o := 0; o < outer; o++ {
		for j := 0; j < inner; j++ {
			base := o*m*inner + j
			mx, arg := x[base], 0
			for k := 1; k < m; k++ {
				if v := x[base+k*inner]; v > mx {
					mx, arg = v, k
				}
			}
			switch kind {
			case smHardmax:
				for k := 0; k < m; k++ {
					y[base+k*inner] = 0
				}
				y[base+arg*inner] = 1
			case smSoftmax:
				var s float64
				k0 := 0
				if yf, ok := any(y).([]float32); ok && inner == 1 {
					// a contiguous float32 row: the leading multiple of 8
					// in vector lanes (the sum then in lane order)
					k0, s = softmaxExpVec(yf[base:base+m], any(x).([]float32)[base:base+m], float32(mx))
				}
				for k := k0; k < m; k++ {
					e := exp(float64(x[base+k*inner] - mx))
					y[base+k*inner] = T(e)
					s += e
				}
				r := 1 / s
				for k := 0; k < m; k++ {
					y[base+k*inner] = T(float64(y[base+k*inner]) * r)
				}
			case smLogSoftmax:
				var s float64
				for k := 0; k < m; k++ {
					s += exp(float64(x[base+k*inner] - mx))
				}
				ls := math.Log(s)
				for k := 0; k < m; k++ {
					y[base+k*inner] = T(float64(x[base+k*inner]-mx) - ls)
				}
			}
		}
	}
}

// softmaxRowF32 is smLoop's Softmax on one contiguous float32 row (len ≥ 1),
// with the same arithmetic and so the same bits: mx = max x (the first
// value if it is NaN, later NaNs ignored: the order-free part of smLoop's
// scan), y_k = float32(e_k / Σ e) with e_k = expNonPos(x_k − mx) computed in
// float64 (vector lanes for the leading multiple of 8, as smLoop), the sum
// in float64, and the scaling by 1/Σ in float64. Without smLoop's strided
// generic indexing, and with the max and the scaling in vector lanes too
// (softmaxMaxVec, softmaxScaleVec; the same comparisons and roundings).
func softmaxRowF32(y, x []float32) {
	n := len(x)
	y = y[:n]
	mx := x[0]
	if mx == mx { // not NaN: the largest value (NaNs compare false)
		k, m := softmaxMaxVec(x[1:], mx)
		for _, v := range x[1+k:] {
			if v > m {
				m = v
			}
		}
		mx = m
	}
	k0, s := softmaxExpVec(y, x, mx)
	for k := k0; k < n; k++ {
		e := expNonPos(float64(x[k] - mx))
		y[k] = float32(e)
		s += e
	}
	r := 1 / s
	k := softmaxScaleVec(y, r)
	for i, v := range y[k:] {
		y[k+i] = float32(float64(v) * r)
	}
}
