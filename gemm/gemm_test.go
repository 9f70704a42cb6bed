package gemm

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sync/atomic"
	"testing"
)

// Tolerance. Every kernel accumulates in float32 (fused multiply-adds, in a
// kernel-specific order), so each element is checked against a float64 naive
// triple loop with the standard forward error bound for a length-k float32
// dot product, doubled for slack:
//
//	|C - C_ref| <= 2·(k+2)·u · (|alpha|·Σ_p |op(A)[i,p]|·|op(B)[p,j]| + |beta|·|C0[i,j]|),  u = 2⁻²⁴.
const unitRoundoff = 1.0 / (1 << 24)

type mat struct {
	rows, cols, ld int
	data           []float32
}

// newMat makes a rows×cols matrix with leading dimension cols+pad, filled with
// values in [-1,1); padding slots hold NaN so that reading them is detected.
func newMat(r *rand.Rand, rows, cols, pad int) mat {
	ld := cols + pad
	if ld == 0 {
		ld = 1
	}
	d := make([]float32, max(0, (rows-1)*ld+cols)+pad)
	for i := range d {
		d[i] = float32(math.NaN())
	}
	for i := 0; i < rows; i++ {
		for j := 0; j < cols; j++ {
			d[i*ld+j] = r.Float32()*2 - 1
		}
	}
	return mat{rows, cols, ld, d}
}

func (x mat) at(i, j int, trans bool) float64 {
	if trans {
		i, j = j, i
	}
	return float64(x.data[i*x.ld+j])
}

type gemmCase struct {
	transA, transB bool
	m, n, k        int
	alpha, beta    float32
	pad            int
}

func (tc gemmCase) String() string {
	return fmt.Sprintf("tA=%v,tB=%v,m=%d,n=%d,k=%d,alpha=%g,beta=%g,pad=%d", tc.transA, tc.transB, tc.m, tc.n, tc.k, tc.alpha, tc.beta, tc.pad)
}

// operands builds op(A), op(B) storage and C for a case.
func (tc gemmCase) operands(r *rand.Rand) (a, b, c mat) {
	if tc.transA {
		a = newMat(r, tc.k, tc.m, tc.pad)
	} else {
		a = newMat(r, tc.m, tc.k, tc.pad)
	}
	if tc.transB {
		b = newMat(r, tc.n, tc.k, tc.pad+1)
	} else {
		b = newMat(r, tc.k, tc.n, tc.pad+1)
	}
	c = newMat(r, tc.m, tc.n, tc.pad+2)
	if tc.beta == 0 {
		// beta == 0 must ignore whatever C holds.
		for i := range c.data {
			c.data[i] = float32(math.NaN())
		}
	}
	return
}

// check compares got against the float64 reference of the case.
func (tc gemmCase) check(t *testing.T, a, b, c0 mat, got []float32) {
	t.Helper()
	bad := 0
	for i := 0; i < tc.m; i++ {
		for j := 0; j < tc.n; j++ {
			var s, sabs float64
			for p := 0; p < tc.k; p++ {
				v := a.at(i, p, tc.transA) * b.at(p, j, tc.transB)
				s += v
				sabs += math.Abs(v)
			}
			want := float64(tc.alpha) * s
			bound := math.Abs(float64(tc.alpha)) * sabs
			if tc.beta != 0 {
				old := float64(c0.data[i*c0.ld+j])
				want += float64(tc.beta) * old
				bound += math.Abs(float64(tc.beta) * old)
			}
			tol := 2*float64(tc.k+2)*unitRoundoff*bound + 1e-30
			g := float64(got[i*c0.ld+j])
			if !(math.Abs(g-want) <= tol) {
				if bad < 5 {
					t.Errorf("%v: C[%d,%d] = %g, want %g (tol %.3g)", tc, i, j, g, want, tol)
				}
				bad++
			}
		}
	}
	// Padding between rows of C must be untouched.
	for i := 0; i+1 < tc.m; i++ {
		for j := tc.n; j < c0.ld; j++ {
			if g, w := got[i*c0.ld+j], c0.data[i*c0.ld+j]; math.Float32bits(g) != math.Float32bits(w) {
				t.Fatalf("%v: padding C[%d,%d] changed to %g", tc, i, j, g)
			}
		}
	}
	if bad > 0 {
		t.Fatalf("%v: %d wrong elements", tc, bad)
	}
}

