// Package par runs a few parts of one job side by side.
package par

import "sync"

// Do runs f(0), …, f(w−1) at once, the last on the calling goroutine, and
// returns when all are done (w ≤ 1: f(0) alone, on the caller).
func Do(w int, f func(part int)) {
	if w <= 1 {
		f(0)
		return
	}
	var wg sync.WaitGroup
	wg.Add(w - 1)
	for i := 0; i < w-1; i++ {
		go func() { defer wg.Done(); f(i) }()
	}
	f(w - 1)
	wg.Wait()
}
