package gemm

// Products whose B rows are runs of one array at arbitrary offsets.
//
// A convolution over zero-padded image planes with pitch Wq (the padded
// row length) reads, for weight row p = (channel, kh, kw) and flattened
// output position j = oh·Wq + ow, the value xp[off(p) + j], off(p) the
// tap's offset: every row of the im2col matrix is one contiguous run of
// the planes, so with the output computed at pitch Wq (Wq − OW unused
// columns per row) B needs no copy at all. SgemmPackedAOffsets reads such
// a B in place through the row table (the AVX-512 kernel loads row p of a
// micro-panel at b + offs[p]); only a partial last column tile, and every
// tile on kernels without that variant, is packed.

// SgemmPackedAOffsets computes C = A·B on the calling goroutine, A (m×k)
// packed by PackA, B (k×n) given by B[p][j] = b[offs[p] + j] (len(offs) ≥ k,
// offs[p] ≥ 0 and offs[p] + n ≤ len(b)), C m×n with row stride ldc; C is
// only written.
func SgemmPackedAOffsets(n int, pa *PackedA, b []float32, offs []int, c []float32, ldc int) {
	m, k := pa.m, pa.k
	checkDims(m, n, k, ldc, len(c))
	if len(offs) < k {
		panic("gemm: row table shorter than k")
	}
	for _, o := range offs[:k] {
		if o < 0 || o+n > len(b) {
			panic("gemm: B row outside b")
		}
	}
	if m == 0 || n == 0 {
		return
	}
	if k == 0 {
		scaleC(m, n, 0, c, ldc)
		return
	}
	kern := pa.kern
	A := pa.operand()
	bf := getBuffers()
	bf.ensure(kern)
	defer putBuffers(bf)
	mr, nr, kcMax, mcMax, ncMax := kern.mr, kern.nr, kern.kcFor(k), kern.mc, kern.nc
	for jc := 0; jc < n; jc += ncMax {
		ncur := min(ncMax, n-jc)
		for pc := 0; pc < k; pc += kcMax {
			kcur := min(kcMax, k-pc)
			of := offs[pc : pc+kcur]
			bp := bf.b[:roundUp(ncur, nr)*kcur]
			for jr := 0; jr < ncur; jr += nr {
				if kern.fnOffs != nil && jr+nr <= ncur {
					continue // read in place
				}
				packOffs(nr, bp[jr*kcur:(jr+nr)*kcur], b, of, jc+jr, min(nr, ncur-jr))
			}
			betaEff, betaZero := sliceBeta(pc, 0) // C is only written
			for ic := 0; ic < m; ic += mcMax {
				mcur := min(mcMax, m-ic)
				ap := A.packed[pc*A.padded+ic*kcur : pc*A.padded+(ic+roundUp(mcur, mr))*kcur]
				for jr := 0; jr < ncur; jr += nr {
					nv := min(nr, ncur-jr)
					inPlace := kern.fnOffs != nil && nv == nr
					for ir := 0; ir < mcur; ir += mr {
						mv := min(mr, mcur-ir)
						app := &ap[ir*kcur]
						ci := (ic+ir)*ldc + jc + jr
						if mv == mr && nv == nr {
							if inPlace {
								kern.fnOffs(kcur, app, &b[jc+jr], &of[0], &c[ci], ldc, 1, betaEff, betaZero)
							} else {
								kern.fn(kcur, app, &bp[jr*kcur], &c[ci], ldc, 1, betaEff, betaZero)
							}
							continue
						}
						t := bf.tile[:mr*nr]
						if betaZero == 0 {
							edgeCopy(t, nr, c, ci, ldc, mv, nv, false)
						}
						if inPlace {
							kern.fnOffs(kcur, app, &b[jc+jr], &of[0], &t[0], nr, 1, betaEff, betaZero)
						} else {
							kern.fn(kcur, app, &bp[jr*kcur], &t[0], nr, 1, betaEff, betaZero)
						}
						edgeCopy(t, nr, c, ci, ldc, mv, nv, true)
					}
				}
			}
		}
	}
}

// packOffs packs the nv (≤ nr) columns from j0 of B[p][j] = b[of[p] + j]
// as one nr-wide micro-panel, zero past nv.
func packOffs(nr int, panel, b []float32, of []int, j0, nv int) {
	for p, o := range of {
		d := panel[p*nr : (p+1)*nr]
		copy(d[:nv], b[o+j0:o+j0+nv])
		clear(d[nv:])
	}
}

// OffsetsWidth is the number of columns SgemmPackedAOffsets reads in place
// per micro-panel (0 when the active kernel packs every panel): a product
// narrower than this packs B after all.
func OffsetsWidth() int {
	if k := active.Load(); k.fnOffs != nil {
		return k.nr
	}
	return 0
}
