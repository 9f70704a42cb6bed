package par

import (
	"sync"
	"sync/atomic"
	"testing"
	"time"
)

// Every part runs exactly once, whatever the count.
func TestDoRunsEachPartOnce(t *testing.T) {
	for _, w := range []int{0, 1, 2, 7} {
		var seen [8]atomic.Int32
		Do(w, func(i int) { seen[i].Add(1) })
		for i := range seen {
			want := int32(0)
			if i < max(w, 1) {
				want = 1
			}
			if got := seen[i].Load(); got != want {
				t.Fatalf("w=%d: part %d ran %d times, want %d", w, i, got, want)
			}
		}
	}
}

// Parts that start jobs of their own, from several callers at once, all
// run exactly once and every call returns, whether waiting callers spin or
// park at once (spinFor 0).
func TestDoNestedFromManyCallers(t *testing.T) {
	for _, spin := range []time.Duration{0, 500 * time.Microsecond} {
		old := spinFor.Load()
		spinFor.Store(int64(spin))
		var ran atomic.Int64
		var nest func(depth int)
		nest = func(depth int) {
			Do(3, func(int) {
				ran.Add(1)
				if depth > 0 {
					nest(depth - 1)
				}
			})
		}
		var wg sync.WaitGroup
		for range 8 {
			wg.Add(1)
			go func() { defer wg.Done(); nest(3) }()
		}
		wg.Wait()
		spinFor.Store(old)
		// 3 + 9 + 27 + 81 parts per caller
		if got, want := ran.Load(), int64(8*(3+9+27+81)); got != want {
			t.Fatalf("spin %v: %d parts ran, want %d", spin, got, want)
		}
	}
}

type partFailure struct{ part int }

// A panic in any part (on a worker or on the caller) comes back out of Do
// on the caller, with its own value, after every other part has finished;
// the pool goes on working.
func TestDoReturnsPartPanicToCaller(t *testing.T) {
	for _, bad := range []int{0, 3} { // 3 runs on the caller
		var finished atomic.Int32
		got := func() (r any) {
			defer func() { r = recover() }()
			Do(4, func(i int) {
				if i == bad {
					panic(partFailure{i})
				}
				time.Sleep(time.Millisecond)
				finished.Add(1)
			})
			return nil
		}()
		if got != (partFailure{bad}) {
			t.Fatalf("part %d panicked: Do gave %v", bad, got)
		}
		if n := finished.Load(); n != 3 {
			t.Fatalf("part %d panicked: %d other parts had finished when Do returned, want 3", bad, n)
		}
	}
	var ran atomic.Int32
	Do(4, func(int) { ran.Add(1) })
	if ran.Load() != 4 {
		t.Fatalf("after the panics: %d parts ran, want 4", ran.Load())
	}
}
