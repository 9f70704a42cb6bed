package gemm

import (
	"runtime"
	"sync"
	"unsafe"

	"github.com/vitals-health/vitals/internal/pages"
	"github.com/vitals-health/vitals/internal/par"
)

// operand is op(A) or op(B): either a row-major matrix (data, ld, trans) or,
// when packed != nil, a matrix pre-packed by PackA/PackB whose row (A) or
// column (B) count was padded to padded.
type operand struct {
	data   []float32
	ld     int
	trans  bool
	packed []float32
	padded int
	pack   PackBFunc // B only: panels produced on demand (see SgemmPackedAFunc)
	bias   []float32 // A only: added to row i of the product (see SgemmPackedABias)
}

// packA packs op(A)[i0:i0+rows, p0:p0+kc] into dst as MR-tall micro-panels:
// dst[r·MR·kc + p·MR + i] = op(A)[i0+r·MR+i, p0+p], zero for rows past the end.
func packA(mr int, dst []float32, a operand, i0, rows, p0, kc int) {
	for r := 0; r < rows; r += mr {
		mv := min(mr, rows-r)
		panel := dst[r*kc : r*kc+mr*kc]
		if a.trans {
			// op(A)[i,p] = a[p*ld+i]: MR consecutive values per k step.
			for p := 0; p < kc; p++ {
				src := a.data[(p0+p)*a.ld+i0+r:]
				d := panel[p*mr : p*mr+mr]
				copy(d, src[:mv])
				clear(d[mv:])
			}
			continue
		}
		// op(A)[i,p] = a[i*ld+p]: one source row per panel row, written at stride MR.
		if mr == 8 && mv == 8 {
			packA8(panel, a.data, (i0+r)*a.ld+p0, a.ld, kc)
			continue
		}
		for i := 0; i < mv; i++ {
			src := a.data[(i0+r+i)*a.ld+p0:]
			src = src[:kc]
			for p, v := range src {
				panel[p*mr+i] = v
			}
		}
		for i := mv; i < mr; i++ {
			for p := 0; p < kc; p++ {
				panel[p*mr+i] = 0
			}
		}
	}
}

// packA8 interleaves eight rows of length kc (row i at src[off+i*ld:]) into
// dst[p*8+i], reading the eight rows in step so every write is sequential.
func packA8(dst, src []float32, off, ld, kc int) {
	r0 := src[off : off+kc]
	r1 := src[off+ld : off+ld+kc]
	r2 := src[off+2*ld : off+2*ld+kc]
	r3 := src[off+3*ld : off+3*ld+kc]
	r4 := src[off+4*ld : off+4*ld+kc]
	r5 := src[off+5*ld : off+5*ld+kc]
	r6 := src[off+6*ld : off+6*ld+kc]
	r7 := src[off+7*ld : off+7*ld+kc]
	dst = dst[:8*kc]
	for p := range r0 {
		d := dst[p*8 : p*8+8 : p*8+8]
		d[0], d[1], d[2], d[3] = r0[p], r1[p], r2[p], r3[p]
		d[4], d[5], d[6], d[7] = r4[p], r5[p], r6[p], r7[p]
	}
}

// packB packs op(B)[p0:p0+kc, j0:j0+cols] into dst as NR-wide micro-panels:
// dst[q·NR·kc + p·NR + j] = op(B)[p0+p, j0+q·NR+j], zero for columns past the end.
func packB(nr int, dst []float32, b operand, p0, kc, j0, cols int) {
	for q := 0; q < cols; q += nr {
		nv := min(nr, cols-q)
		panel := dst[q*kc : q*kc+nr*kc]
		if !b.trans {
			// op(B)[p,j] = b[p*ld+j]: NR consecutive values per k step.
			if nv == 48 && nr == 48 {
				off := (p0)*b.ld + j0 + q
				src := b.data[off : off+(kc-1)*b.ld+48]
				for p := 0; p < kc; p++ {
					*(*[48]float32)(panel[p*48:]) = [48]float32(src[p*b.ld:])
				}
				continue
			}
			for p := 0; p < kc; p++ {
				src := b.data[(p0+p)*b.ld+j0+q:]
				d := panel[p*nr : p*nr+nr]
				copy(d, src[:nv])
				clear(d[nv:])
			}
			continue
		}
		// op(B)[p,j] = b[j*ld+p]: one source row per panel column.
		for j := 0; j < nv; j++ {
			src := b.data[(j0+q+j)*b.ld+p0:]
			src = src[:kc]
			for p, v := range src {
				panel[p*nr+j] = v
			}
		}
		for j := nv; j < nr; j++ {
			for p := 0; p < kc; p++ {
				panel[p*nr+j] = 0
			}
		}
	}
}

