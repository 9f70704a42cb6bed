package probe

import "golang.org/x/sys/cpu"

// packRunAVX512 copies, for each of rows B rows, a run of up to 48 values
// from src + offs[p] to dst + 48·p (im2col_amd64.s); m1, m2, m3 mask the
// run's three 16-value parts.
//
//go:noescape
func packRunAVX512(dst, src *float32, offs *int, rows int, m1, m2, m3 uint16)

// havePackRun is true where packRun has a vector kernel (tests clear it to
// check the Go path against it).
var havePackRun = cpu.X86.HasAVX512F

// packRun writes, for each B row p of offs, the n values xp[base+offs[p]:]
// to panel[p·48+d:], with one masked vector copy per row. lo and hi are the
// least and greatest of offs. It needs 48-wide panels (the AVX-512
// micro-kernel's NR) and d+n ≤ 48, and reports false when it cannot run
// (the caller copies itself).
func packRun(panel, xp []float32, offs []int, lo, hi, base, n, d, nr int) bool {
	if !havePackRun || nr != 48 || n <= 0 || d+n > 48 || len(offs) == 0 {
		return false
	}
	// bounds: the last row written and every value read
	_ = panel[(len(offs)-1)*48+d+n-1]
	_ = xp[base+lo]
	_ = xp[base+hi+n-1]
	mask := func(from int) uint16 { return uint16(uint32(1)<<min(max(n-from, 0), 16) - 1) }
	packRunAVX512(&panel[d], &xp[base], &offs[0], len(offs), mask(0), mask(16), mask(32))
	return true
}
