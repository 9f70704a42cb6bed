// Package pages makes large buffers whose memory pages are mapped in one
// system call instead of one page fault per 4 KiB page on first write.
//
// On the virtual machines this was measured on, a page fault costs about
// 13 µs: writing 64 MiB of fresh memory page by page took 229 ms, and
// populating it first with madvise(MADV_POPULATE_WRITE), then writing it,
// 128 ms (go test -bench . ./internal/pages; the first write to a populated
// page still costs something there). A check's first batch writes every
// node output into fresh memory (416 MiB for a MobileNetV2-shaped model at
// batch 8), so this is a measurable share of a run. Transparent huge pages
// (MADV_HUGEPAGE) made whole runs slower, not faster, and are not used.
package pages

import "unsafe"

// minPopulate is the buffer size in bytes below which populating is not
// worth a system call (16 pages).
const minPopulate = 64 << 10

// Float32s returns make([]float32, n) with its pages mapped (see package doc).
func Float32s(n int) []float32 {
	s := make([]float32, n)
	if n > 0 {
		Populate(unsafe.Pointer(&s[0]), uintptr(n)*4)
	}
	return s
}

// Populate maps the whole pages inside [p, p+size) for writing, when size
// is at least minPopulate and the system can; the memory's contents are
// unchanged. Failure (an old kernel, another system) is not an error: the
// pages are then mapped on first touch as usual.
func Populate(p unsafe.Pointer, size uintptr) {
	if size < minPopulate {
		return
	}
	const page = 4096
	lo := (uintptr(p) + page - 1) &^ (page - 1)
	hi := (uintptr(p) + size) &^ (page - 1)
	if hi > lo {
		populate(lo, hi-lo)
	}
}
