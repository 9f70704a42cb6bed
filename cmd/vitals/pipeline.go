package main

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"os/signal"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
	"time"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/stats"
	"github.com/vitals-health/vitals/tensor"
)

// dataOptions are the flags that say where the sample comes from.
type dataOptions struct {
	data    []string
	labels  string
	samples int
	batch   int
	mean    []float64
	std     []float64
	layout  string
	seed    int64
}

// inputErr marks errors caused by the user's files or flags (exit code 2).
type inputErr struct{ error }

func (e inputErr) Unwrap() error { return e.error }

func userErr(format string, args ...any) error { return inputErr{fmt.Errorf(format, args...)} }

// loaded is one compiled model.
type loaded struct {
	model *loader.Model
	plan  *probe.Plan
	// tap, when set, also sees every node's outputs (compare's SQNR, stats/sqnr.go)
	tap func(n *loader.Node, outs []*tensor.Tensor)
}

func loadAndCompile(path string, debug bool) (*loaded, error) {
	m, err := loader.LoadModel(path)
	if err != nil {
		return nil, inputErr{err}
	}
	p, err := probe.Compile(m)
	if err != nil {
		return nil, inputErr{fmt.Errorf("compiling model %q: %w", path, err)}
	}
	p.Debug = debug
	tuneGC(m)
	return &loaded{model: m, plan: p}, nil
}

// sampleFeed yields batches of named inputs plus the matching labels.
type sampleFeed struct {
	sources   map[string]loader.Source
	order     []string
	labels    []int64
	synthetic bool
	total     int // samples to read (after --samples), -1 unknown
	done      int
	// batch is the number of samples a batch takes from now on (read by
	// the goroutine that reads ahead); auto: --batch was left out, so the
	// first batch is one sample and analyse then sets batch (chooseBatch);
	// fixed: the batch size every input of the model fixes (0: none).
	batch atomic.Int64
	auto  bool
	fixed int
	// unbatched: the model's inputs have no sample axis; each run gets one
	// sample with the axis dropped (runInputs)
	unbatched bool
	// sizes are the sizes of the batches read so far; replay, when set,
	// gives the batch sizes to read (another model's sizes, for compare);
	// dropped counts the samples left over that fell short of a fixed batch.
	sizes   []int
	replay  []int
	dropped int
}

