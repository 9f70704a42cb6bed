package probe

// Depthwise planes whose output rows fit one vector (OW ≤ 16): the late,
// small planes of the mobile networks (14×14, 7×7 with 3×3 or 5×5 windows),
// where the row and tap paths spend more on copying each plane into a
// padded scratch and on per-row calls than on the arithmetic. Each output
// row is one accumulator:
//
//	y[oh, ·] = bias + Σ_{kh<KH, kw<KW} w[kh,kw] · x[oh·sh − pt + kh, (·)·sw − pl + kw]
//
// the taps added in (kh, kw) order by fused multiply-adds, an input row
// read straight from the plane under a lane mask that zeroes the columns
// outside the image, a row outside the image as zeros. Eight output rows
// are summed at once (eight independent chains of multiply-adds: two FMA
// units, four cycles each), their input rows found in a table of row
// pointers built per plane. That is the
// arithmetic of dwTapsAVX512 on its padded phase planes, so both give the
// same bits (TestDwSmallSameAsTaps). Stride 2 along the row reads 32
// values and keeps the even ones.

// dwSmallArgs are the constants of one node's planes for dwSmallAVX512
// (the layout is read by the assembly: keep the field order).
type dwSmallArgs struct {
	w              *float32 // KH·KW weights of the plane's channel (set per plane)
	h, wd, oh, ow  int
	kh, kw, pt, sh int
	sw             int
	bias           float32   // set per plane
	outMask        uint32    // lanes j < OW
	offs           [7]int    // kw − pl: column of lane 0's tap kw (stride 1), or of the 32-value window's start (stride 2)
	masks          [7]uint32 // lanes (stride 2: of the 32-value window) whose tap kw lies inside the image
	zero           *float32  // a row of zeros standing in for rows outside the image
}

// dwsZeros is the row of zeros of dwSmallArgs.zero: an input row holds at
// most (OW−1)·sw + KW + sw − 1 ≤ 38 values that a tap reads.
var dwsZeros [64]float32

// dwSmallOK reports whether dwSmallPlane takes planes of geometry g.
func dwSmallOK(g *convGeom) bool {
	return haveDwSmall && len(g.k) == 2 && g.out[1] <= 16 && g.out[1] > 0 && g.out[0] > 0 && g.out[0] <= 64 &&
		g.k[0] <= 7 && g.k[1] <= 7 && g.dil[0] == 1 && g.dil[1] == 1 &&
		(g.strides[0] == 1 || g.strides[0] == 2) && (g.strides[1] == 1 || g.strides[1] == 2)
}

// dwTapsCheaper reports whether a stride-1 window of 5×5 or more on planes
// that dwSmallPlane could take costs fewer vector operations on the tap
// runs of dwTapsPlane: dwSmallPlane does OH·KH·KW vector multiply-adds
// (one per output row and tap, OW ≤ 16 lanes used), dwTapsPlane
// ⌈((OH−1)·Wq + OW)/16⌉·KH·KW over the flattened padded plane plus two
// row copies per padded input row and output row (counted as two vector
// operations each; BenchmarkConvDW5x5s1 and BenchmarkConvDW7s1 on 7×7
// planes: 5×5 459–498 µs on the taps against 543–571 µs, 3×3 on the taps
// 315–333 against 256–266 µs, which the count keeps on dwSmallPlane).
func dwTapsCheaper(g *convGeom) bool {
	if len(g.k) != 2 || g.strides[0] != 1 || g.strides[1] != 1 || g.k[0]*g.k[1] < 25 || g.k[0]*g.k[1] > dwMaxTaps {
		return false
	}
	OH, OW := g.out[0], g.out[1]
	Hq, Wq := dwTapsDims(g)
	taps := g.k[0] * g.k[1]
	small := OH * taps
	runs := dwTapsRound((OH-1)*Wq+OW) / 16 * taps
	return runs+2*(Hq+OH) < small
}

// newDwSmallArgs sets the per-node constants for geometry g (dwSmallOK).
func newDwSmallArgs(g *convGeom) dwSmallArgs {
	a := dwSmallArgs{
		h: g.in[0], wd: g.in[1], oh: g.out[0], ow: g.out[1],
		kh: g.k[0], kw: g.k[1], pt: g.padBeg[0], sh: g.strides[0], sw: g.strides[1],
		outMask: 1<<g.out[1] - 1, zero: &dwsZeros[0],
	}
	for kw := 0; kw < g.k[1]; kw++ {
		off := kw - g.padBeg[1]
		a.offs[kw] = off
		var m uint32
		for j := 0; j < g.out[1]; j++ {
			i := j * a.sw // lane in the (32-value) window
			if c := i + off; c >= 0 && c < g.in[1] {
				m |= 1 << i
			}
		}
		a.masks[kw] = m
	}
	return a
}
