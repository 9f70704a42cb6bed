package grad

import (
	"fmt"

	"github.com/vitals-health/vitals/probe"
)

// Resize and Upsample, every mode (nearest, linear, cubic, antialiased)
// and coordinate transformation: the kernel resamples one axis at a time,
// y = R_{r−1}(…R_1(R_0 x)) + e, each R_a taking output j along axis a as
// Σ_q w[j, q]·x[idx[j, q]] (probe.ResizeTables: the forward's own taps) and
// e the extrapolation value where tf_crop_and_resize falls outside the
// input, which does not depend on x. So
//
//	dL/dx = R_0ᵀ(R_1ᵀ(…R_{r−1}ᵀ G)),
//
// each transpose adding w[j, q]·G[j] onto idx[j, q] (extrapolated outputs
// send nothing back), in float64. Scales, sizes and roi take no gradient.

func init() {
	register("Resize", resizeVJP)
	register("Upsample", resizeVJP)
}

func resizeVJP(o *Op) error {
	X := o.In[0]
	if !o.Needs(0) {
		return nil
	}
	tabs, err := probe.ResizeTables(o.Call)
	if err != nil {
		return err
	}
	r := X.Rank()
	if len(tabs) != r {
		return fmt.Errorf("resampling tables for %d axes, input %v", len(tabs), X.Shape)
	}
	// shapes[a] is the shape before axis a is resampled
	shapes := make([][]int, r+1)
	shapes[0] = append([]int(nil), X.Shape...)
	for a, t := range tabs {
		shapes[a+1] = append([]int(nil), shapes[a]...)
		if t != nil {
			shapes[a+1][a] = len(t.Extrap)
		}
	}
	if prod(shapes[r]) != o.Out[0].Size() {
		return fmt.Errorf("resampling tables give %v, the output is %v", shapes[r], o.Out[0].Shape)
	}
	g := o.G(0)
	for a := r - 1; a >= 0; a-- {
		t := tabs[a]
		if t == nil {
			continue
		}
		in, out := shapes[a], shapes[a+1]
		outer, inner := prod(in[:a]), prod(in[a+1:])
		ni, no := in[a], out[a]
		var dst []float64
		if a == firstResampled(tabs) {
			dst = o.Grad(0) // the last transpose writes dL/dx itself
		} else {
			dst = make([]float64, prod(in))
		}
		for ob := 0; ob < outer; ob++ {
			for j := 0; j < no; j++ {
				if t.Extrap[j] {
					continue
				}
				src := g[(ob*no+j)*inner : (ob*no+j+1)*inner]
				for q := 0; q < t.N; q++ {
					w, i := t.W[j*t.N+q], t.Idx[j*t.N+q]
					if w == 0 {
						continue
					}
					if i < 0 || i >= ni {
						return fmt.Errorf("resampling tap %d outside the axis of %d", i, ni)
					}
					d := dst[(ob*ni+i)*inner : (ob*ni+i+1)*inner]
					for k, v := range src {
						d[k] += w * v
					}
				}
			}
		}
		g = dst
	}
	if firstResampled(tabs) < 0 { // every axis unchanged: a copy
		copy(o.Grad(0), g)
	}
	return nil
}

// firstResampled is the first axis with a table, −1 when there is none.
func firstResampled(tabs []*probe.ResizeTable) int {
	for a, t := range tabs {
		if t != nil {
			return a
		}
	}
	return -1
}
