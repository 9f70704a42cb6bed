package pages

import (
	"testing"
	"unsafe"
)

// Populating maps pages without touching their contents, and Float32s is a
// zeroed slice of the length asked for.
func TestPopulateKeepsContents(t *testing.T) {
	s := make([]float32, 1<<20)
	for i := range s {
		s[i] = float32(i)
	}
	Populate(unsafe.Pointer(&s[3]), uintptr(len(s)-3)*4)
	for i, v := range s {
		if v != float32(i) {
			t.Fatalf("s[%d] = %v after Populate, want %d", i, v, i)
		}
	}
	f := Float32s(300000)
	if len(f) != 300000 {
		t.Fatalf("len %d", len(f))
	}
	for i, v := range f {
		if v != 0 {
			t.Fatalf("Float32s()[%d] = %v, want 0", i, v)
		}
	}
	if len(Float32s(0)) != 0 {
		t.Fatal("Float32s(0) not empty")
	}
}
