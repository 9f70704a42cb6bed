package gemm

import (
	"fmt"

	"github.com/vitals-health/vitals/internal/par"
)

// Products over a batch of images as one GEMM.
//
// A 1×1 convolution of image i is C_i = W·X_i, X_i the image's k×P matrix
// (channels × pixels) and C_i its m×P output. With small planes (P = 49 for
// 7×7, 196 for 14×14) one product per image leaves the last NR-wide column
// tile mostly empty (49 columns are 2 tiles of 48) and re-reads W per
// image. SgemmPackedAImages multiplies W once by the k × imgs·P matrix
// [X_0 X_1 …] instead: column j is column j mod P of image ⌊j/P⌋, read in
// place from the images and written in place into the images' outputs, so
// no copy of X or of C is made. Tiles that lie within one image are written
// straight into it; tiles that straddle two images are computed in the
// worker's scratch tile and copied out piece by piece (copyTile).

// imgLayout maps column j of a batched operand to image ⌊j/P⌋, column
// j mod P: element (row r, column j) is at ⌊j/P⌋·stride + r·ld + j mod P.
type imgLayout struct {
	P, stride, ld int
}

// at is the offset of (row r, column j).
func (l imgLayout) at(r, j int) int {
	return j/l.P*l.stride + r*l.ld + j%l.P
}

// SgemmPackedAImages computes, for each image i < imgs,
//
//	C_i = A·B_i + bias·1ᵀ   (bias != nil), or
//	C_i = A·B_i + beta·C_i  (bias == nil),
//
// with A (m×k) packed by PackA, B_i = b[i·bStride:] (k×P, row stride ldb)
// and C_i = c[i·cStride:] (m×P, row stride ldc), as one product over the
// imgs·P columns of all images (see above). bias[r] is added to every
// element of row r (len(bias) ≥ m). Each C element is the same dot product,
// in the same order, as the per-image SgemmPackedA (or SgemmPackedABias)
// computes when the kernel and k slicing are the same. It uses up to
// Threads() workers; C blocks of different images must not overlap.
func SgemmPackedAImages(imgs, P int, pa *PackedA, b []float32, ldb, bStride int, bias []float32, beta float32, c []float32, ldc, cStride int) {
	sgemmPackedAImagesOn(Threads(), imgs, P, pa, b, ldb, bStride, bias, beta, c, ldc, cStride)
}

func sgemmPackedAImagesOn(workers, imgs, P int, pa *PackedA, b []float32, ldb, bStride int, bias []float32, beta float32, c []float32, ldc, cStride int) {
	m, k := pa.m, pa.k
	if imgs < 0 || P < 0 {
		panic("gemm: negative image count or plane size")
	}
	if imgs == 0 || P == 0 || m == 0 {
		return
	}
	checkDims(m, P, 0, ldc, len(c)-(imgs-1)*cStride)
	if ldb < P || (k > 0 && len(b) < (imgs-1)*bStride+(k-1)*ldb+P) {
		panic("gemm: B images too short or ldb < P")
	}
	if imgs > 1 && (cStride < (m-1)*ldc+P || bStride < 0) {
		panic("gemm: C images overlap")
	}
	if bias != nil && len(bias) < m {
		panic(fmt.Sprintf("gemm: bias has %d values, want %d", len(bias), m))
	}
	kern := pa.kern
	A := pa.operand()
	bl := imgLayout{P, bStride, ldb}
	cl := imgLayout{P, cStride, ldc}
	n := imgs * P
	if k == 0 || (bias != nil && kern.fnBias == nil) {
		// C = bias (or beta·C) first; the product then accumulates onto it
		for i := 0; i < imgs; i++ {
			ci := c[i*cStride:]
			if bias != nil {
				for r := 0; r < m; r++ {
					row := ci[r*ldc : r*ldc+P]
					for j := range row {
						row[j] = bias[r]
					}
				}
			} else {
				scaleC(m, P, beta, ci, ldc)
			}
		}
		if k == 0 {
			return
		}
		bias, beta = nil, 1
	}
	if bias != nil {
		A.bias = bias
		beta = 0
	}
	mt := (m + kern.mr - 1) / kern.mr
	nt := (n + kern.nr - 1) / kern.nr
	w := workers
	if work := m * n * k; work/minWorkPerThread < w {
		w = max(1, work/minWorkPerThread)
	}
	splitN := nt >= mt
	tiles := mt
	if splitN {
		tiles = nt
	}
	w = max(1, min(w, tiles))
	par.Do(w, func(i int) {
		t0, t1 := tiles*i/w, tiles*(i+1)/w
		m0, m1, n0, n1 := 0, m, 0, n
		if splitN {
			n0, n1 = t0*kern.nr, min(n, t1*kern.nr)
		} else {
			m0, m1 = t0*kern.mr, min(m, t1*kern.mr)
		}
		bf := getBuffers()
		bf.ensure(kern)
		gemmRangeImages(kern, bf, m0, m1, n0, n1, k, A, b, bl, beta, c, cl)
		putBuffers(bf)
	})
}

