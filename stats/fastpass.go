package stats

import "math"

// One-pass moments of a float32 slice at memory speed.
//
// FastMoments returns the same Moments as NewMoments()+AddFloat32 (count,
// mean, M2, min, max, zeros, non-finite) from a single read of the data: it
// is the fused pass of pass.go without histogram or saturation counts
// (fixed chunks of fastChunk values, each summed about its first finite
// value, merged in chunk order, so the results do not depend on the number
// of workers).

// fastChunk is the number of values summed about one shift (a multiple of 16).
const fastChunk = 1 << 14

// fastParallelMin is the slice length from which a pass uses several cores.
const fastParallelMin = 1 << 17

// momentsOnly are the pass parameters for moments alone.
var momentsOnly = passParams{noHist: true, satLo: float32(math.NaN()), satHi: float32(math.NaN())}

// FastMoments computes the moments of x in one pass (see above).
func FastMoments(x []float32) Moments { return tensorPass(x, momentsOnly).mom }

// chunkMoments is the moments of a single chunk (up to fastChunk values).
func chunkMoments(x []float32) Moments {
	m, _ := chunkPass(x, momentsOnly, nil)
	return m
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

// notPositive lists the units u with !ever[u].
func notPositive(ever []bool) []int32 {
	var p []int32
	for u, e := range ever {
		if !e {
			p = append(p, int32(u))
		}
	}
	return p
}

// everPositivePending sets ever[u] for each unit u of pending that has a
// value > 0 in x ([…, units, inner] row-major) and returns the units still
// not seen positive (pending reused). A healthy layer has every unit
// positive after its first batch and then costs nothing.
func everPositivePending(ever []bool, pending []int32, x []float32, units, inner int) []int32 {
	block := units * inner
	for o := 0; o+block <= len(x) && len(pending) > 0; o += block {
		k := 0
		for _, u := range pending {
			at := o + int(u)*inner
			if anyPositive(x[at : at+inner]) {
				ever[u] = true
			} else {
				pending[k] = u
				k++
			}
		}
		pending = pending[:k]
	}
	return pending
}
