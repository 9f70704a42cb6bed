package probe

// Float32 broadcast arithmetic as contiguous runs: after the axes of the
// output are merged wherever both operands allow it, the last merged axis
// is a run along which each operand either advances by one element or
// repeats one value. Each run then goes to the vector kernels (vvF32 for
// two moving operands, vsF32 for one moving and one repeated), and only
// the run's starting offsets take index arithmetic. This covers the
// broadcasts that arithF32Fast leaves out, such as Swin's attention mask
// ([B, nW, heads, N, N] + [1, nW, 1, N, N]) or two operands both
// broadcast ([B, 1, D] + [1, T, D]).

// elemRunMin is the shortest run worth a vector call (common practice:
// below a couple of 16-float vectors the per-run call costs more than the
// index arithmetic it saves).
const elemRunMin = 16

// arithF32Runs computes out = a op b over the broadcast of shapes as and bs
// (out's shape os) run by run; it reports false, writing nothing, when the
// innermost run is shorter than elemRunMin. The element operations are the
// same float32 operations as binaryLoop's, so results are bit-identical.
func arithF32Runs(op opID, out []float32, os []int, a []float32, as []int, b []float32, bs []int) bool {
	if len(out) == 0 {
		return false
	}
	sa, sb := BroadcastStrides(as, os), BroadcastStrides(bs, os)
	dims, sa2, sb2 := shapeCoalesce(os, sa, sb)
	r := len(dims)
	if r == 0 {
		return false
	}
	L, ia, ib := dims[r-1], sa2[r-1], sb2[r-1]
	if L < elemRunMin || ia > 1 || ib > 1 {
		return false
	}
	oDims, oa, ob := dims[:r-1], sa2[:r-1], sb2[:r-1]
	runs := len(out) / L
	parFor(runs, max(1, elemChunk/L), func(lo, hi int) {
		// offsets of run lo, then stepped like an odometer
		idx := make([]int, len(oDims))
		pa, pb, rem := 0, 0, lo
		for ax := len(oDims) - 1; ax >= 0; ax-- {
			idx[ax] = rem % oDims[ax]
			rem /= oDims[ax]
			pa += idx[ax] * oa[ax]
			pb += idx[ax] * ob[ax]
		}
		for run := lo; run < hi; run++ {
			d := out[run*L : (run+1)*L]
			switch {
			case ia == 1 && ib == 1:
				vvF32(op, d, a[pa:pa+L], b[pb:pb+L])
			case ia == 1:
				vsF32(op, d, a[pa:pa+L], b[pb], false)
			case ib == 1:
				vsF32(op, d, b[pb:pb+L], a[pa], true)
			}
			for ax := len(oDims) - 1; ax >= 0; ax-- {
				idx[ax]++
				pa += oa[ax]
				pb += ob[ax]
				if idx[ax] < oDims[ax] {
					break
				}
				pa -= oa[ax] * oDims[ax]
				pb -= ob[ax] * oDims[ax]
				idx[ax] = 0
			}
		}
	})
	return true
}
