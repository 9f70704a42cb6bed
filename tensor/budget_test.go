package tensor

import (
	"errors"
	"strings"
	"testing"
)

func TestNumElementsOverflow(t *testing.T) {
	for _, s := range [][]int{{-1}, {1 << 40, 2}, {1 << 31, 1 << 31, 1 << 31}, {MaxElements + 1}} {
		if n, err := NumElements(s); err == nil {
			t.Errorf("NumElements(%v) = %d, want an error", s, n)
		}
	}
	for _, s := range [][]int{{}, {0, 1 << 40}, {MaxElements}, {3, 4}} {
		if _, err := NumElements(s); err != nil {
			t.Errorf("NumElements(%v): %v", s, err)
		}
	}
}

// Over the budget: Alloc errors, New and MakeSlice panic with *BudgetError;
// nothing is allocated either way.
func TestMemoryBudget(t *testing.T) {
	prev := SetMemoryBudget(1000)
	defer SetMemoryBudget(prev)
	if _, err := Alloc(Float32, []int{250}); err != nil {
		t.Errorf("1000 bytes refused: %v", err)
	}
	_, err := Alloc(Float64, []int{10, 20})
	var be *BudgetError
	if !errors.As(err, &be) || be.Bytes != 1600 || be.Budget != 1000 || !strings.Contains(err.Error(), "float64[10 20]") || !strings.Contains(err.Error(), "1600 bytes") {
		t.Errorf("Alloc over budget: %v", err)
	}
	for name, f := range map[string]func(){
		"New":       func() { New(Int64, []int{200}) },
		"MakeSlice": func() { MakeSlice(Float32, 251) },
	} {
		func() {
			defer func() {
				if _, ok := recover().(*BudgetError); !ok {
					t.Errorf("%s over budget did not panic with *BudgetError", name)
				}
			}()
			f()
		}()
	}
	SetMemoryBudget(0) // unlimited
	if _, err := Alloc(Float64, []int{10, 20}); err != nil {
		t.Errorf("no budget: %v", err)
	}
	if got := Bytes(Float32, MaxElements); got != 4<<40 {
		t.Errorf("Bytes = %d", got)
	}
	if got := FormatBytes(3 << 29); got != "1.5 GiB (1610612736 bytes)" {
		t.Errorf("FormatBytes = %q", got)
	}
}
