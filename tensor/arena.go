package tensor

import "fmt"

// Arena is the memory of one run: the byte budget every tensor it allocates
// is held to, and the Pool (may be nil) its large float32 buffers are drawn
// from and recycled into. Each run owns its arena, so two runs in one
// process keep their own budgets and never hand each other's buffers out.
//
// A nil *Arena is the process default: the budget of SetMemoryBudget and no
// pool. Code that runs outside a check (loading a model in a test, a kernel
// called directly) uses it through the package-level New, MakeSlice,
// CheckBytes and CheckShape.
type Arena struct {
	// Budget is the byte limit of any one tensor (0: none); see budget.go.
	Budget int64
	// Pool, when not nil, recycles float32 buffers of at least poolMin
	// elements from batch to batch (see Pool).
	Pool *Pool
}

// Limit is the arena's byte budget (0: none).
func (a *Arena) Limit() int64 {
	if a == nil {
		return budget.Load()
	}
	return a.Budget
}

func (a *Arena) pool() *Pool {
	if a == nil {
		return nil
	}
	return a.Pool
}

// CheckBytes returns a *BudgetError when bytes exceed the arena's budget;
// what describes the allocation and is only called then.
func (a *Arena) CheckBytes(bytes int64, what func() string) error {
	if b := a.Limit(); b > 0 && bytes > b {
		return &BudgetError{What: what(), Bytes: bytes, Budget: b}
	}
	return nil
}

// CheckShape checks a shape's element count (NumElements) and its storage
// against the arena's budget, before anything is allocated.
func (a *Arena) CheckShape(dt DType, shape []int) (int, error) {
	n, err := NumElements(shape)
	if err != nil {
		return 0, err
	}
	if err := a.CheckBytes(Bytes(dt, n), func() string { return fmt.Sprintf("tensor %v%v", dt, shape) }); err != nil {
		return 0, err
	}
	return n, nil
}

// New allocates a zero tensor. It panics on a bad dtype, on a shape that
// NumElements rejects and, with a *BudgetError, on a tensor over the
// arena's budget; probe turns such panics into errors naming the node.
func (a *Arena) New(dt DType, shape []int) *Tensor {
	n, err := a.CheckShape(dt, shape)
	if err != nil {
		panic(err)
	}
	return &Tensor{DType: dt, Shape: append([]int{}, shape...), Data: a.MakeSlice(dt, n)}
}

// NewUninit is New for a float32 tensor whose every element the caller
// writes before anything reads it: a buffer recycled by the arena's Pool is
// handed out without clearing (its contents are stale values of an earlier
// batch). Other dtypes and unpooled sizes come zeroed as from New.
func (a *Arena) NewUninit(dt DType, shape []int) *Tensor {
	n, err := a.CheckShape(dt, shape)
	if err != nil {
		panic(err)
	}
	p := a.pool()
	if dt != Float32 || n < poolMin || p == nil {
		return &Tensor{DType: dt, Shape: append([]int{}, shape...), Data: a.MakeSlice(dt, n)}
	}
	return &Tensor{DType: dt, Shape: append([]int{}, shape...), Data: p.get(n, true)}
}

// Alloc is New with errors instead of panics: a bad shape or one over the
// budget is refused before allocation.
func (a *Arena) Alloc(dt DType, shape []int) (*Tensor, error) {
	n, err := a.CheckShape(dt, shape)
	if err != nil {
		return nil, err
	}
	if dt.Size() == 0 {
		return nil, fmt.Errorf("tensor: no storage for %v", dt)
	}
	return &Tensor{DType: dt, Shape: append([]int{}, shape...), Data: a.MakeSlice(dt, n)}, nil
}

// MakeSlice allocates a zero slice of n elements of the Go type for dt
// (float32 slices of at least poolMin elements from the arena's Pool). Over
// the budget it panics with a *BudgetError instead of allocating.
func (a *Arena) MakeSlice(dt DType, n int) any {
	if err := a.CheckBytes(Bytes(dt, n), func() string { return fmt.Sprintf("%d elements of %v", n, dt) }); err != nil {
		panic(err)
	}
	if dt == Float32 {
		if p := a.pool(); p != nil && n >= poolMin {
			return p.get(n, false)
		}
	}
	return makeSlice(dt, n)
}
