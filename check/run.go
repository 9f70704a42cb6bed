package check

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/stats"
	"github.com/vitals-health/vitals/tensor"
)

// Check runs model over the sample, observes every node's output and runs
// the health checks on what it saw. The sample and the thresholds are
// checked before the first batch runs. Cancelling ctx stops the run after
// the node that is running; Check then returns ctx's error and no report.
func Check(ctx context.Context, model *Model, sample Sample, o Options) (*report.Report, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	if err := sample.validate(); err != nil {
		return nil, err
	}
	feed, err := openFeed(model.graph(), sample, &tensor.Arena{Budget: o.MemoryBudget})
	if err != nil {
		return nil, err
	}
	defer feed.Close()
	col, err := analyse(ctx, model, feed, o, o.Outputs)
	if err != nil {
		return nil, err
	}
	note(o, feed)
	annotateInputs(col.Report, feed)
	return col.Report, nil
}

func note(o Options, feeds ...*sampleFeed) {
	if o.Note == nil {
		return
	}
	for _, f := range feeds {
		for _, n := range f.notes() {
			o.Note(n)
		}
	}
}

// annotateInputs records which file fed each input.
func annotateInputs(r *report.Report, f *sampleFeed) {
	for i := range r.Input.PerInput {
		if p, ok := f.paths[r.Input.PerInput[i].Name]; ok {
			r.Input.PerInput[i].Path = p
		}
	}
}

// analyse runs one model over the feed and returns its collected statistics
// with the checks run. Everything the run allocates comes from its own
// arena: the memory budget of o and a buffer pool that lives as long as
// the run.
func analyse(ctx context.Context, m *Model, feed *sampleFeed, o Options, each func(outs map[string]*tensor.Tensor, k int) error) (*stats.Collected, error) {
	c, gr, src, err := collect(ctx, m, feed, o, each)
	if err != nil {
		return nil, err
	}
	col := c.Finish(src)
	if gr != nil {
		gr.fill(col.Report)
	}
	if err := stats.Run(col, stats.Checks, o.Thresholds); err != nil {
		return nil, err
	}
	return col, nil
}