func (tc gemmCase) run(t *testing.T, r *rand.Rand) {
	t.Helper()
	a, b, c0 := tc.operands(r)
	got := append([]float32(nil), c0.data...)
	Sgemm(tc.transA, tc.transB, tc.m, tc.n, tc.k, tc.alpha, a.data, a.ld, b.data, b.ld, tc.beta, got, c0.ld)
	tc.check(t, a, b, c0, got)
}

// forEachKernel runs f with every kernel this CPU supports forced in turn.
func forEachKernel(t *testing.T, f func(t *testing.T)) {
	for _, k := range kernels {
		t.Run(k.name, func(t *testing.T) {
			restore, ok := setKernel(k.name)
			if !ok {
				t.Fatalf("kernel %s not found", k.name)
			}
			defer restore()
			f(t)
		})
	}
}

var bools = []bool{false, true}

func TestKernelsAvailable(t *testing.T) {
	var names []string
	for _, k := range kernels {
		names = append(names, k.name)
	}
	t.Logf("kernels: %v (default %s)", names, KernelName())
	if kernels[len(kernels)-1] != genericKernel {
		t.Fatal("pure-Go kernel must always be available")
	}
}

// TestSquare: odd square sizes, all transposes, padded leading dimensions,
// beta = 0 over NaN garbage.
func TestSquare(t *testing.T) {
	forEachKernel(t, func(t *testing.T) {
		r := rand.New(rand.NewPCG(1, 2))
		for _, s := range []int{1, 3, 7, 17, 33, 65, 127, 129, 257} {
			for _, ta := range bools {
				for _, tb := range bools {
					gemmCase{ta, tb, s, s, s, 1, 0, 3}.run(t, r)
				}
			}
		}
	})
}

// TestMixed: mixed m,n,k (crossing the kc, mc and nc block edges of every
// kernel), all transposes and all alpha/beta pairs from {0, 1, -0.5, 2}.
func TestMixed(t *testing.T) {
	shapes := [][3]int{
		{1, 257, 3}, {129, 7, 65}, {17, 33, 257}, {65, 127, 1}, {7, 1, 129},
		{300, 50, 170}, {9, 3100, 5}, {33, 100, 600}, {2, 2, 0},
	}
	scalars := []float32{0, 1, -0.5, 2}
	forEachKernel(t, func(t *testing.T) {
		r := rand.New(rand.NewPCG(3, 4))
		for _, s := range shapes {
			for _, ta := range bools {
				for _, tb := range bools {
					for _, al := range scalars {
						for _, be := range scalars {
							gemmCase{ta, tb, s[0], s[1], s[2], al, be, 0}.run(t, r)
							gemmCase{ta, tb, s[0], s[1], s[2], al, be, 5}.run(t, r)
						}
					}
				}
			}
		}
	})
}

// TestThreads: results are right for worker counts that split unevenly.
func TestThreads(t *testing.T) {
	defer SetThreads(0)
	r := rand.New(rand.NewPCG(5, 6))
	for _, th := range []int{1, 2, 3, 7} {
		SetThreads(th)
		if Threads() != th {
			t.Fatalf("Threads() = %d after SetThreads(%d)", Threads(), th)
		}
		for _, s := range [][3]int{{257, 65, 129}, {65, 1000, 70}, {130, 130, 300}} {
			gemmCase{false, false, s[0], s[1], s[2], 1.5, -0.5, 1}.run(t, r)
			gemmCase{true, true, s[0], s[1], s[2], 1, 0, 0}.run(t, r)
		}
	}
}