// openFeed matches --data to the model's inputs, checking shapes and dtypes up front.
func openFeed(g *loader.Graph, o dataOptions) (*sampleFeed, error) {
	f := &sampleFeed{sources: map[string]loader.Source{}, total: -1}
	if o.batch < 0 {
		return nil, userErr("--batch must be positive, got %d", o.batch)
	}
	if len(g.Inputs) == 0 {
		return nil, userErr("the model has no inputs to feed")
	}
	for _, in := range g.Inputs {
		f.order = append(f.order, in.Name)
	}
	fail := func(err error) (*sampleFeed, error) {
		f.Close()
		return nil, err
	}
	if len(o.data) == 0 {
		f.synthetic = true
		n := o.samples
		if n <= 0 {
			n = 64
		}
		for i, in := range g.Inputs {
			if in.Shape == nil {
				return fail(userErr("input %q has no declared shape; synthetic input needs one: pass --data", in.Name))
			}
			if in.DType != tensor.Float32 {
				return fail(userErr("input %q is %v; synthetic Gaussian input only fits float inputs: pass --data", in.Name, in.DType))
			}
			shape := append([]int{}, in.Shape[1:]...)
			for j, d := range shape {
				if d < 0 {
					return fail(userErr("input %q has symbolic dimension %d (%s); synthetic input needs fixed sizes beyond the batch axis: pass --data", in.Name, j+1, probe.ShapeString(in)))
				}
			}
			src, err := loader.Synthetic(shape, n, o.seed+int64(i))
			if err != nil {
				return fail(userErr("input %q: %v", in.Name, err))
			}
			f.sources[in.Name] = src
		}
	} else {
		for _, spec := range o.data {
			name, path, named := strings.Cut(spec, "=")
			if !named {
				path, name = spec, ""
			}
			if _, err := os.Stat(path); err != nil {
				return fail(userErr("--data %q: %v", spec, err))
			}
			srcs, err := openData(g, name, path, o)
			if err != nil {
				return fail(inputErr{err})
			}
			for k, s := range srcs {
				if _, dup := f.sources[k]; dup {
					s.Close()
					return fail(userErr("input %q is given twice in --data", k))
				}
				f.sources[k] = s
			}
		}
		for name, s := range f.sources {
			vi, ok := inputInfo(g, name)
			if !ok {
				return fail(userErr("--data names %q, which is not an input of the model (inputs: %s)", name, strings.Join(f.order, ", ")))
			}
			if err := checkSource(vi, s); err != nil {
				return fail(inputErr{err})
			}
		}
		for _, in := range g.Inputs {
			if f.sources[in.Name] == nil {
				return fail(userErr("model input %q has no data: pass --data %s=PATH (the model's inputs: %s)", in.Name, in.Name, strings.Join(f.order, ", ")))
			}
		}
	}
	if err := f.chooseBatching(g, o.batch); err != nil {
		return fail(err)
	}
	// sample count: the smallest source, capped by --samples
	for _, s := range f.sources {
		if n := s.Len(); n >= 0 && (f.total < 0 || n < f.total) {
			f.total = n
		}
	}
	if o.samples > 0 && (f.total < 0 || o.samples < f.total) {
		f.total = o.samples
	}
	for name, s := range f.sources {
		if n := s.Len(); n >= 0 && f.total >= 0 && n != f.total && o.samples <= 0 {
			return fail(userErr("input %q has %d samples but another input has %d; pass the same number of samples for every input", name, n, f.total))
		}
	}
	// memory budget: one batch of every input, before anything is read
	for _, name := range f.order {
		s := f.sources[name]
		k := int(f.batch.Load())
		if f.total >= 0 {
			k = min(k, f.total)
		}
		per, err := tensor.NumElements(s.SampleShape())
		if err != nil {
			return fail(userErr("input %q: %v", name, err))
		}
		if err := tensor.CheckBytes(satMul(tensor.Bytes(s.DType(), per), int64(k)), func() string {
			return fmt.Sprintf("input %q: a batch of %d samples of shape %v (%v)", name, k, s.SampleShape(), s.DType())
		}); err != nil {
			return fail(inputErr{fmt.Errorf("%w; lower --batch", err)})
		}
	}
	if o.labels != "" {
		lt, err := loader.ReadNpy(o.labels)
		if err != nil {
			return fail(inputErr{err})
		}
		if lt.DType != tensor.Int64 && lt.DType != tensor.Int32 && lt.DType != tensor.Uint8 {
			return fail(userErr("--labels %q: want integer class ids, got %v", o.labels, lt.DType))
		}
		for _, v := range lt.Ints() {
			f.labels = append(f.labels, int64(v))
		}
		if f.total >= 0 && len(f.labels) < f.total {
			return fail(userErr("--labels %q has %d labels for %d samples", o.labels, len(f.labels), f.total))
		}
	}
	return f, nil
}

func inputInfo(g *loader.Graph, name string) (loader.ValueInfo, bool) {
	for _, in := range g.Inputs {
		if in.Name == name {
			return in, true
		}
	}
	return loader.ValueInfo{}, false
}

