//go:build linux || darwin || freebsd

package loader

import (
	"fmt"
	"os"
	"runtime/debug"
	"syscall"
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
