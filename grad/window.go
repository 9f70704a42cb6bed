package grad

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// window is the spatial geometry of a sliding-window operator (Conv and the
// pools) recovered from the recorded input and output shapes and the
// node's attributes: tap t of output position p reads input position
// p·stride − padBegin + t·dilation along each spatial axis.
type window struct {
	in, k, out, stride, dil, padBeg []int
	// taps[p*K+t] is the flat spatial input offset of tap t at output
	// position p, −1 where it falls into the padding.
	taps []int
	// tapsT[t*P+p] is taps[p*K+t]: tap-major, for the unrolling loops
	tapsT []int
	// runs[t] cuts tap t's output positions into runs whose input offsets
	// step evenly (off, off+step, …; the stride) or are all padding (off −1)
	runs [][]run
	K    int // taps per window
	P    int // output positions
	I    int // input positions
}

// windowOf reads kernel_shape (default kshape), strides, dilations, pads and
// auto_pad for input x [N, C, in...] and output y [N, M, out...].
func windowOf(o *Op, x, y *tensor.Tensor, kshape []int) (*window, error) {
	if x.Rank() < 3 || y.Rank() != x.Rank() {
		return nil, fmt.Errorf("window operator needs input and output of the same rank ≥ 3, got %v and %v", x.Shape, y.Shape)
	}
	nd := x.Rank() - 2
	w := &window{in: x.Shape[2:], out: y.Shape[2:], k: kshape}
	if ks := o.Ints("kernel_shape"); ks != nil {
		w.k = ks
	}
	w.stride, w.dil = o.Ints("strides"), o.Ints("dilations")
	if w.stride == nil {
		w.stride = ones(nd)
	}
	if w.dil == nil {
		w.dil = ones(nd)
	}
	pads := o.Ints("pads")
	if pads == nil {
		pads = make([]int, 2*nd)
	}
	if len(w.k) != nd || len(w.stride) != nd || len(w.dil) != nd || len(pads) != 2*nd {
		return nil, fmt.Errorf("kernel_shape %v, strides %v, dilations %v, pads %v do not fit %d spatial axes", w.k, w.stride, w.dil, pads, nd)
	}
	w.padBeg = make([]int, nd)
	auto := o.Str("auto_pad", "NOTSET")
	for d := 0; d < nd; d++ {
		switch auto {
		case "SAME_UPPER", "SAME_LOWER":
			span := (w.k[d]-1)*w.dil[d] + 1
			total := max(0, (w.out[d]-1)*w.stride[d]+span-w.in[d])
			w.padBeg[d] = total / 2
			if auto == "SAME_LOWER" {
				w.padBeg[d] = total - total/2
			}
		case "VALID":
		default:
			w.padBeg[d] = pads[d]
		}
	}
	fillTaps(w)
	w.tapsT = make([]int, len(w.taps))
	for p := 0; p < w.P; p++ {
		for t := 0; t < w.K; t++ {
			w.tapsT[t*w.P+p] = w.taps[p*w.K+t]
		}
	}
	w.runs = make([][]run, w.K)
	for t := 0; t < w.K; t++ {
		offs := w.tapsT[t*w.P : (t+1)*w.P]
		for p := 0; p < w.P; {
			r := run{p: p, off: offs[p], n: 1, step: 1}
			if r.off >= 0 && p+1 < w.P && offs[p+1] > r.off {
				r.step = offs[p+1] - r.off
			}
			for p+r.n < w.P && ((r.off < 0 && offs[p+r.n] < 0) || (r.off >= 0 && offs[p+r.n] == r.off+r.n*r.step)) {
				r.n++
			}
			w.runs[t] = append(w.runs[t], r)
			p += r.n
		}
	}
	return w, nil
}

// run is a stretch of n output positions from p whose taps read the input
// offsets off, off+step, off+2·step, … (off −1: padding).
type run struct{ p, off, n, step int }

// incr advances a multi-index in row-major order.
func incr(idx, shape []int) {
	for a := len(idx) - 1; a >= 0; a-- {
		idx[a]++
		if idx[a] < shape[a] {
			return
		}
		idx[a] = 0
	}
}

func ones(n int) []int {
	s := make([]int, n)
	for i := range s {
		s[i] = 1
	}
	return s
}

func prod(s []int) int {
	n := 1
	for _, d := range s {
		n *= d
	}
	return n
}