// openData opens one --data path for the named input ("" = the single input, or npz keys).
func openData(g *loader.Graph, name, path string, o dataOptions) (map[string]loader.Source, error) {
	fi, err := os.Stat(path)
	if err != nil {
		return nil, err
	}
	target := name
	if target == "" {
		if len(g.Inputs) == 1 {
			target = g.Inputs[0].Name
		}
	}
	if fi.IsDir() {
		if target == "" {
			return nil, fmt.Errorf("--data %q: a folder of images feeds one input; name it with INPUT=%s", path, path)
		}
		vi, _ := inputInfo(g, target)
		if len(vi.Shape) != 4 {
			return nil, fmt.Errorf("--data %q: input %q has shape %s; a folder of images needs a rank-4 image input", path, target, probe.ShapeString(vi))
		}
		opt := loader.ImageOptions{Layout: o.layout}
		c, h, w := vi.Shape[1], vi.Shape[2], vi.Shape[3]
		if o.layout == "nhwc" {
			h, w, c = vi.Shape[1], vi.Shape[2], vi.Shape[3]
		}
		if c <= 0 || h <= 0 || w <= 0 {
			return nil, fmt.Errorf("--data %q: input %q has symbolic image dimensions %s; cannot choose a resize target", path, target, probe.ShapeString(vi))
		}
		opt.Channels, opt.Height, opt.Width = c, h, w
		for _, v := range o.mean {
			opt.Mean = append(opt.Mean, float32(v))
		}
		for _, v := range o.std {
			opt.Std = append(opt.Std, float32(v))
		}
		s, err := loader.OpenImages(path, opt)
		if err != nil {
			return nil, err
		}
		return map[string]loader.Source{target: s}, nil
	}
	if strings.EqualFold(filepath.Ext(path), ".npz") && name == "" {
		m, err := loader.OpenNpz(path)
		if err != nil {
			return nil, err
		}
		if len(m) == 1 && target != "" {
			for _, s := range m {
				return map[string]loader.Source{target: s}, nil
			}
		}
		return m, nil
	}
	if target == "" {
		return nil, fmt.Errorf("--data %q: the model has %d inputs; pass one file per input as INPUT=PATH", path, len(g.Inputs))
	}
	s, err := loader.OpenFile(path)
	if err != nil {
		return nil, err
	}
	return map[string]loader.Source{target: s}, nil
}

// checkSource compares a source's per-sample shape and dtype with the model input.
func checkSource(vi loader.ValueInfo, s loader.Source) error {
	want := vi.DType
	if want == tensor.Float16 || want == tensor.BFloat16 {
		want = tensor.Float32
	}
	if vi.HasType && s.DType() != want {
		// float64 samples for a float32 input are converted; other mismatches are errors
		if !(want == tensor.Float32 && s.DType() == tensor.Float64) && !(want == tensor.Int64 && s.DType() == tensor.Int32) {
			return fmt.Errorf("input %q: model expects %v, %q holds %v", vi.Name, vi.DType, s.Name(), s.DType())
		}
	}
	if vi.Shape == nil {
		return nil
	}
	sample, dims := s.SampleShape(), vi.Shape
	switch {
	case noSampleAxis(vi, s): // one sample a run
	case len(dims) == len(sample)+1:
		dims = dims[1:]
	default:
		return fmt.Errorf("input %q: model expects shape %s, %q holds samples of shape %v (with the sample axis first: %v)", vi.Name, probe.ShapeString(vi), s.Name(), sample, append([]int{-1}, sample...))
	}
	for i, d := range dims {
		if d >= 0 && d != sample[i] {
			return fmt.Errorf("input %q: model expects shape %s, %q holds samples of shape %v", vi.Name, probe.ShapeString(vi), s.Name(), sample)
		}
	}
	return nil
}

// noSampleAxis reports whether a model input takes one sample as it is,
// without a sample axis: its rank is the sample's (detection models exported
// for one image take [3, H, W]).
func noSampleAxis(vi loader.ValueInfo, s loader.Source) bool {
	return s != nil && vi.Shape != nil && len(vi.Shape) == len(s.SampleShape())
}

// next returns the next batch (nil at the end) and its labels.
func (f *sampleFeed) next(g *loader.Graph) (map[string]*tensor.Tensor, []int64, error) {
	n := int(f.batch.Load())
	if len(f.replay) > len(f.sizes) {
		n = f.replay[len(f.sizes)]
	}
	if f.total >= 0 {
		n = min(n, f.total-f.done)
		if n <= 0 {
			return nil, nil, nil
		}
		if n < f.fixed {
			f.dropped = n
			return nil, nil, nil
		}
	}
	batch := map[string]*tensor.Tensor{}
	k := -1
	for _, name := range f.order {
		t, err := f.sources[name].Next(n)
		if errors.Is(err, io.EOF) {
			return nil, nil, nil
		}
		if err != nil {
			return nil, nil, inputErr{err}
		}
		t = convertFor(g, name, t)
		if k >= 0 && t.Shape[0] != k {
			return nil, nil, userErr("input %q ran out of samples at %d while others continue", name, f.done+t.Shape[0])
		}
		k = t.Shape[0]
		batch[name] = t
	}
	if k < f.fixed { // the end of a source of unknown length: only full batches fit
		f.dropped = k
		return nil, nil, nil
	}
	var labels []int64
	if f.labels != nil {
		if f.done+k > len(f.labels) {
			return nil, nil, userErr("--labels has %d labels, the sample has more", len(f.labels))
		}
		labels = f.labels[f.done : f.done+k]
	}
	f.done += k
	f.sizes = append(f.sizes, k)
	return batch, labels, nil
}

