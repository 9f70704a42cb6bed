package tensor

// Deferred holds dead tensors until a reader that takes its work from a
// queue in order has finished the items queued before each died (their
// storage may still be read until then), and then hands them to Put.
// Positions are counts of items queued: Add(t, queued) with the count at
// t's death, PassOn(done) with the count the reader has finished. Not safe
// for concurrent use.
type Deferred struct {
	Put   func(*Tensor)
	pend  []*Tensor
	marks []int64
}

// Add holds t until the reader has finished the first queued items.
func (d *Deferred) Add(t *Tensor, queued int64) {
	d.pend, d.marks = append(d.pend, t), append(d.marks, queued)
}

// PassOn hands to Put, in order, the tensors whose mark is at most done.
func (d *Deferred) PassOn(done int64) {
	i := 0
	for ; i < len(d.pend) && d.marks[i] <= done; i++ {
		d.Put(d.pend[i])
		d.pend[i] = nil
	}
	d.pend = d.pend[:copy(d.pend, d.pend[i:])]
	d.marks = d.marks[:copy(d.marks, d.marks[i:])]
}
