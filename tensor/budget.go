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
// allocation whose size comes from a file is checked against a byte budget
// before it is made: the Arena of the run (each check owns one) or, for code
// outside a run, the process default set by SetMemoryBudget:
//
//   - the loader checks each tensor's declared size (and the running sum of all
//     initializers) and each external-data tensor before reading it;
//   - the CLI checks batch × per-sample size of every input before the run;
//   - at run time Arena.New and Arena.MakeSlice, through which kernels allocate, panic with
//     a *BudgetError instead of allocating (as does probe's makeChecked, for
//     kernels that size their own buffers: MatMul, Range, Einsum,
//     ConvTranspose); probe's Plan.call converts that panic into an error
//     naming the node, and the run loop also checks the size of every output
//     a kernel returns, which catches any other kernel that allocates with
//     make directly (after the fact, but before the run goes on).
//
// The budget is per tensor at run time (live activations of one batch are not
// summed) and cumulative for the model's initializers. Zero means no budget.
//
// budget is the process default, used where no Arena is given.
var budget atomic.Int64

// SetMemoryBudget sets the process default byte budget (0: unlimited) and
// returns the previous one. A run with its own Arena is not affected.
func SetMemoryBudget(bytes int64) int64 {
	if bytes < 0 {
		bytes = 0
	}
	return budget.Swap(bytes)
}

// MemoryBudget returns the process default byte budget (0: unlimited).
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
	return (*Arena)(nil).CheckBytes(bytes, what)
}

// CheckShape checks a shape's element count (NumElements) and its storage
// against the process default budget, before anything is allocated.
func CheckShape(dt DType, shape []int) (int, error) { return (*Arena)(nil).CheckShape(dt, shape) }

// Alloc is New with errors instead of panics: a bad shape or one over the
// process default budget is refused before allocation.
func Alloc(dt DType, shape []int) (*Tensor, error) { return (*Arena)(nil).Alloc(dt, shape) }

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
