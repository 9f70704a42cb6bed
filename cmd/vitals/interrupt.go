package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"
	"time"

	"github.com/vitals-health/vitals/check"
)

// signalContext is cancelled by the first SIGINT or SIGTERM, which stops
// the run after the node that is running (exit 130, no report); a second
// signal exits at once. stop releases the signals.
func signalContext() (ctx context.Context, stop func()) {
	ctx, cancel := context.WithCancel(context.Background())
	ch := make(chan os.Signal, 2)
	signal.Notify(ch, os.Interrupt, syscall.SIGTERM)
	quit := make(chan struct{})
	go func() {
		select {
		case <-ch:
			cancel()
		case <-quit:
			return
		}
		select {
		case <-ch:
			os.Exit(130)
		case <-quit:
		}
	}()
	return ctx, func() {
		signal.Stop(ch)
		close(quit)
		cancel()
	}
}

// afterBatchHook, when set (by tests only), runs after every batch; it lets a
// test force a panic deep inside a run.
var afterBatchHook func(samplesDone int)

// progress prints "n/total samples" on w when it is a terminal and the run
// exceeds ~2 s.
type progress struct {
	w     io.Writer
	tty   bool
	shown bool
}

func newProgress(w io.Writer) *progress {
	tty := false
	if f, ok := w.(*os.File); ok {
		fi, err := f.Stat()
		tty = err == nil && fi.Mode()&os.ModeCharDevice != 0
	}
	return &progress{w: w, tty: tty}
}

func (p *progress) update(pr check.Progress) {
	if afterBatchHook != nil {
		afterBatchHook(pr.Done)
	}
	if !p.tty || pr.Elapsed < 2*time.Second {
		return
	}
	p.shown = true
	el := pr.Elapsed.Seconds()
	if pr.Total > 0 {
		fmt.Fprintf(p.w, "\rvitals: %d/%d samples (%.0f%%), %.1f s", pr.Done, pr.Total, 100*float64(pr.Done)/float64(pr.Total), el)
	} else {
		fmt.Fprintf(p.w, "\rvitals: %d samples, %.1f s", pr.Done, el)
	}
}

// finish ends the progress line, if one was shown.
func (p *progress) finish() {
	if p.shown {
		fmt.Fprintln(p.w)
		p.shown = false
	}
}