// runInputs is a batch as the plan takes it: without the sample axis when
// the model's inputs have none (a view of the same values).
func (f *sampleFeed) runInputs(batch map[string]*tensor.Tensor) map[string]*tensor.Tensor {
	if !f.unbatched {
		return batch
	}
	in := make(map[string]*tensor.Tensor, len(batch))
	for name, t := range batch {
		in[name] = t.Reshaped(t.Shape[1:])
	}
	return in
}

// note is what the user should know about how the sample was fed ("" when
// nothing): samples left out for a fixed batch size, and that a model fixed
// to one sample a batch runs slower than it could.
func (f *sampleFeed) note() string {
	var b strings.Builder
	if f.dropped > 0 {
		fmt.Fprintf(&b, "vitals: the model fixes the batch size to %d; the last %d samples, fewer than a batch, were left out\n", f.fixed, f.dropped)
	}
	if f.fixed == 1 && !f.unbatched && f.done > 1 {
		b.WriteString("vitals: the model fixes the batch size to 1, so samples ran one at a time; exported with a dynamic batch axis it would run several per batch, which is faster\n")
	}
	return b.String()
}

// chooseBatching sets how the feed cuts the sample, from --batch (0: not
// given) and the model's inputs:
//   - inputs without a sample axis (rank one less than the sample's with it,
//     as detection models exported for one image take [3, H, W]) run one
//     sample a run, the axis dropped (unbatched);
//   - inputs that fix their first axis to a number run batches of exactly
//     that size (fixed), and another --batch is refused;
//   - otherwise --batch, or, without it, one sample first and then
//     chooseBatch's size (auto).
//
// Inputs that disagree (fixing different sizes, or some with a sample axis
// and some without) are an error.
func (f *sampleFeed) chooseBatching(g *loader.Graph, batch int) error {
	var fixedBy, flatBy *loader.ValueInfo
	with := ""
	for i := range g.Inputs {
		in := &g.Inputs[i]
		s := f.sources[in.Name]
		switch {
		case noSampleAxis(*in, s):
			flatBy = in
		case len(in.Shape) > 0 && in.Shape[0] > 0:
			if fixedBy != nil && in.Shape[0] != fixedBy.Shape[0] {
				return userErr("inputs %q (shape %s) and %q (shape %s) fix different batch sizes; vitals feeds every input the same samples", fixedBy.Name, probe.ShapeString(*fixedBy), in.Name, probe.ShapeString(*in))
			}
			fixedBy = in
		default:
			with = in.Name
		}
	}
	if flatBy != nil && (fixedBy != nil || with != "") {
		other := with
		if fixedBy != nil {
			other = fixedBy.Name
		}
		return userErr("input %q (shape %s) has no sample axis but input %q has one; vitals feeds every input the same samples", flatBy.Name, probe.ShapeString(*flatBy), other)
	}
	switch {
	case flatBy != nil:
		if batch > 1 {
			return userErr("--batch %d: input %q (shape %s) has no sample axis, so the model takes one sample a run; pass --batch 1 or leave --batch out", batch, flatBy.Name, probe.ShapeString(*flatBy))
		}
		f.unbatched, f.fixed = true, 1
		f.batch.Store(1)
	case fixedBy != nil:
		n := fixedBy.Shape[0]
		if batch > 0 && batch != n {
			return userErr("--batch %d: the model fixes the batch size to %d (input %q has shape %s); pass --batch %d or leave --batch out", batch, n, fixedBy.Name, probe.ShapeString(*fixedBy), n)
		}
		f.fixed = n
		f.batch.Store(int64(n))
	case batch > 0:
		f.batch.Store(int64(batch))
	default:
		f.batch.Store(1)
		f.auto = true
	}
	return nil
}