// TestPacked: SgemmPackedA and SgemmPackedB against the reference, with the
// packed operand reused for two products.
func TestPacked(t *testing.T) {
	forEachKernel(t, func(t *testing.T) {
		r := rand.New(rand.NewPCG(7, 8))
		for _, s := range [][3]int{{1, 1, 1}, {64, 300, 147}, {17, 129, 33}, {130, 40, 400}, {9, 3100, 5}} {
			for _, tr := range bools {
				for _, other := range bools {
					for _, be := range []float32{0, 1, -0.5} {
						tc := gemmCase{tr, other, s[0], s[1], s[2], 2, be, 2}
						a, b, c0 := tc.operands(r)
						pa := PackA(tc.transA, tc.m, tc.k, a.data, a.ld)
						if pa.Rows() != tc.m || pa.Cols() != tc.k {
							t.Fatalf("PackA shape %d×%d", pa.Rows(), pa.Cols())
						}
						for rep := 0; rep < 2; rep++ {
							got := append([]float32(nil), c0.data...)
							SgemmPackedA(tc.n, tc.alpha, pa, tc.transB, b.data, b.ld, tc.beta, got, c0.ld)
							tc.check(t, a, b, c0, got)
						}
						got := append([]float32(nil), c0.data...)
						SgemmPackedASerial(tc.n, tc.alpha, pa, tc.transB, b.data, b.ld, tc.beta, got, c0.ld)
						tc.check(t, a, b, c0, got)
						pb := PackB(tc.transB, tc.k, tc.n, b.data, b.ld)
						if pb.Rows() != tc.k || pb.Cols() != tc.n {
							t.Fatalf("PackB shape %d×%d", pb.Rows(), pb.Cols())
						}
						for rep := 0; rep < 2; rep++ {
							got := append([]float32(nil), c0.data...)
							SgemmPackedB(tc.transA, tc.m, tc.alpha, a.data, a.ld, pb, tc.beta, got, c0.ld)
							tc.check(t, a, b, c0, got)
						}
					}
				}
			}
		}
	})
}

// TestZeroAlpha: alpha = 0 or k = 0 only scales C (and never reads A or B).
func TestZeroAlpha(t *testing.T) {
	c := []float32{1, 2, float32(math.NaN()), 4}
	Sgemm(false, false, 2, 2, 0, 1, nil, 1, nil, 2, 0, c, 2)
	for i, v := range c {
		if v != 0 {
			t.Fatalf("k=0, beta=0: c[%d] = %g", i, v)
		}
	}
	c = []float32{1, 2, 3, 4}
	a := []float32{float32(math.NaN()), 1, 1, 1}
	Sgemm(false, false, 2, 2, 2, 0, a, 2, a, 2, 2, c, 2)
	if c[0] != 2 || c[3] != 8 {
		t.Fatalf("alpha=0: %v", c)
	}
}

func TestPanics(t *testing.T) {
	mustPanic := func(name string, f func()) {
		t.Helper()
		defer func() {
			if recover() == nil {
				t.Errorf("%s: no panic", name)
			}
		}()
		f()
	}
	buf := make([]float32, 16)
	mustPanic("short C", func() { Sgemm(false, false, 4, 4, 4, 1, buf, 4, buf, 4, 0, buf[:15], 4) })
	mustPanic("small lda", func() { Sgemm(false, false, 4, 4, 4, 1, buf, 3, buf, 4, 0, buf, 4) })
	mustPanic("small ldb trans", func() { Sgemm(false, true, 4, 2, 4, 1, buf, 4, buf, 3, 0, buf, 4) })
	mustPanic("negative", func() { Sgemm(false, false, -1, 4, 4, 1, buf, 4, buf, 4, 0, buf, 4) })
}

