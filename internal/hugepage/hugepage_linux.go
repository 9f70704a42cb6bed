// Package hugepage asks the kernel for transparent huge pages under large,
// fresh buffers.
package hugepage

import (
	"syscall"
	"unsafe"
)

// minBytes is the buffer size (bytes) from which Advise asks for
// transparent huge pages.
const minBytes = 2 << 20

// Advise asks the kernel to back the 2 MiB-aligned interior of a fresh,
// large buffer with transparent huge pages (where the system allows them
// on request, as Debian's default "madvise" setting does), so that first
// touching it takes one page fault per 2 MiB instead of one per 4 KiB. On a
// virtual machine a page fault costs microseconds, and a batch's
// activations run to hundreds of MiB. Purely advisory: errors are ignored.
func Advise(b []float32) {
	if 4*len(b) < minBytes {
		return
	}
	const huge = 2 << 20
	base := unsafe.Pointer(&b[0])
	lo := uintptr(base)
	hi := lo + uintptr(4*len(b))
	first := (lo + huge - 1) &^ (huge - 1)
	last := hi &^ (huge - 1)
	if last <= first {
		return
	}
	mem := unsafe.Slice((*byte)(unsafe.Add(base, first-lo)), last-first)
	_ = syscall.Madvise(mem, 14) // MADV_HUGEPAGE
}
