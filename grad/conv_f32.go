package grad

import (
	"sync"

	"github.com/vitals-health/vitals/gemm"
	"github.com/vitals-health/vitals/internal/par"
)

// convF32 is Conv's dL/dX for float32 models where no transposed
// convolution fits (padding of a whole window span or more: newConvDX
// returns nil): per chunk of samples, dcols = Wᵀ·G [C/G·K, samples·P] with
// the float32 SGEMM of package gemm, folded back onto the input taps in
// float64. The float32 products add a relative error of order √k·2⁻²⁴ for
// sums of length k, far below the 1e-4 the torch comparison allows; float64
// models (the finite-difference tests) take convVJP's float64 path.
func convF32(win *window, N, C, M, G int, w []float32, g, gx []float64) {
	Cg, Mg, K, P, I := C/G, M/G, win.K, win.P, win.I
	// samples per chunk: the column buffer stays below convChunk elements
	// (buffers are reused between calls)
	nc := max(1, (convChunk)/max(Cg*K*P, 1))
	nc = min(nc, N)
	ld := nc * P
	gc := scratch(Mg * ld)
	defer release(gc)
	dcols := scratch(Cg * K * ld)
	defer release(dcols)
	workers := max(1, min(2, Cg)) // the folding loops, split over channels
	for n0 := 0; n0 < N; n0 += nc {
		n1 := min(N, n0+nc)
		cur := (n1 - n0) * P
		for grp := 0; grp < G; grp++ {
			for m := 0; m < Mg; m++ {
				for n := n0; n < n1; n++ {
					src := g[(n*M+grp*Mg+m)*P : (n*M+grp*Mg+m+1)*P]
					dst := gc[m*ld+(n-n0)*P : m*ld+(n-n0+1)*P]
					for p, v := range src {
						dst[p] = float32(v)
					}
				}
			}
			// dcols = W_gᵀ·G  [Cg·K, cur]
			gemm.Sgemm(true, false, Cg*K, cur, Mg, 1, w[grp*Mg*Cg*K:(grp+1)*Mg*Cg*K], Cg*K, gc, ld, 0, dcols, ld)
			par.Do(workers, func(part int) {
				for c := part; c < Cg; c += workers {
					for n := n0; n < n1; n++ {
						dx := gx[(n*C+grp*Cg+c)*I : (n*C+grp*Cg+c+1)*I]
						for t := 0; t < K; t++ {
							row := dcols[(c*K+t)*ld+(n-n0)*P : (c*K+t)*ld+(n-n0+1)*P]
							for _, r := range win.runs[t] {
								if r.off < 0 {
									continue
								}
								src := row[r.p : r.p+r.n]
								if r.step == 1 {
									d := dx[r.off : r.off+r.n]
									for i, v := range src {
										d[i] += float64(v)
									}
									continue
								}
								for i, v := range src {
									dx[r.off+i*r.step] += float64(v)
								}
							}
						}
					}
				}
			})
		}
	}
}

// scratchPool keeps float32 buffers of the convolution VJP between calls
// (contents undefined: every use writes before it reads).
var scratchPool sync.Pool

func scratch(n int) []float32 {
	if b, ok := scratchPool.Get().(*[]float32); ok && cap(*b) >= n {
		return (*b)[:n]
	}
	return make([]float32, n)
}

func release(b []float32) { scratchPool.Put(&b) }

// convChunk bounds the column buffer of one chunk of samples (elements).
var convChunk = 1 << 21

// depthwiseF32 is the VJP of a depthwise convolution (one input and one
// output channel per group), where a product per group would be a 1-row
// GEMM: direct loops over the taps' runs, channels split over the workers.
//
//	dW[c, t] = Σ_n Σ_p G[n, c, p]·x[n, c, tap(p, t)],  dX[n, c, tap(p, t)] += W[c, t]·G[n, c, p]
//
// G and dX are float64 or float32 (grad32.go); the products and dW's sums
// are taken in float64 either way.
func depthwiseF32[T float32 | float64](win *window, N, C int, x, w []float32, g, gx []T, gw []float64) {
	K, P, I := win.K, win.P, win.I
	split(C*P*K*N, func(lo, hi int) {
		per := P * K * N
		for c := lo / per; c < C && c*per < hi; c++ {
			if c*per < lo {
				continue // the channel belongs to the part that holds its start
			}
			for n := 0; n < N; n++ {
				gp := g[(n*C+c)*P : (n*C+c+1)*P]
				xc := x[(n*C+c)*I : (n*C+c+1)*I]
				var dx []T
				if gx != nil {
					dx = gx[(n*C+c)*I : (n*C+c+1)*I]
				}
				for t := 0; t < K; t++ {
					wt := float64(w[c*K+t])
					s := 0.0
					for _, r := range win.runs[t] {
						if r.off < 0 {
							continue
						}
						gr := gp[r.p : r.p+r.n]
						for i, v := range gr {
							j := r.off + i*r.step
							s += float64(v) * float64(xc[j])
							if dx != nil {
								dx[j] += T(wt * float64(v))
							}
						}
					}
					if gw != nil {
						gw[c*K+t] += s
					}
				}
			}
		}
	})
}

// depthwise32 is depthwiseF32 for float32 G and dX (grad32.go): per
// channel, sample and tap, the unit-step runs by the vector loop where
// there is one (dwRunsVec: G·x summed in 16 float32 lanes over one plane's
// run, at most P terms a lane … P/16 on average, then in float64; dX by
// float32 fused multiply-adds), the other runs and every run elsewhere by
// the Go loop (the products in float64, dX rounded once per tap).
func depthwise32(win *window, N, C int, x, w, g, gx []float32, gw []float64) {
	K, P, I := win.K, win.P, win.I
	split(C*P*K*N, func(lo, hi int) {
		per := P * K * N
		var lanes [16]float32
		for c := lo / per; c < C && c*per < hi; c++ {
			if c*per < lo {
				continue // the channel belongs to the part that holds its start
			}
			for n := 0; n < N; n++ {
				gp := g[(n*C+c)*P : (n*C+c+1)*P]
				xc := x[(n*C+c)*I : (n*C+c+1)*I]
				var dx []float32
				if gx != nil {
					dx = gx[(n*C+c)*I : (n*C+c+1)*I]
				}
				for t := 0; t < K; t++ {
					wt := w[c*K+t]
					s := 0.0
					lanes = [16]float32{}
					vec := dwRunsVec(gp, xc, dx, win.runs[t], wt, &lanes)
					if vec {
						s = sumLanes32(&lanes)
					}
					for _, r := range win.runs[t] {
						if r.off < 0 || (vec && r.step == 1) {
							continue
						}
						gr := gp[r.p : r.p+r.n]
						for i, v := range gr {
							j := r.off + i*r.step
							s += float64(v) * float64(xc[j])
							if dx != nil {
								dx[j] += wt * v
							}
						}
					}
					if gw != nil {
						gw[c*K+t] += s
					}
				}
			}
		}
	})
}

// sumLanes32 adds 16 float32 lanes in float64, pairwise.
func sumLanes32(l *[16]float32) float64 {
	var v [8]float64
	for j := range v {
		v[j] = float64(l[j]) + float64(l[j+8])
	}
	return ((v[0] + v[4]) + (v[2] + v[6])) + ((v[1] + v[5]) + (v[3] + v[7]))
}