// buffers are one worker's packing buffers, recycled through getBuffers
// and putBuffers.
type buffers struct {
	a, b, tile []float32
	bias       [16]float32 // an edge tile's bias rows (edgeBias), MR ≤ 16
}

// freeBuffers keeps idle packing buffers for good: a sync.Pool would hand
// them (megabytes each) to the garbage collector at every cycle, and fresh
// memory costs a page fault per 4 KiB. It holds two per core at start-up
// (four on two cores): as many as are in use at once, a product split over
// every core or serial products side by side on each.
var freeBuffers = make(chan *buffers, 2*runtime.GOMAXPROCS(0))

func getBuffers() *buffers {
	select {
	case bf := <-freeBuffers:
		return bf
	default:
		return new(buffers)
	}
}

func putBuffers(bf *buffers) {
	select {
	case freeBuffers <- bf:
	default: // more than are ever used at once: let it go
	}
}

// aligned returns a zeroed slice of n floats whose first element is 64-byte
// aligned (one cache line, one zmm register).
func aligned(n int) []float32 {
	s := pages.Float32s(n + 16)
	off := int(uintptr(unsafe.Pointer(&s[0]))&63) / 4
	if off != 0 {
		off = 16 - off
	}
	return s[off : off+n : off+n]
}

func (bf *buffers) ensure(kern *kernel) {
	if na := kern.mc * kern.kc; len(bf.a) < na {
		bf.a = aligned(na)
	}
	if nb := roundUp(kern.nc, kern.nr) * kern.kc; len(bf.b) < nb {
		bf.b = aligned(nb)
	}
	if nt := kern.mr * kern.nr; len(bf.tile) < nt {
		bf.tile = aligned(nt)
	}
}

