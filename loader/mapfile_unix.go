//go:build linux || darwin || freebsd

package loader

import (
	"fmt"
	"os"
	"runtime/debug"
	"sync"
	"syscall"
	"unsafe"

	"golang.org/x/sys/unix"
)

// withFileBytes calls use with the bytes of the file at path, mapped
// read-only from the page cache instead of copied into fresh memory (a
// model file is read once, by the decoder, which copies what it keeps).
// A file that shrinks while mapped makes reading past its new end fault;
// that fault becomes an error naming the file, not a crash. Files that
// cannot be mapped (empty, special) are read the ordinary way.
func withFileBytes(path string, use func([]byte) error) (err error) {
	f, err := os.Open(path)
	if err != nil {
		return err
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return err
	}
	size := fi.Size()
	if !fi.Mode().IsRegular() || size <= 0 || int64(int(size)) != size {
		b, err := os.ReadFile(path)
		if err != nil {
			return err
		}
		return use(b)
	}
	b, err := syscall.Mmap(int(f.Fd()), 0, int(size), syscall.PROT_READ, syscall.MAP_PRIVATE)
	if err != nil {
		b, err := os.ReadFile(path)
		if err != nil {
			return err
		}
		return use(b)
	}
	defer syscall.Munmap(b)
	mapped.add(b)
	defer mapped.remove(b)
	old := debug.SetPanicOnFault(true)
	defer debug.SetPanicOnFault(old)
	defer func() {
		if r := recover(); r != nil {
			if _, ok := r.(interface{ Addr() uintptr }); !ok {
				panic(r)
			}
			err = fmt.Errorf("the file changed while it was read (%v)", r)
		}
	}()
	return use(b)
}

// mapped lists the file mappings withFileBytes has open, so that readers of
// their bytes can give pages back once they have copied them (releaseRead).
var mapped mappings

type mappings struct {
	mu   sync.Mutex
	list [][2]uintptr // [start, end) of each open mapping
}

func (ms *mappings) add(b []byte) {
	ms.mu.Lock()
	defer ms.mu.Unlock()
	p := uintptr(unsafe.Pointer(unsafe.SliceData(b)))
	ms.list = append(ms.list, [2]uintptr{p, p + uintptr(len(b))})
}

func (ms *mappings) remove(b []byte) {
	ms.mu.Lock()
	defer ms.mu.Unlock()
	p := uintptr(unsafe.Pointer(unsafe.SliceData(b)))
	for i, r := range ms.list {
		if r[0] == p {
			ms.list = append(ms.list[:i], ms.list[i+1:]...)
			return
		}
	}
}

// releaseRead tells the kernel that the whole pages of p, if p lies in a
// mapping withFileBytes has open, will not be read again: they leave the
// process's resident memory (they stay in the page cache, and a later read
// faults them back in with the file's bytes, the mapping being private and
// never written). Weights copied out of a mapped model file are then not
// resident twice while the rest of the file is copied: loading a model whose
// weights are W bytes peaks near W instead of 2W. Bytes of any other origin
// are left alone.
func releaseRead(p []byte) {
	if len(p) == 0 {
		return
	}
	lo := uintptr(unsafe.Pointer(unsafe.SliceData(p)))
	hi := lo + uintptr(len(p))
	mapped.mu.Lock()
	inside := false
	for _, r := range mapped.list {
		if lo >= r[0] && hi <= r[1] {
			inside = true
			break
		}
	}
	mapped.mu.Unlock()
	if !inside {
		return
	}
	page := uintptr(os.Getpagesize())
	a, z := (lo+page-1)&^(page-1), hi&^(page-1)
	if a >= z {
		return
	}
	// advice only: a failure leaves the pages resident, nothing else
	_ = unix.Madvise(p[a-lo:z-lo], unix.MADV_DONTNEED)
}
