package check

import (
	"errors"
	"fmt"
	"io"
	"maps"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"sync/atomic"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

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
func openFeed(g *loader.Graph, o Sample, ar *tensor.Arena) (*sampleFeed, error) {
	f := &sampleFeed{sources: map[string]loader.Source{}, total: -1}
	if len(g.Inputs) == 0 {
		return nil, fmt.Errorf("the model has no inputs to feed")
	}
	for _, in := range g.Inputs {
		f.order = append(f.order, in.Name)
	}
	fail := func(err error) (*sampleFeed, error) {
		f.Close()
		return nil, err
	}
	if len(o.Data) == 0 && len(o.Arrays) == 0 {
		f.synthetic = true
		n := o.Samples
		if n <= 0 {
			n = 64
		}
		for i, in := range g.Inputs {
			if in.Shape == nil {
				return fail(fmt.Errorf("input %q has no declared shape; synthetic input needs one: pass --data", in.Name))
			}
			if in.DType != tensor.Float32 {
				return fail(fmt.Errorf("input %q is %v; synthetic Gaussian input only fits float inputs: pass --data", in.Name, in.DType))
			}
			shape := append([]int{}, in.Shape[1:]...)
			for j, d := range shape {
				if d < 0 {
					return fail(fmt.Errorf("input %q has symbolic dimension %d (%s); synthetic input needs fixed sizes beyond the batch axis: pass --data", in.Name, j+1, probe.ShapeString(in)))
				}
			}
			src, err := loader.Synthetic(shape, n, o.Seed+int64(i))
			if err != nil {
				return fail(fmt.Errorf("input %q: %v", in.Name, err))
			}
			f.sources[in.Name] = src
		}
	} else {
		for _, name := range slices.Sorted(maps.Keys(o.Arrays)) {
			s, err := loader.NewTensorSource(name, o.Arrays[name])
			if err != nil {
				return fail(fmt.Errorf("input %q: %v", name, err))
			}
			f.sources[name] = s
		}
		for _, spec := range o.Data {
			name, path, named := strings.Cut(spec, "=")
			if !named {
				path, name = spec, ""
			}
			if _, err := os.Stat(path); err != nil {
				return fail(fmt.Errorf("--data %q: %v", spec, err))
			}
			srcs, err := openData(g, name, path, o)
			if err != nil {
				return fail(err)
			}
			for k, s := range srcs {
				if _, dup := f.sources[k]; dup {
					s.Close()
					return fail(fmt.Errorf("input %q is given twice in --data", k))
				}
				f.sources[k] = s
			}
		}
		for name, s := range f.sources {
			vi, ok := inputInfo(g, name)
			if !ok {
				return fail(fmt.Errorf("--data names %q, which is not an input of the model (inputs: %s)", name, strings.Join(f.order, ", ")))
			}
			if err := checkSource(vi, s); err != nil {
				return fail(err)
			}
		}
		for _, in := range g.Inputs {
			if f.sources[in.Name] == nil {
				return fail(fmt.Errorf("model input %q has no data: pass --data %s=PATH (the model's inputs: %s)", in.Name, in.Name, strings.Join(f.order, ", ")))
			}
		}
	}
	if err := f.chooseBatching(g, o.Batch); err != nil {
		return fail(err)
	}
	// sample count: the smallest source, capped by --samples
	for _, s := range f.sources {
		if n := s.Len(); n >= 0 && (f.total < 0 || n < f.total) {
			f.total = n
		}
	}
	if o.Samples > 0 && (f.total < 0 || o.Samples < f.total) {
		f.total = o.Samples
	}
	for name, s := range f.sources {
		if n := s.Len(); n >= 0 && f.total >= 0 && n != f.total && o.Samples <= 0 {
			return fail(fmt.Errorf("input %q has %d samples but another input has %d; pass the same number of samples for every input", name, n, f.total))
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
			return fail(fmt.Errorf("input %q: %v", name, err))
		}
		if err := ar.CheckBytes(satMul(tensor.Bytes(s.DType(), per), int64(k)), func() string {
			return fmt.Sprintf("input %q: a batch of %d samples of shape %v (%v)", name, k, s.SampleShape(), s.DType())
		}); err != nil {
			return fail(fmt.Errorf("%w; lower --batch", err))
		}
	}
	if o.Labels != "" {
		lt, err := loader.ReadNpy(o.Labels)
		if err != nil {
			return fail(err)
		}
		if lt.DType != tensor.Int64 && lt.DType != tensor.Int32 && lt.DType != tensor.Uint8 {
			return fail(fmt.Errorf("--labels %q: want integer class ids, got %v", o.Labels, lt.DType))
		}
		for _, v := range lt.Ints() {
			f.labels = append(f.labels, int64(v))
		}
		if f.total >= 0 && len(f.labels) < f.total {
			return fail(fmt.Errorf("--labels %q has %d labels for %d samples", o.Labels, len(f.labels), f.total))
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
func openData(g *loader.Graph, name, path string, o Sample) (map[string]loader.Source, error) {
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
		opt := loader.ImageOptions{Layout: o.Layout}
		c, h, w := vi.Shape[1], vi.Shape[2], vi.Shape[3]
		if o.Layout == "nhwc" {
			h, w, c = vi.Shape[1], vi.Shape[2], vi.Shape[3]
		}
		if c <= 0 || h <= 0 || w <= 0 {
			return nil, fmt.Errorf("--data %q: input %q has symbolic image dimensions %s; cannot choose a resize target", path, target, probe.ShapeString(vi))
		}
		opt.Channels, opt.Height, opt.Width = c, h, w
		for _, v := range o.Mean {
			opt.Mean = append(opt.Mean, float32(v))
		}
		for _, v := range o.Std {
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
			return nil, nil, err
		}
		t = convertFor(g, name, t)
		if k >= 0 && t.Shape[0] != k {
			return nil, nil, fmt.Errorf("input %q ran out of samples at %d while others continue", name, f.done+t.Shape[0])
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
			return nil, nil, fmt.Errorf("--labels has %d labels, the sample has more", len(f.labels))
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

// notes are what the user should know about how the sample was fed:
// samples left out for a fixed batch size, and that a model fixed to one
// sample a batch runs slower than it could.
func (f *sampleFeed) notes() []string {
	var n []string
	if f.dropped > 0 {
		n = append(n, fmt.Sprintf("the model fixes the batch size to %d; the last %d samples, fewer than a batch, were left out", f.fixed, f.dropped))
	}
	if f.fixed == 1 && !f.unbatched && f.done > 1 {
		n = append(n, "the model fixes the batch size to 1, so samples ran one at a time; exported with a dynamic batch axis it would run several per batch, which is faster")
	}
	return n
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
				return fmt.Errorf("inputs %q (shape %s) and %q (shape %s) fix different batch sizes; vitals feeds every input the same samples", fixedBy.Name, probe.ShapeString(*fixedBy), in.Name, probe.ShapeString(*in))
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
		return fmt.Errorf("input %q (shape %s) has no sample axis but input %q has one; vitals feeds every input the same samples", flatBy.Name, probe.ShapeString(*flatBy), other)
	}
	switch {
	case flatBy != nil:
		if batch > 1 {
			return fmt.Errorf("--batch %d: input %q (shape %s) has no sample axis, so the model takes one sample a run; pass --batch 1 or leave --batch out", batch, flatBy.Name, probe.ShapeString(*flatBy))
		}
		f.unbatched, f.fixed = true, 1
		f.batch.Store(1)
	case fixedBy != nil:
		n := fixedBy.Shape[0]
		if batch > 0 && batch != n {
			return fmt.Errorf("--batch %d: the model fixes the batch size to %d (input %q has shape %s); pass --batch %d or leave --batch out", batch, n, fixedBy.Name, probe.ShapeString(*fixedBy), n)
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
// sample: autoBatchBytes worth, at most a quarter of the memory budget (0:
// none), from 1 to autoBatchMax samples.
func chooseBatch(perItem, budget int64) int {
	perItem = max(perItem, 1)
	b := int64(autoBatchBytes) / perItem
	if budget > 0 {
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
