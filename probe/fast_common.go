package probe

import (
	"runtime"
	"sync"
	"sync/atomic"
	"weak"

	"github.com/vitals-health/vitals/gemm"
	"github.com/vitals-health/vitals/internal/pages"
	"github.com/vitals-health/vitals/internal/par"
	"github.com/vitals-health/vitals/tensor"
)

// Shared machinery of the float32 fast paths: the packed-weight cache and a
// deterministic parallel loop.

// isInitializer reports whether input i of the call is one of the running
// plan's initializer tensors (immutable for the plan's lifetime), read
// directly or passed on unchanged (Identity).
func (c *Call) isInitializer(i int) bool {
	if i < 64 && c.constIn&(1<<i) != 0 && i < len(c.In) && c.In[i] != nil {
		return true
	}
	if c.run == nil || c.run.plan == nil || i >= len(c.In) || c.In[i] == nil {
		return false
	}
	return c.run.plan.consts[c.In[i]]
}

// packKey identifies one packing of one weight tensor: the tensor (held
// weakly, so the cache never keeps a model alive) and how it was packed.
type packKey struct {
	t     weak.Pointer[tensor.Tensor]
	kind  uint8 // 'A' conv weights per group, 'b' the same with the bias as an extra column, 'B' right operand of a product
	trans bool
	group int
	aux   weak.Pointer[tensor.Tensor] // the bias of kind 'b'
}

// packCache maps packKey → []*gemm.PackedA or *gemm.PackedB. An entry is
// dropped when its tensor is garbage collected.
var packCache sync.Map

// PackCacheLimit bounds the bytes of packed weight copies kept between
// calls (default 256 MiB), so that a large model's memory stays near its
// weights: weights beyond it are not packed ahead; their products go through
// gemm.Sgemm, which packs small blocks as it goes.
var PackCacheLimit int64 = 256 << 20

var packCacheBytes atomic.Int64

// packRoom reports whether t's packed copy is cached or still fits the limit.
func packRoom(t *tensor.Tensor) bool {
	return packCacheBytes.Load()+int64(t.Size())*4 <= PackCacheLimit || packCached(t)
}

func packCached(t *tensor.Tensor) bool {
	found := false
	packCache.Range(func(k, _ any) bool {
		if k.(packKey).t.Value() == t {
			found = true
			return false
		}
		return true
	})
	return found
}

func cachedPack[V any](t, aux *tensor.Tensor, kind uint8, trans bool, group int, build func() V) V {
	key := packKey{t: weak.Make(t), kind: kind, trans: trans, group: group}
	if aux != nil {
		key.aux = weak.Make(aux)
	}
	if v, ok := packCache.Load(key); ok {
		return v.(V)
	}
	v := build()
	size := int64(t.Size()) * 4
	if _, loaded := packCache.LoadOrStore(key, v); !loaded {
		packCacheBytes.Add(size)
		runtime.AddCleanup(t, func(k packKey) {
			packCache.Delete(k)
			packCacheBytes.Add(-size)
		}, key)
	}
	return v
}

// packedConvWeights packs W ([M][Cg·K], group-major) once per group.
func packedConvWeights(w *tensor.Tensor, wd []float32, group, mg, kg int) []*gemm.PackedA {
	return cachedPack(w, nil, 'A', false, group, func() []*gemm.PackedA {
		ps := make([]*gemm.PackedA, group)
		for g := range ps {
			ps[g] = gemm.PackA(false, mg, kg, wd[g*mg*kg:(g+1)*mg*kg], max(kg, 1))
		}
		return ps
	})
}

// packedConvWeightsBias packs [W_g | b_g] (Mg×(kg+1)) once per group: the
// product with an im2col matrix whose last row is all ones adds the bias
// (see im2colPanels.ones), so Y is written once and never read back.
func packedConvWeightsBias(w, b *tensor.Tensor, wd, bd []float32, group, mg, kg int) []*gemm.PackedA {
	return cachedPack(w, b, 'b', false, group, func() []*gemm.PackedA {
		ps := make([]*gemm.PackedA, group)
		buf := getF32(mg * (kg + 1)) // scratch reused across layers: no fresh pages per layer
		defer putF32(buf)
		aug := *buf
		for g := range ps {
			for m := 0; m < mg; m++ {
				copy(aug[m*(kg+1):m*(kg+1)+kg], wd[(g*mg+m)*kg:(g*mg+m+1)*kg])
				aug[m*(kg+1)+kg] = bd[g*mg+m]
			}
			ps[g] = gemm.PackA(false, mg, kg+1, aug, kg+1)
		}
		return ps
	})
}

// packedRight packs op(B) (k×n) once.
func packedRight(b *tensor.Tensor, bd []float32, trans bool, k, n, ldb int) *gemm.PackedB {
	return cachedPack(b, nil, 'B', trans, 0, func() *gemm.PackedB {
		return gemm.PackB(trans, k, n, bd, ldb)
	})
}

// parFor splits [0, n) into at most GOMAXPROCS contiguous chunks of at least
// minChunk items and runs f on each; chunk boundaries depend only on n,
// minChunk and GOMAXPROCS, and f must write disjoint outputs, so results do
// not depend on scheduling.
func parFor(n, minChunk int, f func(lo, hi int)) {
	workers := min(runtime.GOMAXPROCS(0), n/max(minChunk, 1))
	if workers <= 1 {
		if n > 0 {
			f(0, n)
		}
		return
	}
	step := (n + workers - 1) / workers
	parts := (n + step - 1) / step
	par.Do(parts, func(i int) { f(i*step, min((i+1)*step, n)) })
}

// scratch keeps float32 scratch buffers (padded images, im2col columns,
// the C of shared products, packing temporaries) from call to call, up to
// scratchLimit bytes. Not a sync.Pool: that hands its contents to the
// garbage collector at every cycle, and fresh memory costs a page fault per
// 4 KiB, which on a virtual machine added tens of thousands of faults over
// a long sample. A buffer comes back with whatever it held.
var scratch struct {
	mu    sync.Mutex
	free  []*[]float32
	bytes int64
}

// scratchLimit bounds the bytes of idle scratch buffers kept.
const scratchLimit = 256 << 20

// getF32 returns a buffer of n elements (contents undefined), the smallest
// kept one that is large enough, else a new one.
func getF32(n int) *[]float32 {
	scratch.mu.Lock()
	best := -1
	for i, p := range scratch.free {
		if cap(*p) >= n && (best < 0 || cap(*p) < cap(*scratch.free[best])) {
			best = i
		}
	}
	if best >= 0 {
		p := scratch.free[best]
		scratch.free = append(scratch.free[:best], scratch.free[best+1:]...)
		scratch.bytes -= int64(4 * cap(*p))
		scratch.mu.Unlock()
		*p = (*p)[:n]
		return p
	}
	scratch.mu.Unlock()
	s := pages.Float32s(n)
	return &s
}

// putF32 keeps a buffer for later getF32 calls, dropping the oldest kept
// ones when the limit would be passed.
func putF32(p *[]float32) {
	size := int64(4 * cap(*p))
	if size > scratchLimit {
		return
	}
	scratch.mu.Lock()
	defer scratch.mu.Unlock()
	for scratch.bytes+size > scratchLimit && len(scratch.free) > 0 {
		scratch.bytes -= int64(4 * cap(*scratch.free[0]))
		scratch.free = scratch.free[1:]
	}
	scratch.free = append(scratch.free, p)
	scratch.bytes += size
}
