package tensor

import "testing"

// Recycle takes back only buffers the pool handed out in this batch and that
// no kept tensor (graph output, input) overlaps; a reused buffer comes back zeroed.
func TestPoolRecycleRules(t *testing.T) {
	p := NewPool(1 << 30)
	ar := &Arena{Pool: p}
	const n = poolMin
	a := ar.New(Float32, []int{n})     // released, safe → recycled
	b := ar.New(Float32, []int{n})     // released but also a graph output → kept
	c := ar.New(Float32, []int{2 * n}) // released with a half-size view of itself → skipped
	view := &Tensor{DType: Float32, Shape: []int{n}, Data: c.F32()[:n]}
	foreign := From(make([]float32, n), n) // not from the pool (e.g. an initializer) → never recycled
	a.F32()[7] = 42
	p.Recycle([]*Tensor{a, b, c, foreign}, []*Tensor{b, view})
	if got := len(p.free[n]); got != 1 {
		t.Fatalf("%d buffers of %d recycled, want 1 (only a)", got, n)
	}
	if len(p.free[2*n]) != 0 {
		t.Fatal("a buffer with a live view into it was recycled")
	}
	d := ar.New(Float32, []int{n})
	if &d.F32()[0] != &a.F32()[0] {
		t.Fatal("the recycled buffer was not reused")
	}
	if d.F32()[7] != 0 {
		t.Fatal("a reused buffer must come back zeroed")
	}
	// the next batch forgets what the previous one handed out
	p.Recycle([]*Tensor{b}, nil)
	if len(p.free[n]) != 0 {
		t.Fatal("a buffer issued in an earlier batch was recycled")
	}
}

// NewUninit draws from the pool like New but skips the clearing: a recycled
// buffer keeps its old values; without a pool or below poolMin it is zeroed.
func TestPoolNewUninit(t *testing.T) {
	small := NewUninit(Float32, []int{8})
	if len(small.F32()) != 8 || small.F32()[3] != 0 {
		t.Fatal("an unpooled NewUninit must be a zeroed slice of the shape's size")
	}
	p := NewPool(1 << 30)
	ar := &Arena{Pool: p}
	const n = poolMin
	a := ar.New(Float32, []int{n})
	a.F32()[7] = 42
	p.Recycle([]*Tensor{a}, nil)
	b := ar.NewUninit(Float32, []int{n})
	if &b.F32()[0] != &a.F32()[0] {
		t.Fatal("the recycled buffer was not reused")
	}
	if b.F32()[7] != 42 {
		t.Fatal("NewUninit cleared a recycled buffer")
	}
	if got := ar.NewUninit(Int64, []int{n}); got.I64()[7] != 0 || len(got.I64()) != n {
		t.Fatal("a non-float32 NewUninit must come zeroed")
	}
	b.F32()[7] = 5
	p.Recycle([]*Tensor{b}, nil)
	if c := ar.New(Float32, []int{n}); c.F32()[7] != 0 {
		t.Fatal("New after NewUninit must still clear")
	}
}

// Put hands a whole buffer the pool issued back for the rest of the batch,
// once: a view, a foreign buffer and a buffer put back already are passed
// over.
func TestPoolPut(t *testing.T) {
	p := NewPool(1 << 30)
	ar := &Arena{Pool: p}
	const n = poolMin
	a := ar.New(Float32, []int{2 * n})
	p.Put(&Tensor{DType: Float32, Shape: []int{n}, Data: a.F32()[:n]}) // a view: not the whole buffer
	p.Put(From(make([]float32, 2*n), 2*n))                             // not from the pool
	if len(p.free[2*n]) != 0 || len(p.free[n]) != 0 {
		t.Fatal("a view or a foreign buffer was taken back")
	}
	a.F32()[5] = 3
	p.Put(a)
	p.Put(a) // twice: once only
	if got := len(p.free[2*n]); got != 1 {
		t.Fatalf("%d buffers taken back, want 1", got)
	}
	b := ar.New(Float32, []int{2 * n}) // the same batch reuses it, zeroed
	if &b.F32()[0] != &a.F32()[0] || b.F32()[5] != 0 {
		t.Fatal("the buffer put back was not reused zeroed")
	}
}

// Deferred hands a tensor on only once the reader has finished the items
// queued before it died, in order, each once.
func TestDeferred(t *testing.T) {
	var got []*Tensor
	d := Deferred{Put: func(x *Tensor) { got = append(got, x) }}
	a, b, c := From([]float32{1}, 1), From([]float32{2}, 1), From([]float32{3}, 1)
	d.Add(a, 0) // nothing queued before it
	d.Add(b, 2)
	d.Add(c, 3)
	d.PassOn(1)
	if len(got) != 1 || got[0] != a {
		t.Fatalf("after 1 done: %v, want a alone", got)
	}
	d.PassOn(2)
	d.PassOn(2)
	if len(got) != 2 || got[1] != b {
		t.Fatalf("after 2 done: %d handed, want a then b", len(got))
	}
	d.PassOn(5)
	if len(got) != 3 || got[2] != c {
		t.Fatalf("after 5 done: %d handed, want all three", len(got))
	}
}

// Two arenas keep their own pools and budgets: a buffer one run recycles is
// never handed out by the other, and a budget set on one run leaves the
// other (and the process default) alone.
func TestArenasApart(t *testing.T) {
	a := &Arena{Pool: NewPool(1 << 30)}
	b := &Arena{Pool: NewPool(1 << 30), Budget: 1 << 20}
	const n = poolMin
	x := a.New(Float32, []int{n})
	a.Pool.Recycle([]*Tensor{x}, nil)
	y := b.New(Float32, []int{n})
	if &y.F32()[0] == &x.F32()[0] {
		t.Fatal("arena b handed out a buffer arena a recycled")
	}
	if z := a.New(Float32, []int{n}); &z.F32()[0] != &x.F32()[0] {
		t.Fatal("arena a did not reuse its own recycled buffer")
	}
	if _, err := b.Alloc(Float32, []int{1 << 20}); err == nil {
		t.Fatal("arena b's 1 MiB budget let a 4 MiB tensor through")
	}
	if _, err := a.Alloc(Float32, []int{1 << 20}); err != nil {
		t.Fatalf("arena a has no budget, got %v", err)
	}
	if MemoryBudget() == 1<<20 {
		t.Fatal("an arena's budget leaked into the process default")
	}
}