// gemmRange computes rows [m0,m1) × columns [n0,n1) of C on one goroutine.
// m0 is a multiple of MR and n0 of NR (needed to index pre-packed operands).
func gemmRange(kern *kernel, bf *buffers, m0, m1, n0, n1, k int, alpha float32, A, B operand, beta float32, c []float32, ldc int) {
	mr, nr, kcMax, mcMax, ncMax := kern.mr, kern.nr, kern.kcFor(k), kern.mc, kern.nc
	fn := kern.fn
	if kern.fnStream != nil && m1-m0 <= kern.maxMStream {
		fn = kern.fnStream
	}
	for jc := n0; jc < n1; jc += ncMax {
		ncur := min(ncMax, n1-jc)
		for pc := 0; pc < k; pc += kcMax {
			kcur := min(kcMax, k-pc)
			// direct: B is read in place by the strided kernel (see kernel.fnStrided).
			direct := B.packed == nil && B.pack == nil && !B.trans && kern.fnStrided != nil && m1-m0 <= kern.maxMDirect
			var bp []float32
			switch {
			case B.packed != nil:
				bp = B.packed[pc*B.padded+(jc*kcur) : pc*B.padded+(jc+roundUp(ncur, nr))*kcur]
			case direct:
				// Only a partial last micro-panel is packed (zero padded).
				if last := ncur / nr * nr; last < ncur {
					bp = bf.b[:roundUp(ncur, nr)*kcur]
					packB(nr, bp[last*kcur:], B, pc, kcur, jc+last, ncur-last)
				}
			case B.pack != nil:
				bp = bf.b[:roundUp(ncur, nr)*kcur]
				B.pack(nr, bp, pc, kcur, jc, ncur)
			default:
				bp = bf.b[:roundUp(ncur, nr)*kcur]
				packB(nr, bp, B, pc, kcur, jc, ncur)
			}
			// The first k slice applies the caller's beta; later slices accumulate.
			betaEff, betaZero := sliceBeta(pc, beta)
			// the first slice of a product with a bias starts from it (the
			// caller checked the kernel has the bias variants)
			withBias := pc == 0 && A.bias != nil
			// directA: A is read in place by fnStridedA (see kernel.fnStridedA).
			directA := A.packed == nil && !A.trans && kern.fnStridedA != nil && m1-m0 > kern.maxMStream &&
				(!direct || kern.fnStridedAB != nil)
			for ic := m0; ic < m1; ic += mcMax {
				mcur := min(mcMax, m1-ic)
				var ap []float32
				switch {
				case A.packed != nil:
					ap = A.packed[pc*A.padded+ic*kcur : pc*A.padded+(ic+roundUp(mcur, mr))*kcur]
				case directA:
					// Only a partial last micro-panel is packed (zero padded).
					if last := mcur / mr * mr; last < mcur {
						ap = bf.a[:roundUp(mcur, mr)*kcur]
						packA(mr, ap[last*kcur:], A, ic+last, mcur-last, pc, kcur)
					}
				default:
					ap = bf.a[:roundUp(mcur, mr)*kcur]
					packA(mr, ap, A, ic, mcur, pc, kcur)
				}
				for jr := 0; jr < ncur; jr += nr {
					nv := min(nr, ncur-jr)
					if direct && nv == nr {
						bo := pc*B.ld + jc + jr
						bsrc := B.data[bo : bo+(kcur-1)*B.ld+nr]
						for ir := 0; ir < mcur; ir += mr {
							mv := min(mr, mcur-ir)
							ci := (ic+ir)*ldc + jc + jr
							if directA && mv == mr {
								asrc := &A.data[(ic+ir)*A.ld+pc]
								kern.fnStridedAB(kcur, asrc, A.ld, &bsrc[0], B.ld, &c[ci], ldc, alpha, betaEff, betaZero)
								continue
							}
							if mv == mr {
								if withBias {
									kern.fnStridedBias(kcur, &ap[ir*kcur], &bsrc[0], B.ld, &c[ci], ldc, alpha, betaEff, betaZero, &A.bias[ic+ir])
									continue
								}
								kern.fnStrided(kcur, &ap[ir*kcur], &bsrc[0], B.ld, &c[ci], ldc, alpha, betaEff, betaZero)
								continue
							}
							t := bf.tile[:mr*nr]
							if betaZero == 0 {
								edgeCopy(t, nr, c, ci, ldc, mv, nv, false)
							}
							if withBias {
								kern.fnStridedBias(kcur, &ap[ir*kcur], &bsrc[0], B.ld, &t[0], nr, alpha, betaEff, betaZero, edgeBias(bf, A.bias, ic+ir, mv, mr))
							} else {
								kern.fnStrided(kcur, &ap[ir*kcur], &bsrc[0], B.ld, &t[0], nr, alpha, betaEff, betaZero)
							}
							edgeCopy(t, nr, c, ci, ldc, mv, nv, true)
						}
						continue
					}
					bpp := &bp[jr*kcur]
					for ir := 0; ir < mcur; ir += mr {
						mv := min(mr, mcur-ir)
						ci := (ic+ir)*ldc + jc + jr
						if directA && mv == mr {
							asrc := &A.data[(ic+ir)*A.ld+pc]
							if nv == nr {
								kern.fnStridedA(kcur, asrc, A.ld, bpp, &c[ci], ldc, alpha, betaEff, betaZero)
								continue
							}
							t := bf.tile[:mr*nr]
							if betaZero == 0 {
								edgeCopy(t, nr, c, ci, ldc, mv, nv, false)
							}
							kern.fnStridedA(kcur, asrc, A.ld, bpp, &t[0], nr, alpha, betaEff, betaZero)
							edgeCopy(t, nr, c, ci, ldc, mv, nv, true)
							continue
						}
						app := &ap[ir*kcur]
						if mv == mr && nv == nr {
							if withBias {
								kern.fnBias(kcur, app, bpp, &c[ci], ldc, alpha, betaEff, betaZero, &A.bias[ic+ir])
								continue
							}
							fn(kcur, app, bpp, &c[ci], ldc, alpha, betaEff, betaZero)
							continue
						}
						// Edge tile: compute into the scratch tile, write back the valid part.
						t := bf.tile[:mr*nr]
						if betaZero == 0 {
							edgeCopy(t, nr, c, ci, ldc, mv, nv, false)
						}
						if withBias {
							kern.fnBias(kcur, app, bpp, &t[0], nr, alpha, betaEff, betaZero, edgeBias(bf, A.bias, ic+ir, mv, mr))
						} else {
							fn(kcur, app, bpp, &t[0], nr, alpha, betaEff, betaZero)
						}
						edgeCopy(t, nr, c, ci, ldc, mv, nv, true)
					}
				}
			}
		}
	}
}

