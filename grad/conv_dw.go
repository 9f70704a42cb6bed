package grad

import (
	"runtime"
	"sync"

	"github.com/vitals-health/vitals/gemm"
	"github.com/vitals-health/vitals/internal/par"
)

// dL/dW of a float32 Conv as one product per group and sample, summed,
// with the input read channel-last:
//
//	dW[m, c, t] = Σ_{n,p} G[n, m, p]·x[n, c, tap(p, t)]
//
// is C = Σ_n A_n·B_n with A_n = G [Mg, P] of sample n (the float32 copy of
// G that dX's convolution reads too) and B_n[p, (t,c)] = x̃[n, origin(p) +
// t·d, c], x̃ being x channel-last with the padding written out as zeros
// ([N, padded spatial…, C]). B is never stored: gemm.SgemmFunc asks for it
// panel by panel, and each row of a panel is a few contiguous runs copied
// from x̃: the columns whose sources follow each other (all the channels of
// the taps along the last axis when the dilation there is 1 and there is
// one group: a 3×3 kernel gives three runs of 3·C). C's columns come in
// (t, c) order and are put back into W's (c, t) order while summed in
// float64. The samples go in chunks of dwChunk, each chunk's products
// accumulated in a float32 block of its own (chunks run on the workers,
// each product on one), the blocks then summed in float64 in chunk order:
// the result does not depend on the number of workers. The float32 sums
// over dwChunk·P terms add a relative error of order √(dwChunk·P)·2⁻²⁴
// (about 6e-6 at 32×32), within the 1e-4 of the autograd comparison.
func convDW(win *window, N, C, M, G int, x, g32 []float32, gw []float64) {
	Cg, Mg, K, P, I := C/G, M/G, win.K, win.P, win.I
	nd := len(win.in)
	// the padded grid: big enough for every tap of every output position
	ps := make([]int, nd)
	for a := range ps {
		ps[a] = max(win.in[a]+win.padBeg[a], (win.out[a]-1)*win.stride[a]+(win.k[a]-1)*win.dil[a]+1)
	}
	Ip := prod(ps)
	// padAt[i]: input position i on the padded grid; origin[p]: output p's
	// first tap there; tapOff[t]: tap t's offset from it
	padAt, origin, tapOff := make([]int, I), make([]int, P), make([]int, K)
	idx := make([]int, nd)
	for i := range padAt {
		for a := range idx {
			padAt[i] = padAt[i]*ps[a] + idx[a] + win.padBeg[a]
		}
		incr(idx, win.in)
	}
	clear(idx)
	for p := range origin {
		for a := range idx {
			origin[p] = origin[p]*ps[a] + idx[a]*win.stride[a]
		}
		incr(idx, win.out)
	}
	clear(idx)
	for t := range tapOff {
		for a := range idx {
			tapOff[t] = tapOff[t]*ps[a] + idx[a]*win.dil[a]
		}
		incr(idx, win.k)
	}
	// zeros: the padded grid's positions that hold no input value
	isIn := make([]bool, Ip)
	for _, q := range padAt {
		isIn[q] = true
	}
	var zeros []int
	for q, in := range isIn {
		if !in {
			zeros = append(zeros, q)
		}
	}
	xp := scratch(N * Ip * C)
	defer release(xp)
	split(N*C*I, func(lo, hi int) {
		for n := (lo + C*I - 1) / (C * I); n < N && n*C*I < hi; n++ {
			padChannelLast(xp[n*Ip*C:(n+1)*Ip*C], x[n*C*I:(n+1)*C*I], C, I, padAt, zeros)
		}
	})
	if w := gemm.OffsetsWidth(); G == 1 && win.dil[nd-1] == 1 && w > 0 && win.k[nd-1]*C >= w && !dwPackAlways {
		dwRows(win, N, C, M, Ip, origin, tapOff, xp, g32, gw)
		return
	}
	// samples in chunks of dwChunk, each chunk's products summed in its own
	// float32 block, the blocks added in float64 in chunk order: the same
	// result for any number of workers
	chunks := (N + dwChunk - 1) / dwChunk
	blk := Mg * K * Cg
	dws := scratch(chunks * blk)
	defer release(dws)
	workers := max(1, min(runtime.GOMAXPROCS(0), chunks))
	for grp := 0; grp < G; grp++ {
		c0 := grp * Cg
		par.Do(workers, func(part int) {
			n := 0 // the sample whose positions are being packed
			pack := func(nr int, dst []float32, p0, kc, j0, cols int) {
				var segs []dwSeg
				for q := 0; q < cols; q += nr {
					nv := min(nr, cols-q)
					// the panel's columns as runs whose sources follow each other
					segs = segs[:0]
					for j := 0; j < nv; j++ {
						col := j0 + q + j
						off := tapOff[col/Cg]*C + c0 + col%Cg
						if l := len(segs); l > 0 && segs[l-1].off+segs[l-1].l == off {
							segs[l-1].l++
							continue
						}
						segs = append(segs, dwSeg{j: j, off: off, l: 1})
					}
					panel := dst[q*kc : q*kc+nr*kc]
					for r := 0; r < kc; r++ {
						p := p0 + r
						base := (n*Ip + origin[p]) * C
						row := panel[r*nr : (r+1)*nr]
						for _, sg := range segs {
							d := row[sg.j : sg.j+sg.l]
							src := xp[base+sg.off:]
							switch len(d) {
							case 48:
								*(*[48]float32)(d) = [48]float32(src)
							case 16:
								*(*[16]float32)(d) = [16]float32(src)
							default:
								copy(d, src[:len(d)])
							}
						}
						clear(row[nv:])
					}
				}
			}
			for ch := part; ch < chunks; ch += workers {
				// one product per sample, A the sample's G [Mg, P] in place
				dw := dws[ch*blk : (ch+1)*blk]
				for n = ch * dwChunk; n < min(N, (ch+1)*dwChunk); n++ {
					beta := float32(1)
					if n == ch*dwChunk {
						beta = 0
					}
					gemm.SgemmFuncSerial(false, Mg, K*Cg, P, 1, g32[(n*M+grp*Mg)*P:], P, pack, beta, dw, K*Cg)
				}
			}
		})
		acc := gw[grp*Mg*Cg*K : (grp+1)*Mg*Cg*K]
		for ch := 0; ch < chunks; ch++ {
			dw := dws[ch*blk : (ch+1)*blk]
			for m := 0; m < Mg; m++ {
				for t := 0; t < K; t++ {
					src := dw[(m*K+t)*Cg : (m*K+t+1)*Cg]
					for c, v := range src {
						acc[(m*Cg+c)*K+t] += float64(v)
					}
				}
			}
		}
	}
}