// TestNoAllocs: the steady state (pooled buffers, persistent workers) does
// not allocate.
func TestNoAllocs(t *testing.T) {
	if raceEnabled {
		t.Skip("the race detector allocates on its own")
	}
	r := rand.New(rand.NewPCG(9, 10))
	tc := gemmCase{false, false, 200, 300, 170, 1, 0, 0}
	a, b, c := tc.operands(r)
	pa := PackA(false, tc.m, tc.k, a.data, a.ld)
	f := func() {
		Sgemm(false, false, tc.m, tc.n, tc.k, 1, a.data, a.ld, b.data, b.ld, 0, c.data, c.ld)
		SgemmPackedA(tc.n, 1, pa, false, b.data, b.ld, 0, c.data, c.ld)
	}
	f()
	if n := testing.AllocsPerRun(20, f); n > 0 {
		t.Fatalf("%.1f allocations per call", n)
	}
}

// TestPackFunc: B produced panel by panel through a PackBFunc (written here
// element by element from the layout PackBFunc documents, not with the
// driver's own packB) gives the float64 reference product, with A packed or not.
func TestPackFunc(t *testing.T) {
	forEachKernel(t, func(t *testing.T) {
		r := rand.New(rand.NewPCG(9, 10))
		for _, s := range [][3]int{{1, 1, 1}, {64, 300, 147}, {17, 129, 33}, {130, 40, 400}, {9, 3100, 5}, {512, 392, 700}} {
			for _, be := range []float32{0, 1} {
				tc := gemmCase{false, false, s[0], s[1], s[2], 1, be, 1}
				a, b, c0 := tc.operands(r)
				var calls atomic.Int64 // the driver calls pack from several workers
				pack := func(nr int, dst []float32, p0, kc, j0, cols int) {
					calls.Add(1)
					for q := 0; q*nr < cols; q++ {
						for p := 0; p < kc; p++ {
							for j := 0; j < nr; j++ {
								v := float32(0)
								if q*nr+j < cols {
									v = float32(b.at(p0+p, j0+q*nr+j, false))
								}
								dst[q*nr*kc+p*nr+j] = v
							}
						}
					}
				}
				got := append([]float32(nil), c0.data...)
				SgemmPackedAFunc(tc.n, tc.alpha, PackA(false, tc.m, tc.k, a.data, a.ld), pack, tc.beta, got, c0.ld)
				tc.check(t, a, b, c0, got)
				got = append([]float32(nil), c0.data...)
				SgemmPackedAFuncSerial(tc.n, tc.alpha, PackA(false, tc.m, tc.k, a.data, a.ld), pack, tc.beta, got, c0.ld)
				tc.check(t, a, b, c0, got)
				got = append([]float32(nil), c0.data...)
				SgemmFunc(false, tc.m, tc.n, tc.k, tc.alpha, a.data, a.ld, pack, tc.beta, got, c0.ld)
				tc.check(t, a, b, c0, got)
				if calls.Load() == 0 {
					t.Fatalf("%v: the pack function was never called", tc)
				}
			}
		}
	})
}

// The streaming variant (fnStream, used for products of at most maxMStream
// rows per worker) differs from the plain micro-kernel only in its
// prefetches: the results must be the same bits.
func TestStreamKernelSameBits(t *testing.T) {
	for _, k := range kernels {
		if k.fnStream == nil {
			continue
		}
		t.Run(k.name, func(t *testing.T) {
			restore, _ := setKernel(k.name)
			defer restore()
			r := rand.New(rand.NewPCG(7, 8))
			for _, s := range [][3]int{{8, 300, 700}, {3, 97, 1000}, {16, 1000, 64}} {
				m, n, kk := s[0], s[1], s[2]
				a, b := randSlice(r, m*kk), randSlice(r, kk*n)
				pb := PackB(false, kk, n, b, n)
				withStream := make([]float32, m*n)
				SgemmPackedB(false, m, 1, a, kk, pb, 0, withStream, n)
				saved := k.fnStream
				k.fnStream = nil
				plain := make([]float32, m*n)
				SgemmPackedB(false, m, 1, a, kk, pb, 0, plain, n)
				k.fnStream = saved
				for i := range plain {
					if math.Float32bits(plain[i]) != math.Float32bits(withStream[i]) {
						t.Fatalf("%v: element %d = %g with the streaming kernel, %g without", s, i, withStream[i], plain[i])
					}
				}
			}
		})
	}
}