// edgeBias is the bias of an edge tile's mv rows from row i0, padded with
// zeros to mr values in the worker's buffers (the kernel reads mr).
func edgeBias(bf *buffers, bias []float32, i0, mv, mr int) *float32 {
	b := bf.bias[:mr]
	copy(b, bias[i0:i0+mv])
	clear(b[mv:])
	return &b[0]
}

// job is one parallel call: the arguments plus one C range per worker.
type job struct {
	kern   *kernel
	k      int
	alpha  float32
	beta   float32
	A, B   operand
	c      []float32
	ldc    int
	ranges []span
	run    func(int) // j.do, bound once so that a call does not allocate
}

type span struct{ m0, m1, n0, n1 int }

func (j *job) do(i int) {
	r := j.ranges[i]
	bf := getBuffers()
	bf.ensure(j.kern)
	gemmRange(j.kern, bf, r.m0, r.m1, r.n0, r.n1, j.k, j.alpha, j.A, j.B, j.beta, j.c, j.ldc)
	putBuffers(bf)
}

var jobPool = sync.Pool{New: func() any {
	j := new(job)
	j.run = j.do
	return j
}}

// minWorkPerThread is the multiply-add count below which a call (or one more
// worker) is not worth the hand-off (~ a 64×64×64 product).
const minWorkPerThread = 1 << 18

// runOn splits C into one range per worker (at most w) and computes it.
func runOn(w int, kern *kernel, m, n, k int, alpha float32, A, B operand, beta float32, c []float32, ldc int) {
	mt := (m + kern.mr - 1) / kern.mr // row tiles
	nt := (n + kern.nr - 1) / kern.nr // column tiles
	if work := m * n * k; work/minWorkPerThread < w {
		w = max(1, work/minWorkPerThread)
	}
	// Split the dimension with more tiles; the other operand's packing is
	// then the one duplicated per worker, and it is the smaller one.
	splitN := nt >= mt
	if splitN {
		w = min(w, nt)
	} else {
		w = min(w, mt)
	}
	if w <= 1 {
		bf := getBuffers()
		bf.ensure(kern)
		gemmRange(kern, bf, 0, m, 0, n, k, alpha, A, B, beta, c, ldc)
		putBuffers(bf)
		return
	}
	j := jobPool.Get().(*job)
	j.kern, j.k, j.alpha, j.beta, j.A, j.B, j.c, j.ldc = kern, k, alpha, beta, A, B, c, ldc
	j.ranges = j.ranges[:0]
	tiles := mt
	if splitN {
		tiles = nt
	}
	for i := 0; i < w; i++ {
		t0, t1 := tiles*i/w, tiles*(i+1)/w
		if splitN {
			j.ranges = append(j.ranges, span{0, m, t0 * kern.nr, min(n, t1*kern.nr)})
		} else {
			j.ranges = append(j.ranges, span{t0 * kern.mr, min(m, t1*kern.mr), 0, n})
		}
	}
	par.Do(w, j.run)
	j.A, j.B, j.c = operand{}, operand{}, nil
	jobPool.Put(j)
}

// sliceBeta is the beta a k slice starting at pc applies: the caller's for
// the first slice (betaZero = 1 when it is 0: C is not read), 1 for later
// slices, which accumulate.
func sliceBeta(pc int, beta float32) (betaEff float32, betaZero int) {
	if pc > 0 {
		return 1, 0
	}
	if beta == 0 {
		return beta, 1
	}
	return beta, 0
}

// edgeCopy moves the mv×nv block of C at c[ci:] (row stride ldc) between C
// and the scratch tile t (row stride nr) of an edge micro-tile: into C if
// toC, else out of it (before a kernel call that accumulates into t).
func edgeCopy(t []float32, nr int, c []float32, ci, ldc, mv, nv int, toC bool) {
	for i := 0; i < mv; i++ {
		if toC {
			copy(c[ci+i*ldc:ci+i*ldc+nv], t[i*nr:i*nr+nv])
		} else {
			copy(t[i*nr:i*nr+nv], c[ci+i*ldc:ci+i*ldc+nv])
		}
	}
}