// packedAPool keeps dwRows' packed A storage from call to call.
var packedAPool sync.Pool

// dwPackAlways makes every convolution take the packing path (tests and
// benchmarks compare the two).
var dwPackAlways = false

// dwChunk is the number of samples whose products one float32 block sums.
const dwChunk = 8

// dwRows is convDW for one group whose taps along the last axis are
// adjacent (dilation 1 there): for a tap row r (the taps that share every
// index but the last), the kw·C columns (kx, c) of B start at one offset,
//
//	B_r[(n, p), kx·C + c] = x̃[(n·Ip + origin(p) + tapOff[r·kw])·C + kx·C + c],
//
// so each row of B is one contiguous run of the channel-last copy and
// gemm.SgemmPackedAOffsets reads B in place through a table of row
// offsets: nothing is packed but A. A chunk of dwChunk samples is one
// product per tap row with k = samples·P, A = G [M, (n, p)] gathered from
// the chunk's samples and packed once for all tap rows. Chunks run on the
// workers, each product on one; each chunk's float32 blocks are added to
// dL/dW in float64 in chunk order (the result does not depend on the
// number of workers). The float32 sums run over dwChunk·P terms, as in
// the packing path.
func dwRows(win *window, N, C, M, Ip int, origin, tapOff []int, xp, g32 []float32, gw []float64) {
	K, P := win.K, win.P
	kw := win.k[len(win.k)-1]
	rows, cols := K/kw, kw*C
	chunks := (N + dwChunk - 1) / dwChunk
	blk := rows * M * cols // a chunk's blocks: [r][m][kx·C + c]
	dws := scratch(chunks * blk)
	defer release(dws)
	workers := max(1, min(runtime.GOMAXPROCS(0), chunks))
	par.Do(workers, func(part int) {
		pa, _ := packedAPool.Get().(*gemm.PackedA)
		defer func() { packedAPool.Put(pa) }()
		a := scratch(M * dwChunk * P)
		defer release(a)
		offs := make([]int, dwChunk*P)
		for ch := part; ch < chunks; ch += workers {
			n0, n1 := ch*dwChunk, min(N, (ch+1)*dwChunk)
			kk := (n1 - n0) * P
			// A[m, (n−n0)·P + p] = G[n, m, p]
			for m := 0; m < M; m++ {
				for n := n0; n < n1; n++ {
					copy(a[m*kk+(n-n0)*P:m*kk+(n-n0+1)*P], g32[(n*M+m)*P:(n*M+m+1)*P])
				}
			}
			pa = gemm.PackAInto(pa, false, M, kk, a[:M*kk], kk)
			dw := dws[ch*blk : (ch+1)*blk]
			for r := 0; r < rows; r++ {
				for n := n0; n < n1; n++ {
					for p, o := range origin {
						offs[(n-n0)*P+p] = (n*Ip + o + tapOff[r*kw]) * C
					}
				}
				gemm.SgemmPackedAOffsets(cols, pa, xp, offs[:kk], dw[r*M*cols:(r+1)*M*cols], cols)
			}
		}
	})
	for ch := 0; ch < chunks; ch++ {
		dw := dws[ch*blk : (ch+1)*blk]
		for r := 0; r < rows; r++ {
			for m := 0; m < M; m++ {
				src := dw[(r*M+m)*cols : (r*M+m+1)*cols]
				for kx := 0; kx < kw; kx++ {
					t := r*kw + kx
					for c, v := range src[kx*C : (kx+1)*C] {
						gw[(m*C+c)*K+t] += float64(v)
					}
				}
			}
		}
	}
}