// gemmRangeImages is gemmRange for rows [m0,m1) × batched columns [n0,n1)
// with A pre-packed and B, C laid out as images (bl, cl). A column tile
// inside one image is read in place by the strided kernel when it has one
// and the rows fit (as gemmRange does), else packed; the C tile is written
// in place, or through the scratch tile when it straddles images.
func gemmRangeImages(kern *kernel, bf *buffers, m0, m1, n0, n1, k int, A operand, b []float32, bl imgLayout, beta float32, c []float32, cl imgLayout) {
	mr, nr, kcMax, mcMax, ncMax := kern.mr, kern.nr, kern.kcFor(k), kern.mc, kern.nc
	fn := kern.fn
	if kern.fnStream != nil && m1-m0 <= kern.maxMStream {
		fn = kern.fnStream
	}
	direct := kern.fnStrided != nil && m1-m0 <= kern.maxMDirect
	P := bl.P
	for jc := n0; jc < n1; jc += ncMax {
		ncur := min(ncMax, n1-jc)
		for pc := 0; pc < k; pc += kcMax {
			kcur := min(kcMax, k-pc)
			bp := bf.b[:roundUp(ncur, nr)*kcur]
			for jr := 0; jr < ncur; jr += nr {
				nv := min(nr, ncur-jr)
				if direct && nv == nr && (jc+jr)%P+nr <= P {
					continue // read in place
				}
				packBImages(nr, bp[jr*kcur:(jr+nr)*kcur], b, bl, pc, kcur, jc+jr, nv)
			}
			betaEff, betaZero := sliceBeta(pc, beta)
			withBias := pc == 0 && A.bias != nil
			for ic := m0; ic < m1; ic += mcMax {
				mcur := min(mcMax, m1-ic)
				ap := A.packed[pc*A.padded+ic*kcur : pc*A.padded+(ic+roundUp(mcur, mr))*kcur]
				for jr := 0; jr < ncur; jr += nr {
					j := jc + jr
					nv := min(nr, ncur-jr)
					inOne := nv == nr && j%P+nr <= P
					useDirect := direct && inOne
					var bsrc *float32
					if useDirect {
						bsrc = &b[bl.at(pc, j)]
					}
					bpp := &bp[jr*kcur]
					for ir := 0; ir < mcur; ir += mr {
						mv := min(mr, mcur-ir)
						app := &ap[ir*kcur]
						if mv == mr && inOne {
							ci := &c[cl.at(ic+ir, j)]
							switch {
							case useDirect && withBias:
								kern.fnStridedBias(kcur, app, bsrc, bl.ld, ci, cl.ld, 1, betaEff, betaZero, &A.bias[ic+ir])
							case useDirect:
								kern.fnStrided(kcur, app, bsrc, bl.ld, ci, cl.ld, 1, betaEff, betaZero)
							case withBias:
								kern.fnBias(kcur, app, bpp, ci, cl.ld, 1, betaEff, betaZero, &A.bias[ic+ir])
							default:
								fn(kcur, app, bpp, ci, cl.ld, 1, betaEff, betaZero)
							}
							continue
						}
						// edge or straddling tile: through the scratch tile
						t := bf.tile[:mr*nr]
						if betaZero == 0 {
							copyTile(t, nr, c, cl, ic+ir, j, mv, nv, false)
						}
						switch {
						case useDirect && withBias:
							kern.fnStridedBias(kcur, app, bsrc, bl.ld, &t[0], nr, 1, betaEff, betaZero, edgeBias(bf, A.bias, ic+ir, mv, mr))
						case useDirect:
							kern.fnStrided(kcur, app, bsrc, bl.ld, &t[0], nr, 1, betaEff, betaZero)
						case withBias:
							kern.fnBias(kcur, app, bpp, &t[0], nr, 1, betaEff, betaZero, edgeBias(bf, A.bias, ic+ir, mv, mr))
						default:
							fn(kcur, app, bpp, &t[0], nr, 1, betaEff, betaZero)
						}
						copyTile(t, nr, c, cl, ic+ir, j, mv, nv, true)
					}
				}
			}
		}
	}
}

// copyTile moves the mv×nv block of batched C at rows r0…, columns j0…
// between C (layout cl) and the scratch tile t (row stride ldt): into C if
// toC, else out of it. The block's columns may span several images.
func copyTile(t []float32, ldt int, c []float32, cl imgLayout, r0, j0, mv, nv int, toC bool) {
	for d := 0; d < nv; {
		j := j0 + d
		n := min(cl.P-j%cl.P, nv-d)
		for i := 0; i < mv; i++ {
			o := cl.at(r0+i, j)
			if toC {
				copy(c[o:o+n], t[i*ldt+d:i*ldt+d+n])
			} else {
				copy(t[i*ldt+d:i*ldt+d+n], c[o:o+n])
			}
		}
		d += n
	}
}

// packBImages packs one NR-wide micro-panel of the batched B: rows
// [p0, p0+kc), columns [j0, j0+nv) (nv ≤ nr), zero for columns past nv.
func packBImages(nr int, panel, b []float32, bl imgLayout, p0, kc, j0, nv int) {
	panel = panel[:nr*kc]
	for d := 0; d < nv; {
		j := j0 + d
		n := min(bl.P-j%bl.P, nv-d)
		o := bl.at(p0, j)
		for p := 0; p < kc; p++ {
			copy(panel[p*nr+d:p*nr+d+n], b[o+p*bl.ld:o+p*bl.ld+n])
		}
		d += n
	}
	if nv < nr {
		for p := 0; p < kc; p++ {
			clear(panel[p*nr+nv : (p+1)*nr])
		}
	}
}
