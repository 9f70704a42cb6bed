package tensor

import (
	"sync"
	"unsafe"

	"github.com/vitals-health/vitals/internal/pages"
)

// Pool recycles large float32 buffers from one batch to the next, so a long
// run does not page in fresh memory for every activation (on a large CNN the
// kernel's page faults cost about as much as an elementwise layer).
//
// Protocol: an Arena with Pool p makes its MakeSlice draw float32 buffers of at least
// poolMin elements from p (zeroed) and record every such buffer it hands
// out. During a batch, Put(t) returns the buffer of a value that is dead
// and shares storage with no live value, for the rest of the batch. After
// a batch, when nothing reads the batch's released values any more,
// Recycle(released, keep) returns to the pool those released buffers that
// p itself handed out in this batch and that overlap no kept buffer (graph
// outputs, inputs), and forgets the rest.
type Pool struct {
	mu     sync.Mutex
	free   map[int][][]float32
	bytes  int64
	limit  int64
	issued map[*float32]int // buffers handed out since the last Recycle
}

// poolMin is the smallest buffer (elements) worth pooling.
const poolMin = 4096

// NewPool returns a pool keeping at most limit bytes of free buffers.
func NewPool(limit int64) *Pool {
	return &Pool{free: map[int][][]float32{}, limit: limit, issued: map[*float32]int{}}
}

// get hands out a buffer of n elements, zeroed unless uninit (then a
// recycled buffer keeps its old contents: only for callers that overwrite
// every element before anything reads it).
func (p *Pool) get(n int, uninit bool) []float32 {
	p.mu.Lock()
	var b []float32
	if l := p.free[n]; len(l) > 0 {
		b = l[len(l)-1]
		p.free[n] = l[:len(l)-1]
		p.bytes -= int64(4 * n)
	}
	p.mu.Unlock()
	if b == nil {
		b = pages.Float32s(n)
	} else if !uninit {
		clear(b)
	}
	p.mu.Lock()
	p.issued[&b[0]] = n
	p.mu.Unlock()
	return b
}

type span struct{ lo, hi uintptr }

func spanOf(t *Tensor) (span, bool) {
	d, ok := t.Data.([]float32)
	if !ok || len(d) == 0 {
		return span{}, false
	}
	lo := uintptr(unsafe.Pointer(&d[0]))
	return span{lo, lo + uintptr(4*len(d))}, true
}

// overlaps reports whether two address ranges share a byte.
func (a span) overlaps(b span) bool { return a.lo < b.hi && b.lo < a.hi }

// Overlap reports whether two float32 tensors share storage.
func Overlap(a, b *Tensor) bool {
	x, okA := spanOf(a)
	y, okB := spanOf(b)
	return okA && okB && x.overlaps(y)
}

// Recycle takes back the released tensors' buffers that are safe to reuse
// (see Pool); keep lists tensors still alive (graph outputs, inputs).
func (p *Pool) Recycle(released, keep []*Tensor) {
	var kept []span
	for _, t := range keep {
		if s, ok := spanOf(t); ok {
			kept = append(kept, s)
		}
	}
	type cand struct {
		s span
		b []float32
	}
	var cands []cand
	seen := map[uintptr]int{}
	for _, t := range released {
		s, ok := spanOf(t)
		if !ok {
			continue
		}
		d := t.Data.([]float32)
		if n, issued := p.issuedLen(&d[0]); !issued || n != len(d) {
			continue
		}
		if i, dup := seen[s.lo]; dup {
			if cands[i].s != s {
				cands[i].b = nil // two views of different extent: skip both
			}
			continue
		}
		seen[s.lo] = len(cands)
		cands = append(cands, cand{s, d})
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	for i, c := range cands {
		if c.b == nil {
			continue
		}
		ok := true
		for _, k := range kept {
			if c.s.overlaps(k) {
				ok = false
				break
			}
		}
		for j, o := range cands {
			if ok && j != i && o.s != c.s && c.s.overlaps(o.s) {
				ok = false
			}
		}
		if ok && p.bytes+int64(4*len(c.b)) <= p.limit {
			p.free[len(c.b)] = append(p.free[len(c.b)], c.b)
			p.bytes += int64(4 * len(c.b))
		}
	}
	clear(p.issued)
}

// Put takes back at once the buffer of t, a tensor the caller knows to be
// dead and shared by no live tensor, when the pool handed out that whole
// buffer since the last Recycle (otherwise it does nothing), so that a later
// allocation of the same batch can reuse it. A buffer put back is forgotten
// as issued: a Recycle that still lists t passes it over.
func (p *Pool) Put(t *Tensor) {
	d, ok := t.Data.([]float32)
	if !ok || len(d) == 0 {
		return
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	if n, issued := p.issued[&d[0]]; !issued || n != len(d) {
		return
	}
	delete(p.issued, &d[0])
	if p.bytes+int64(4*len(d)) <= p.limit {
		p.free[len(d)] = append(p.free[len(d)], d[:len(d):len(d)])
		p.bytes += int64(4 * len(d))
	}
}

func (p *Pool) issuedLen(ptr *float32) (int, bool) {
	p.mu.Lock()
	defer p.mu.Unlock()
	n, ok := p.issued[ptr]
	return n, ok
}