// autoBatchBytes is what the node outputs of one batch come to at the batch
// size chosen when --batch is left out, and autoBatchMax the largest such
// batch. Measured with vitals check over 240–256 items on the 2-core bench
// machine: resnet18 at 224×224 (23 MB of node outputs per item) ran fastest
// at batch 8 (4: +9%, 16: +10%); mobilenet_v2 (52 MB per item) within the
// noise from 2 to 8 (three alternating rounds at 3, 5 and 8: 2.71–2.93 s,
// peaks 228, 299 and 421 MB), while 32 took over 2× as long, its batches
// outgrowing the buffer pool; a small transformer (32 MB) alike from 8 to 32;
// an MLP (40 KB per item) fastest at 32 (8: +23%).
const (
	autoBatchBytes = 192 << 20
	autoBatchMax   = 32
)

// chooseBatch is the batch size for node outputs of perItem bytes per
// sample: autoBatchBytes worth, at most a quarter of the memory budget, from
// 1 to autoBatchMax samples.
func chooseBatch(perItem int64) int {
	perItem = max(perItem, 1)
	b := int64(autoBatchBytes) / perItem
	if budget := tensor.MemoryBudget(); budget > 0 {
		b = min(b, budget/4/perItem)
	}
	return int(min(max(b, 1), autoBatchMax))
}

// convertFor widens float64 samples to float32 and int32 to int64 when the model wants that.
func convertFor(g *loader.Graph, name string, t *tensor.Tensor) *tensor.Tensor {
	vi, _ := inputInfo(g, name)
	switch d := t.Data.(type) {
	case []float64:
		if vi.DType == tensor.Float32 {
			out := make([]float32, len(d))
			for i, v := range d {
				out[i] = float32(v)
			}
			return tensor.From(out, t.Shape...)
		}
	case []int32:
		if vi.DType == tensor.Int64 {
			out := make([]int64, len(d))
			for i, v := range d {
				out[i] = int64(v)
			}
			return tensor.From(out, t.Shape...)
		}
	}
	return t
}

func (f *sampleFeed) Close() {
	for _, s := range f.sources {
		s.Close()
	}
}

// satMul multiplies non-negative counts, saturating at MaxInt64.
func satMul(a, b int64) int64 {
	if a != 0 && b > math.MaxInt64/a {
		return math.MaxInt64
	}
	return a * b
}

// interrupted is closed on SIGINT/SIGTERM; runs stop between batches.
var (
	interrupted = make(chan struct{})
	watchOnce   sync.Once
)

// watchSignals starts (once per process) the watcher: the first signal asks
// the run to stop between batches, a second one exits at once.
func watchSignals() {
	watchOnce.Do(func() {
		ch := make(chan os.Signal, 1)
		signal.Notify(ch, os.Interrupt, syscall.SIGTERM)
		go func() {
			<-ch
			close(interrupted)
			<-ch
			os.Exit(130)
		}()
	})
}

var errInterrupted = errors.New("interrupted")

// afterBatchHook, when set (by tests only), runs after every batch; it lets a
// test force a panic deep inside the pipeline.
var afterBatchHook func(samplesDone int)

// progress prints "batch i, n samples" on stderr when it is a terminal and the run exceeds ~2 s.
type progress struct {
	start time.Time
	tty   bool
	shown bool
	total int
}

func newProgress(total int) *progress {
	fi, err := os.Stderr.Stat()
	return &progress{start: time.Now(), tty: err == nil && fi.Mode()&os.ModeCharDevice != 0, total: total}
}

func (p *progress) update(done int) {
	if !p.tty || time.Since(p.start) < 2*time.Second {
		return
	}
	p.shown = true
	el := time.Since(p.start).Seconds()
	if p.total > 0 {
		fmt.Fprintf(os.Stderr, "\rvitals: %d/%d samples (%.0f%%), %.1f s", done, p.total, 100*float64(done)/float64(p.total), el)
	} else {
		fmt.Fprintf(os.Stderr, "\rvitals: %d samples, %.1f s", done, el)
	}
}

func (p *progress) finish() {
	if p.shown {
		fmt.Fprintln(os.Stderr)
	}
}

