package par

import (
	"sync/atomic"
	"testing"
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
