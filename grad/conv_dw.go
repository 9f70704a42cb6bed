package grad

import "github.com/vitals-health/vitals/gemm"

// dL/dW of a float32 Conv as one product per group over every sample and
// output position at once, with the input read channel-last:
//
//	dW[m, c, t] = Σ_{n,p} G[n, m, p]·x[n, c, tap(p, t)]
//
// is C = A·B with A = G [Mg, N·P] (float32, m-major) and
// B[(n,p), (t,c)] = xᶜˡ[n, tap(p, t), c], xᶜˡ being x transposed to
// [N, I, C]. B is never stored: gemm.SgemmFunc asks for it panel by panel,
// and each row of a panel is a few contiguous runs of Cg channels copied
// from xᶜˡ (zeros where the tap falls into the padding). C's columns come in
// (t, c) order and are put back into W's (c, t) order while summed in
// float64. The float32 sums over N·P terms add a relative error of order
// √(N·P)·2⁻²⁴ (about 1e-5 at 64 samples of 32×32), within the 1e-4 of the
// autograd comparison.
func convDW(win *window, N, C, M, G int, x []float32, g, gw []float64) {
	Cg, Mg, K, P, I := C/G, M/G, win.K, win.P, win.I
	NP := N * P
	// x channel-last, [N, I, C], then C zeros read by the taps in the padding
	xcl := scratch(N*I*C + C)
	defer release(xcl)
	clear(xcl[N*I*C:])
	split(N*C*I, func(lo, hi int) {
		for n := lo / (C * I); n < N && n*C*I < hi; n++ {
			if n*C*I < lo {
				continue
			}
			transposeF32(xcl[n*I*C:(n+1)*I*C], x[n*C*I:(n+1)*C*I], C, I)
		}
	})
	// G as float32, [M, N·P]
	a := scratch(M * NP)
	defer release(a)
	split(N*M*P, func(lo, hi int) {
		for pl := lo / max(P, 1); pl < N*M && pl*P < hi; pl++ {
			if pl*P < lo {
				continue
			}
			n, m := pl/M, pl%M
			dst := a[m*NP+n*P : m*NP+(n+1)*P]
			for i, v := range g[pl*P : (pl+1)*P] {
				dst[i] = float32(v)
			}
		}
	})
	dw := scratch(Mg * K * Cg)
	defer release(dw)
	for grp := 0; grp < G; grp++ {
		c0 := grp * Cg
		pack := func(nr int, dst []float32, p0, kc, j0, cols int) {
			var segs []dwSeg
			for q := 0; q < cols; q += nr {
				nv := min(nr, cols-q)
				// the panel's columns as runs of consecutive channels of one tap
				segs = segs[:0]
				for j := 0; j < nv; {
					col := j0 + q + j
					t, c := col/Cg, col%Cg
					l := min(Cg-c, nv-j)
					segs = append(segs, dwSeg{j: j, t: t, c: c0 + c, l: l})
					j += l
				}
				panel := dst[q*kc : q*kc+nr*kc]
				n, p := p0/P, p0%P
				for r := 0; r < kc; r++ {
					taps := win.taps[p*K : (p+1)*K]
					row := panel[r*nr : (r+1)*nr]
					for _, sg := range segs {
						d := row[sg.j : sg.j+sg.l]
						off := taps[sg.t]
						if off < 0 {
							clear(d)
							continue
						}
						src := xcl[(n*I+off)*C+sg.c:]
						switch len(d) {
						case 8:
							*(*[8]float32)(d) = [8]float32(src)
						case 16:
							*(*[16]float32)(d) = [16]float32(src)
						case 32:
							*(*[32]float32)(d) = [32]float32(src)
						default:
							src = src[:len(d)]
							for i, v := range src {
								d[i] = v
							}
						}
					}
					clear(row[nv:])
					if p++; p == P {
						n, p = n+1, 0
					}
				}
			}
		}
		gemm.SgemmFunc(false, Mg, K*Cg, NP, 1, a[grp*Mg*NP:], NP, pack, 0, dw, K*Cg)
		acc := gw[grp*Mg*Cg*K : (grp+1)*Mg*Cg*K]
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

// transposeF32 writes the [rows, cols] matrix src transposed into dst
// [cols, rows], in 8×8 blocks.
func transposeF32(dst, src []float32, rows, cols int) {
	const b = 8
	for i0 := 0; i0 < rows; i0 += b {
		i1 := min(rows, i0+b)
		for j0 := 0; j0 < cols; j0 += b {
			j1 := min(cols, j0+b)
			for i := i0; i < i1; i++ {
				s := src[i*cols : i*cols+cols]
				for j := j0; j < j1; j++ {
					dst[j*rows+i] = s[j]
				}
			}
		}
	}
}

// dwSeg is a run of l panel columns from j holding channels c… of tap t.
type dwSeg struct{ j, t, c, l int }
