package pages

import (
	"syscall"
	"testing"
	"unsafe"
)

// The cost this package removes: writing fresh anonymous memory one page
// fault per 4 KiB page, against mapping it first with Populate. The figures
// in the package doc come from this benchmark.
func BenchmarkFreshMemory(b *testing.B) {
	const size, huge = 64 << 20, 2 << 20
	for _, v := range []struct {
		name string
		prep func(p unsafe.Pointer)
	}{
		{"fault-per-page", func(unsafe.Pointer) {}},
		{"Populate", func(p unsafe.Pointer) { Populate(p, size) }},
	} {
		b.Run(v.name, func(b *testing.B) {
			b.SetBytes(size)
			for i := 0; i < b.N; i++ {
				m, err := syscall.Mmap(-1, 0, size+huge, syscall.PROT_READ|syscall.PROT_WRITE, syscall.MAP_PRIVATE|syscall.MAP_ANON)
				if err != nil {
					b.Fatal(err)
				}
				base := uintptr(unsafe.Pointer(&m[0]))
				off := int((huge - base%huge) % huge) // 2 MiB aligned, as a large heap buffer mostly is
				v.prep(unsafe.Pointer(&m[off]))
				for p := off; p < off+size; p += 4096 {
					m[p] = 1
				}
				syscall.Munmap(m)
			}
		})
	}
}