// collect runs one model over the feed and returns the collector holding
// its statistics, the backward pass's accumulators (nil without
// o.Gradients) and the sample's source ("file" or "synthetic").
func collect(ctx context.Context, m *Model, feed *sampleFeed, o Options, each func(outs map[string]*tensor.Tensor, k int) error) (*stats.Collector, *gradRun, string, error) {
	if err := ctx.Err(); err != nil {
		return nil, nil, "", err
	}
	c := stats.NewCollector(m.model, m.plan)
	// the backward pass, when asked for: it keeps each batch's values until
	// its pass is done (no recycling within a batch) and sizes batches for that
	var gr *gradRun
	if o.Gradients != nil {
		var err error
		if gr, err = newGradRun(m, o.Gradients, feed.labels != nil, o.MemoryBudget); err != nil {
			return nil, nil, "", err
		}
	}
	// values no hook reads (inside composite activations, dense layers'
	// products before their bias) may be left unwritten; the backward pass
	// and a tap read every value
	var unobserved map[string]bool
	if gr == nil && o.tap == nil {
		unobserved = c.Unobserved()
	}
	start := time.Now()
	// activation storage is reused from batch to batch (at most a quarter of
	// the memory budget, 1 GiB without one)
	poolLimit := int64(1 << 30)
	if b := o.MemoryBudget; b > 0 {
		poolLimit = min(poolLimit, b/4)
	}
	pool := tensor.NewPool(poolLimit)
	arena := &tensor.Arena{Budget: o.MemoryBudget, Pool: pool}
	// and within a batch: a value whose last reader has run goes back to
	// the pool once the statistics worker is done with it
	put := pool.Put
	if o.recycled != nil {
		put = func(t *tensor.Tensor) { o.recycled.Add(1); pool.Put(t) }
	}
	dead := c.AfterObserved(put)
	if gr != nil {
		dead = nil
	}
	// without Sample.Batch, the first batch (one sample) measures the node
	// outputs per sample, from which the batch size is chosen
	var outBytes int64
	// cancelling ctx also stops a long batch, after the node that is running
	done := ctx.Done()
	hook := func(n *loader.Node, outs []*tensor.Tensor) error {
		select {
		case <-done:
			return ctx.Err()
		default:
		}
		// (subgraph nodes left out: a loop body's values live one
		// iteration at a time, and the loop's outputs are counted)
		if feed.auto && !c.InSubgraph(n) {
			for _, t := range outs {
				if t != nil && t.DType == tensor.Float32 {
					outBytes += int64(t.Size()) * 4
				}
			}
		}
		if o.tap != nil {
			o.tap(n, outs)
		}
		if gr != nil {
			gr.record(n, outs)
		}
		return c.Hook(n, outs)
	}
	// the next batch is read (and decoded) on its own goroutine while the
	// current one runs; it has stopped before analyse returns
	type fed struct {
		batch  map[string]*tensor.Tensor
		labels []int64
		err    error
	}
	ahead := make(chan fed, 1)
	stop := make(chan struct{})
	// without Sample.Batch, the reader waits after the first batch until its
	// size for the others is chosen, so that every run of the same sample is
	// cut into the same batches (and gives the same sums to the last bit)
	var sized chan struct{}
	if feed.auto {
		sized = make(chan struct{})
	}
	go func() {
		defer close(ahead)
		for first := true; ; first = false {
			select {
			case <-stop:
				return
			default:
			}
			if !first && sized != nil {
				select {
				case <-sized:
				case <-stop:
					return
				}
			}
			b, lb, err := feed.next(m.graph())
			select {
			case ahead <- fed{b, lb, err}:
			case <-stop:
				return
			}
			if b == nil || err != nil {
				return
			}
		}
	}()
	defer func() {
		close(stop)
		for range ahead { // wait for the reader to finish
		}
	}()
	samples := 0
	// carried: the values --carry feeds back, by input name
	carried := map[string]*tensor.Tensor{}
	for {
		select {
		case <-done:
			return nil, nil, "", ctx.Err()
		default:
		}
		f := <-ahead
		batch, labels, err := f.batch, f.labels, f.err
		if err != nil {
			return nil, nil, "", err
		}
		if batch == nil {
			break
		}
		k := batchLen(batch)
		samples += k
		c.AddInputs(batch)
		in := feed.runInputs(batch, carried)
		if gr != nil {
			gr.start(in)
		}
		outs, released, err := m.plan.RunRecycled(arena, in, hook, dead, unobserved)
		if ctx.Err() != nil && errors.Is(err, ctx.Err()) {
			return nil, nil, "", ctx.Err()
		}
		if err != nil {
			return nil, nil, "", fmt.Errorf("running %q on samples %d–%d: %w", m.Path(), samples-k, samples-1, err)
		}
		c.AddOutputs(outs, labels)
		c.Samples += k
		if gr != nil {
			gr.batch(outs, labels, k)
		}
		for _, pair := range feed.carry {
			t := outs[pair[0]]
			if want := feed.consts[pair[1]].at(k); !tensor.SameShape(t.Shape, want.Shape) || t.DType != want.DType {
				return nil, nil, "", fmt.Errorf("--carry %s=%s: output %q is %v%v, input %q takes %v%v", pair[0], pair[1], pair[0], t.DType, t.Shape, pair[1], want.DType, want.Shape)
			}
			carried[pair[1]] = t.Clone() // a copy: the output's storage may be reused
		}
		if feed.auto {
			perSample := outBytes / int64(k)
			if gr != nil {
				perSample *= gradMemoryFactor
			}
			feed.batch.Store(int64(chooseBatch(perSample, o.MemoryBudget)))
			feed.auto = false
			close(sized)
		}
		if each != nil {
			if err := each(outs, k); err != nil {
				return nil, nil, "", err
			}
		}
		// the batch's released activations become the next batch's storage
		if err := c.Sync(); err != nil {
			return nil, nil, "", err
		}
		keep := make([]*tensor.Tensor, 0, len(outs)+len(batch))
		for _, t := range outs {
			keep = append(keep, t)
		}
		for _, t := range batch {
			keep = append(keep, t)
		}
		pool.Recycle(released, keep)
		// the batch's inputs are dead now (statistics synced, no output shares
		// them): their sources may read later batches into them
		for name, t := range batch {
			r, ok := feed.sources[name].(loader.Reuser)
			shared := false
			for _, o := range outs {
				shared = shared || tensor.Overlap(t, o)
			}
			if ok && !shared {
				r.Reuse(t)
			}
		}
		if o.Progress != nil {
			o.Progress(Progress{Model: m.Path(), Done: samples, Total: feed.total, Elapsed: time.Since(start)})
		}
	}
	if err := c.Wait(); err != nil {
		return nil, nil, "", err
	}
	if c.Samples == 0 && feed.dropped > 0 {
		return nil, nil, "", fmt.Errorf("the model fixes the batch size to %d, and the sample has only %d samples", feed.fixed, feed.dropped)
	}
	if c.Samples == 0 {
		return nil, nil, "", fmt.Errorf("the sample is empty: no batches to run")
	}
	src := "file"
	if feed.synthetic {
		src = "synthetic"
	}
	return c, gr, src, nil
}

func batchLen(b map[string]*tensor.Tensor) int {
	for _, t := range b {
		if t.Rank() > 0 {
			return t.Shape[0]
		}
	}
	return 0
}