// dwSeg is a run of l panel columns from j whose sources start at off
// (from an output position's first tap on the padded grid).
type dwSeg struct{ j, off, l int }

// padChannelLast writes one sample x [C, I] channel-last onto the padded
// grid dst [Ip, C], input position i at padAt[i] and zeros at the
// positions listed in zeros (every other one): 8×8 tiles (8 channels of 8
// positions) read as 8 runs along the positions and written as 8 runs
// along the channels, the rest one by one.
func padChannelLast(dst, x []float32, C, I int, padAt, zeros []int) {
	for _, q := range zeros {
		clear(dst[q*C : (q+1)*C])
	}
	i8, c8 := I/8*8, C/8*8
	var t [8][8]float32
	for i0 := 0; i0 < i8; i0 += 8 {
		at := padAt[i0 : i0+8]
		c0 := 0
		if padBlocks8(dst, x, C, I, c8, i0, at) {
			c0 = c8 // done by the vector loop
		}
		for ; c0 < c8; c0 += 8 {
			for c := 0; c < 8; c++ {
				t[c] = [8]float32(x[(c0+c)*I+i0:])
			}
			for k := 0; k < 8; k++ {
				d := (*[8]float32)(dst[at[k]*C+c0:])
				d[0], d[1], d[2], d[3] = t[0][k], t[1][k], t[2][k], t[3][k]
				d[4], d[5], d[6], d[7] = t[4][k], t[5][k], t[6][k], t[7][k]
			}
		}
		for c := c8; c < C; c++ {
			for k := 0; k < 8; k++ {
				dst[at[k]*C+c] = x[c*I+i0+k]
			}
		}
	}
	for i := i8; i < I; i++ {
		for c := 0; c < C; c++ {
			dst[padAt[i]*C+c] = x[c*I+i]
		}
	}
}
