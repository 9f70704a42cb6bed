package stats

import (
	"math"
	"runtime"
	"sync"
)

// One-pass statistics of a float32 slice at memory speed.
//
// FastMoments returns the same Moments as NewMoments()+AddFloat32 (count,
// mean, M2, min, max, zeros, non-finite) from a single read of the data:
// the slice is cut into fixed chunks of fastChunk values; each chunk is
// summed about a shift (its first finite value), Σd and Σd² with d = x − shift
// in float64 over four independent lanes, with branch-free min, max and zero
// counting; a chunk holding a NaN or ±Inf (seen as a non-finite lane sum) is
// redone with the careful per-value loop. The chunk results are merged in
// chunk order with Chan et al.'s formula. Large slices are split across cores
// by whole chunks; the chunk boundaries and the merge order do not depend on
// the number of workers, so neither do the results.

// fastChunk is the number of values summed about one shift (a multiple of 8).
const fastChunk = 1 << 14

// fastParallelMin is the slice length from which FastMoments uses several cores.
const fastParallelMin = 1 << 17

// FastMoments computes the moments of x in one pass (see above).
func FastMoments(x []float32) Moments {
	nc := (len(x) + fastChunk - 1) / fastChunk
	if nc <= 1 {
		return chunkMoments(x)
	}
	parts := make([]Moments, nc)
	workers := 1
	if len(x) >= fastParallelMin {
		workers = min(runtime.GOMAXPROCS(0), nc)
	}
	each := func(w int) {
		for ci := w; ci < nc; ci += workers {
			parts[ci] = chunkMoments(x[ci*fastChunk : min(len(x), (ci+1)*fastChunk)])
		}
	}
	if workers > 1 {
		var wg sync.WaitGroup
		for w := 1; w < workers; w++ {
			wg.Add(1)
			go func() { defer wg.Done(); each(w) }()
		}
		each(0)
		wg.Wait()
	} else {
		each(0)
	}
	m := NewMoments()
	for _, p := range parts {
		m.Merge(p)
	}
	return m
}

// chunkMoments is the single-chunk pass.
func chunkMoments(x []float32) Moments {
	m := NewMoments()
	if len(x) == 0 {
		return m
	}
	shift := float32(0)
	for _, v := range x {
		if v-v == 0 { // finite
			shift = v
			break
		}
	}
	sh := float64(shift)
	var s0, s1, s2, s3 float64 // Σd per lane
	var q0, q1, q2, q3 float64 // Σd² per lane
	mn0, mn1, mx0, mx1 := shift, shift, shift, shift
	var zeros, negz, posz uint32 // zeros; 1 if one of them is −0 / +0
	i := 0
	for ; i+4 <= len(x); i += 4 {
		v := x[i : i+4 : i+4]
		a, b, c, d := v[0], v[1], v[2], v[3]
		da, db, dc, dd := float64(a)-sh, float64(b)-sh, float64(c)-sh, float64(d)-sh
		s0 += da
		s1 += db
		s2 += dc
		s3 += dd
		q0 += da * da
		q1 += db * db
		q2 += dc * dc
		q3 += dd * dd
		// compare-and-branch: the extremes settle fast, so these branches
		// are almost never taken (cheaper than the builtin's NaN handling)
		if a < mn0 {
			mn0 = a
		}
		if a > mx0 {
			mx0 = a
		}
		if b < mn1 {
			mn1 = b
		}
		if b > mx1 {
			mx1 = b
		}
		if c < mn0 {
			mn0 = c
		}
		if c > mx0 {
			mx0 = c
		}
		if d < mn1 {
			mn1 = d
		}
		if d > mx1 {
			mx1 = d
		}
		za, zb, zc, zd := isZero(a), isZero(b), isZero(c), isZero(d)
		zeros += za + zb + zc + zd
		sa, sb, sc, sd := math.Float32bits(a)>>31, math.Float32bits(b)>>31, math.Float32bits(c)>>31, math.Float32bits(d)>>31
		negz |= za&sa | zb&sb | zc&sc | zd&sd
		posz |= za&^sa | zb&^sb | zc&^sc | zd&^sd
	}
	for ; i < len(x); i++ {
		a := x[i]
		da := float64(a) - sh
		s0 += da
		q0 += da * da
		if a < mn0 {
			mn0 = a
		}
		if a > mx0 {
			mx0 = a
		}
		za := isZero(a)
		zeros += za
		sa := math.Float32bits(a) >> 31
		negz |= za & sa
		posz |= za &^ sa
	}
	s := (s0 + s1) + (s2 + s3)
	q := (q0 + q1) + (q2 + q3)
	if s-s != 0 || q-q != 0 {
		return slowMoments(x)
	}
	n := float64(len(x))
	m.N = int64(len(x))
	m.Mean = sh + s/n
	m.M2 = max(0, q-s*s/n)
	m.Min, m.Max = float64(min(mn0, mn1)), float64(max(mx0, mx1))
	if m.Min == 0 {
		// AddFloat32's builtin min prefers −0 to +0 wherever it saw one
		m.Min = 0
		if negz != 0 {
			m.Min = math.Copysign(0, -1)
		}
	}
	if m.Max == 0 {
		// and its builtin max prefers +0
		m.Max = math.Copysign(0, -1)
		if posz != 0 {
			m.Max = 0
		}
	}
	m.Zeros = int64(zeros)
	return m
}

// isZero is 1 for ±0 and 0 otherwise, without a branch.
func isZero(v float32) uint32 {
	return (math.Float32bits(v)&0x7fffffff - 1) >> 31
}

// slowMoments handles a chunk with non-finite values exactly as AddFloat32 does.
func slowMoments(x []float32) Moments {
	m := NewMoments()
	m.AddFloat32(x)
	return m
}

// anyPositive reports whether some value of x is > 0 (NaN is not).
func anyPositive(x []float32) bool {
	i := 0
	for ; i+8 <= len(x); i += 8 {
		v := x[i : i+8 : i+8]
		// max ignores nothing here: a NaN makes the comparison false, and a
		// NaN lane hides the other values of its group, so fall back then
		m := max(v[0], v[1], v[2], v[3], v[4], v[5], v[6], v[7])
		if m > 0 {
			return true
		}
		if m != m {
			for _, e := range v {
				if e > 0 {
					return true
				}
			}
		}
	}
	for _, v := range x[i:] {
		if v > 0 {
			return true
		}
	}
	return false
}

// everPositiveFast is everPositive with the per-unit scan of anyPositive.
func everPositiveFast(ever []bool, x []float32, units, inner int) {
	block := units * inner
	for o := 0; o+block <= len(x); o += block {
		for u := 0; u < units; u++ {
			if !ever[u] && anyPositive(x[o+u*inner:o+(u+1)*inner]) {
				ever[u] = true
			}
		}
	}
}
