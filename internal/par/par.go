// Package par runs a few parts of one job side by side on a shared pool of
// worker goroutines.
//
// Waking a parked goroutine costs a futex call and, on a virtual machine, a
// trip through the hypervisor (tens of microseconds measured on the bench
// machine, as much as a whole small matrix product). So a worker that has
// finished a part keeps looking for the next one for spinFor before it
// parks, and a caller waiting for its parts runs queued parts itself (any
// caller's) instead of parking at once. Parts may start further jobs
// (nested Do): every queued part has an owner that is running or helping,
// so nothing waits on a part nobody will run.
package par

import (
	"os"
	"runtime"
	"sync"
	"sync/atomic"
	"time"
)

// spinFor is how long an idle worker or a waiting caller keeps looking for
// work before it parks: 500 µs, or VITALS_SPIN (a Go duration; 0 parks at
// once, for machines shared with other work). On the bench machine the
// MLP's executor went from 0.13 to 0.07–0.09 ms per item (0, 50 µs, 200 µs,
// 500 µs, 1 ms and 2 ms tried; from 200 µs on the gain was within noise).
var spinFor atomic.Int64 // nanoseconds

func init() { spinFor.Store(int64(spinFromEnv())) }

// task is one Do call: its function, the parts not yet finished, a
// wake-up for a caller that parked, and the first panic of a part.
type task struct {
	f     func(int)
	left  atomic.Int32
	done  chan struct{} // receives one token when left reaches 0
	mu    sync.Mutex
	panic any
}

type part struct {
	t *task
	i int
}

// run runs the part, keeping a panic for the task's caller: whatever
// goroutine runs a part, the panic surfaces in the goroutine that called
// Do (whose recover, if any, expects it), and the part still counts as
// finished, so no caller waits for it forever.
func (p part) run() {
	defer func() {
		if r := recover(); r != nil {
			p.t.keepPanic(r)
		}
		if p.t.left.Add(-1) == 0 {
			p.t.done <- struct{}{}
		}
	}()
	p.t.f(p.i)
}

func (t *task) keepPanic(r any) {
	t.mu.Lock()
	if t.panic == nil {
		t.panic = r
	}
	t.mu.Unlock()
}

var (
	queue    = make(chan part, 1024)
	poolMu   sync.Mutex
	nWorkers int
	taskPool = sync.Pool{New: func() any { return &task{done: make(chan struct{}, 1)} }}
)

// Do runs f(0), …, f(w−1) at once, the last on the calling goroutine, and
// returns when all are done (w ≤ 1: f(0) alone, on the caller). When parts
// panic, Do panics with the first value kept once every part has finished.
func Do(w int, f func(part int)) {
	if w <= 1 {
		f(0)
		return
	}
	ensureWorkers(w - 1)
	t := taskPool.Get().(*task)
	t.f = f
	t.left.Store(int32(w))
	for i := 0; i < w-1; i++ {
		queue <- part{t, i}
	}
	part{t, w - 1}.run()
	t.wait()
	r := t.panic
	t.f, t.panic = nil, nil
	taskPool.Put(t)
	if r != nil {
		panic(r)
	}
}

// wait returns when every queued part of t has finished, running queued
// parts meanwhile.
func (t *task) wait() {
	deadline := time.Time{}
	for t.left.Load() != 0 {
		select {
		case p := <-queue:
			p.run()
			continue
		default:
		}
		if deadline.IsZero() {
			deadline = time.Now().Add(time.Duration(spinFor.Load()))
		} else if time.Now().After(deadline) {
			select {
			case <-t.done:
				return
			case p := <-queue:
				p.run()
				continue
			}
		}
		runtime.Gosched()
	}
	<-t.done // the token of the last part, sent just after left reached 0
}

// ensureWorkers starts pool workers until n exist.
func ensureWorkers(n int) {
	poolMu.Lock()
	for nWorkers < n {
		go worker()
		nWorkers++
	}
	poolMu.Unlock()
}

// worker runs queued parts, looking for the next one for spinFor after each
// before it parks.
func worker() {
	for {
		select {
		case p := <-queue:
			p.run()
			continue
		default:
		}
		deadline := time.Now().Add(time.Duration(spinFor.Load()))
		for {
			select {
			case p := <-queue:
				p.run()
				deadline = time.Now().Add(time.Duration(spinFor.Load()))
				continue
			default:
			}
			if time.Now().After(deadline) {
				break
			}
			runtime.Gosched()
		}
		(<-queue).run()
	}
}

func spinFromEnv() time.Duration {
	if d, err := time.ParseDuration(os.Getenv("VITALS_SPIN")); err == nil && d >= 0 {
		return d
	}
	return 500 * time.Microsecond
}
