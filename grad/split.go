package grad

import (
	"runtime"

	"github.com/vitals-health/vitals/internal/par"
)

// splitMin is the element count below which element-wise gradient loops
// run on the calling goroutine only.
const splitMin = 1 << 15

// split runs f over [0, n) in contiguous parts on the shared workers
// (internal/par), one part per CPU up to 4, when n is large enough.
func split(n int, f func(lo, hi int)) {
	w := min(runtime.GOMAXPROCS(0), 4, max(1, n/splitMin))
	if w <= 1 {
		f(0, n)
		return
	}
	par.Do(w, func(part int) { f(part*n/w, (part+1)*n/w) })
}

// splitSum is split for a loop that also returns a sum over its part: the
// parts' sums are added in part order.
func splitSum(n int, f func(lo, hi int) float64) float64 {
	w := min(runtime.GOMAXPROCS(0), 4, max(1, n/splitMin))
	if w <= 1 {
		return f(0, n)
	}
	var parts [4]float64
	par.Do(w, func(part int) { parts[part] = f(part*n/w, (part+1)*n/w) })
	s := 0.0
	for _, v := range parts[:w] {
		s += v
	}
	return s
}
