package pages

import (
	"syscall"
	"testing"
	"unsafe"
)

// The cost this package removes: writing fresh anonymous memory one page
// fault per 4 KiB page, against mapping it first in one madvise call. The
// figures in the package doc come from this benchmark.
func BenchmarkFreshMemory(b *testing.B) {
	const size = 64 << 20
	for _, populateFirst := range []bool{false, true} {
		name := "fault-per-page"
		if populateFirst {
			name = "populated"
		}
		b.Run(name, func(b *testing.B) {
			b.SetBytes(size)
			for i := 0; i < b.N; i++ {
				m, err := syscall.Mmap(-1, 0, size, syscall.PROT_READ|syscall.PROT_WRITE, syscall.MAP_PRIVATE|syscall.MAP_ANON)
				if err != nil {
					b.Fatal(err)
				}
				if populateFirst {
					Populate(unsafe.Pointer(&m[0]), size)
				}
				for p := 0; p < size; p += 4096 {
					m[p] = 1
				}
				syscall.Munmap(m)
			}
		})
	}
}