// PackB of a large operand is split across workers; the product from it
// must be the same bits as Sgemm's, which packs the same panels per call.
func TestPackBParallelSameBits(t *testing.T) {
	r := rand.New(rand.NewPCG(9, 10))
	const m, k, n = 5, 1100, 1000 // packed size ≥ minPackParallel
	for _, tb := range bools {
		a, b := randSlice(r, m*k), randSlice(r, k*n)
		ldb := n
		if tb {
			ldb = k
		}
		want := make([]float32, m*n)
		Sgemm(false, tb, m, n, k, 1, a, k, b, ldb, 0, want, n)
		pb := PackB(tb, k, n, b, ldb)
		if len(pb.data) < minPackParallel {
			t.Fatalf("packed size %d below the parallel threshold", len(pb.data))
		}
		got := make([]float32, m*n)
		SgemmPackedB(false, m, 1, a, k, pb, 0, got, n)
		for i := range want {
			if math.Float32bits(got[i]) != math.Float32bits(want[i]) {
				t.Fatalf("transB=%v: element %d = %g from the parallel pack, %g from Sgemm", tb, i, got[i], want[i])
			}
		}
	}
}

// SgemmPackedABias is A·op(B) plus a per-row bias, on every kernel (the
// AVX-512 one adds it in registers, the others through C): checked against
// the float64 product with the error bound of the other tests, on shapes
// with edge tiles, on the in-place B path (m ≤ maxMDirect) and the packed
// one, across k slices, and serially and in parallel.
func TestSgemmPackedABias(t *testing.T) {
	forEachKernel(t, func(t *testing.T) {
		r := rand.New(rand.NewPCG(11, 12))
		for _, s := range [][3]int{{8, 48, 16}, {13, 101, 37}, {64, 3136, 96}, {200, 77, 500}, {5, 9, 1000}, {3, 5, 0}} {
			m, n, k := s[0], s[1], s[2]
			for _, tb := range bools {
				a, b, bias := randSlice(r, m*k), randSlice(r, k*n), randSlice(r, m)
				ldb := n
				if tb {
					ldb = k
				}
				pa := PackA(false, m, k, a, max(k, 1))
				if ldb == 0 {
					ldb = 1
				}
				for _, serial := range bools {
					c := randSlice(r, m*n) // garbage the product must overwrite
					if serial {
						SgemmPackedABiasSerial(n, pa, tb, b, ldb, bias, c, n)
					} else {
						SgemmPackedABias(n, pa, tb, b, ldb, bias, c, n)
					}
					for i := 0; i < m; i++ {
						for j := 0; j < n; j++ {
							want, bound := float64(bias[i]), math.Abs(float64(bias[i]))
							for p := 0; p < k; p++ {
								bv := b[p*n+j]
								if tb {
									bv = b[j*k+p]
								}
								want += float64(a[i*k+p]) * float64(bv)
								bound += math.Abs(float64(a[i*k+p]) * float64(bv))
							}
							if g := float64(c[i*n+j]); math.Abs(g-want) > 2*float64(k+2)*unitRoundoff*bound+1e-30 {
								t.Fatalf("%v transB=%v serial=%v: C[%d,%d] = %g, want %g", s, tb, serial, i, j, g, want)
							}
						}
					}
				}
			}
		}
	})
}