// analyse runs one model over the feed and returns its collected statistics.
func analyse(l *loaded, feed *sampleFeed, thresholds map[string]float64, each func(outs map[string]*tensor.Tensor, k int) error) (*stats.Collected, error) {
	c := stats.NewCollector(l.model, l.plan)
	pg := newProgress(feed.total)
	defer pg.finish()
	// activation storage is reused from batch to batch (at most a quarter of
	// the memory budget, 1 GiB without one)
	poolLimit := int64(1 << 30)
	if b := tensor.MemoryBudget(); b > 0 {
		poolLimit = min(poolLimit, b/4)
	}
	pool := tensor.NewPool(poolLimit)
	tensor.UsePool(pool)
	defer tensor.UsePool(nil)
	// and within a batch: a value whose last reader has run goes back to
	// the pool once the statistics worker is done with it
	dead := c.AfterObserved(pool.Put)
	// without --batch, the first batch (one sample) measures the node
	// outputs per sample, from which the batch size is chosen
	var outBytes int64
	// a signal also stops a long batch, after the node that is running
	hook := func(n *loader.Node, outs []*tensor.Tensor) error {
		select {
		case <-interrupted:
			return errInterrupted
		default:
		}
		if feed.auto {
			for _, t := range outs {
				if t != nil && t.DType == tensor.Float32 {
					outBytes += int64(t.Size()) * 4
				}
			}
		}
		if l.tap != nil {
			l.tap(n, outs)
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
	// without --batch, the reader waits after the first batch until its size
	// for the others is chosen, so that every run of the same sample is cut
	// into the same batches (and gives the same sums to the last bit)
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
			b, lb, err := feed.next(l.model.Graph)
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
	done := 0
	for {
		select {
		case <-interrupted:
			return nil, errInterrupted
		default:
		}
		f := <-ahead
		batch, labels, err := f.batch, f.labels, f.err
		if err != nil {
			return nil, err
		}
		if batch == nil {
			break
		}
		done += batchLen(batch)
		c.AddInputs(batch)
		outs, released, err := l.plan.RunRecycled(feed.runInputs(batch), hook, dead)
		if errors.Is(err, errInterrupted) {
			return nil, errInterrupted
		}
		if err != nil {
			return nil, fmt.Errorf("running %q on samples %d–%d: %w", l.model.Path, done-batchLen(batch), done-1, err)
		}
		c.AddOutputs(outs, labels)
		c.Samples += batchLen(batch)
		if feed.auto {
			feed.batch.Store(int64(chooseBatch(outBytes / int64(batchLen(batch)))))
			feed.auto = false
			close(sized)
		}
		if each != nil {
			if err := each(outs, batchLen(batch)); err != nil {
				return nil, err
			}
		}
		// the batch's released activations become the next batch's storage
		if err := c.Sync(); err != nil {
			return nil, err
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
		pg.update(done)
		if afterBatchHook != nil {
			afterBatchHook(done)
		}
	}
	if err := c.Wait(); err != nil {
		return nil, err
	}
	if c.Samples == 0 && feed.dropped > 0 {
		return nil, userErr("the model fixes the batch size to %d, and the sample has only %d samples", feed.fixed, feed.dropped)
	}
	if c.Samples == 0 {
		return nil, userErr("the sample is empty: no batches to run")
	}
	src := "file"
	if feed.synthetic {
		src = "synthetic"
	}
	col := c.Finish(src)
	if err := stats.Run(col, stats.Checks, thresholds); err != nil {
		return nil, inputErr{err}
	}
	return col, nil
}

func batchLen(b map[string]*tensor.Tensor) int {
	for _, t := range b {
		if t.Rank() > 0 {
			return t.Shape[0]
		}
	}
	return 0
}

// parseFloats parses "0.485,0.456,0.406".
func parseFloats(s string) ([]float64, error) {
	if s == "" {
		return nil, nil
	}
	var out []float64
	for _, p := range strings.Split(s, ",") {
		v, err := strconv.ParseFloat(strings.TrimSpace(p), 64)
		if err != nil || math.IsNaN(v) {
			return nil, fmt.Errorf("%q is not a number", p)
		}
		out = append(out, v)
	}
	return out, nil
}
