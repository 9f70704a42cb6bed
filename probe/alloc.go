package probe

import (
	"fmt"
	"unsafe"

	"github.com/vitals-health/vitals/tensor"
)

// makeChecked is make([]T, n) for kernels that size a buffer themselves
// (not through tensor.New): over the memory budget it panics with a
// *tensor.BudgetError before allocating (the budget of the run's arena), which Plan.call reports as an error
// naming the node. Without it a size computed from a hostile file (Range's
// limit, a MatMul of two long axes) would reach the Go runtime, which does not
// recover from running out of memory.
func makeChecked[T any](ar *tensor.Arena, n int) []T {
	var zero T
	size := int64(unsafe.Sizeof(zero))
	bytes := int64(1<<63 - 1)
	if n >= 0 && (size == 0 || int64(n) <= bytes/size) {
		bytes = int64(n) * size
	}
	if err := ar.CheckBytes(bytes, func() string { return fmt.Sprintf("a buffer of %d %T values", n, zero) }); err != nil {
		panic(err)
	}
	return make([]T, n)
}
