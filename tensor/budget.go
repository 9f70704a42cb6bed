package tensor

import (
	"fmt"
	"sync/atomic"
)

// The memory budget.
//
// vitals runs untrusted models: a shape read from a file, or computed by a
// kernel from values in the file (ConstantOfShape, Expand, Tile, Range, a
// broadcast of two large axes), can ask for more memory than the machine has,
// and the Go runtime does not recover from running out of memory. So every
// allocation whose size comes from a file is checked against one
// process-wide byte budget before it is made:
//
//   - the loader checks each tensor's declared size (and the running sum of all
//     initializers) and each external-data tensor before reading it;
//   - the CLI checks batch × per-sample size of every input before the run;
//   - at run time New and MakeSlice, through which kernels allocate, panic with
//     a *BudgetError instead of allocating (as does probe's makeChecked, for
//     kernels that size their own buffers: MatMul, Range, Einsum,
//     ConvTranspose); probe's Plan.call converts that panic into an error
//     naming the node, and the run loop also checks the size of every output
//     a kernel returns, which catches any other kernel that allocates with
//     make directly (after the fact, but before the run goes on).
//
// The budget is per tensor at run time (live activations of one batch are not
// summed) and cumulative for the model's initializers. Zero means no budget.
var budget atomic.Int64

// SetMemoryBudget sets the byte budget (0: unlimited) and returns the previous one.
func SetMemoryBudget(bytes int64) int64 {
	if bytes < 0 {
		bytes = 0
	}
	return budget.Swap(bytes)
}

// MemoryBudget returns the byte budget (0: unlimited).
func MemoryBudget() int64 { return budget.Load() }

// BudgetError reports an allocation over the memory budget.
type BudgetError struct {
	What   string // what would be allocated, e.g. `tensor float32[1000 1000 1000]`
	Bytes  int64  // bytes it needs
	Budget int64  // the budget in force
}

func (e *BudgetError) Error() string {
	return fmt.Sprintf("%s needs %s, over the memory budget of %s (--max-memory)", e.What, FormatBytes(e.Bytes), FormatBytes(e.Budget))
}

// Bytes is the storage n elements of dt take (saturating at MaxInt64).
func Bytes(dt DType, n int) int64 {
	sz := int64(dt.Size())
	if sz == 0 {
		sz = 1
	}
	if n > 0 && int64(n) > (1<<63-1)/sz {
		return 1<<63 - 1
	}
	return int64(n) * sz
}

// CheckBytes returns a *BudgetError when bytes exceed the budget; what
// describes the allocation and is only called then, so that the check costs
// nothing on the allocation path.
func CheckBytes(bytes int64, what func() string) error {
	if b := budget.Load(); b > 0 && bytes > b {
		return &BudgetError{What: what(), Bytes: bytes, Budget: b}
	}
	return nil
}

// CheckShape checks a shape's element count (NumElements) and its storage
// against the budget, before anything is allocated.
func CheckShape(dt DType, shape []int) (int, error) {
	n, err := NumElements(shape)
	if err != nil {
		return 0, err
	}
	if err := CheckBytes(Bytes(dt, n), func() string { return fmt.Sprintf("tensor %v%v", dt, shape) }); err != nil {
		return 0, err
	}
	return n, nil
}

// Alloc is New with errors instead of panics: a bad shape or one over the
// memory budget is refused before allocation.
func Alloc(dt DType, shape []int) (*Tensor, error) {
	n, err := CheckShape(dt, shape)
	if err != nil {
		return nil, err
	}
	if dt.Size() == 0 {
		return nil, fmt.Errorf("tensor: no storage for %v", dt)
	}
	return &Tensor{DType: dt, Shape: append([]int{}, shape...), Data: MakeSlice(dt, n)}, nil
}

// FormatBytes renders a byte count with a binary unit, e.g. "1.5 GiB".
func FormatBytes(b int64) string {
	const unit = 1024
	if b < unit {
		return fmt.Sprintf("%d bytes", b)
	}
	units := []string{"KiB", "MiB", "GiB", "TiB", "PiB", "EiB"}
	v, i := float64(b)/unit, 0
	for v >= unit && i < len(units)-1 {
		v /= unit
		i++
	}
	return fmt.Sprintf("%.1f %s (%d bytes)", v, units[i], b)
}
