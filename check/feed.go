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
	"strconv"
	"strings"
	"sync/atomic"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// sampleFeed yields batches of named inputs plus the matching labels.
type sampleFeed struct {
	sources map[string]loader.Source
	// order lists the per-sample inputs (read from sources), all every
	// model input (for messages)
	order, all []string
	// consts are the inputs fed the same value in every batch (--fixed, and
	// the first value of a carried input); moved maps a per-sample input
	// whose batch axis is not the first to that axis; carry pairs an output
	// with the input it feeds in the next batch.
	consts map[string]*constInput
	// paths are the files that fed each input (Data, or a Fixed file)
	paths     map[string]string
	moved     map[string]int
	carry     [][2]string
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
	f := &sampleFeed{sources: map[string]loader.Source{}, total: -1, consts: map[string]*constInput{}, moved: map[string]int{}, paths: map[string]string{}}
	if len(g.Inputs) == 0 {
		return nil, fmt.Errorf("the model has no inputs to feed")
	}
	fail := func(err error) (*sampleFeed, error) {
		f.Close()
		return nil, err
	}
	// --fixed and --carry first: the inputs they name are not per sample
	fixedSpec, err := f.parseConstSpecs(g, o)
	if err != nil {
		return nil, err
	}
	for _, in := range g.Inputs {
		f.all = append(f.all, in.Name)
		if _, ok := fixedSpec[in.Name]; !ok {
			f.order = append(f.order, in.Name)
		}
	}
	if len(f.order) == 0 {
		return nil, fmt.Errorf("every input of the model is given by --fixed or --carry; at least one must vary per sample (--data)")
	}
	perSample := func(name string) bool { _, ok := fixedSpec[name]; return !ok }
	sym := batchSymbol(g, perSample)
	for _, name := range slices.Sorted(maps.Keys(fixedSpec)) {
		vi, _ := inputInfo(g, name)
		c, err := openConst(vi, fixedSpec[name], sym)
		if err != nil {
			return nil, err
		}
		f.consts[name] = c
		if c.value != nil {
			f.paths[name] = c.spec
		}
	}
	for _, in := range g.Inputs {
		if a := batchAxis(in, sym); a > 0 && perSample(in.Name) && in.Symbols[0] != sym {
			f.moved[in.Name] = a
		}
	}
	if len(o.Data) == 0 && len(o.Arrays) == 0 {
		f.synthetic = true
		n := o.Samples
		if n <= 0 {
			n = 64
		}
		for i, in := range g.Inputs {
			if !perSample(in.Name) {
				continue
			}
			if in.Shape == nil {
				return fail(fmt.Errorf("input %q has no declared shape; synthetic input needs one: pass --data", in.Name))
			}
			if in.DType != tensor.Float32 {
				return fail(fmt.Errorf("input %q is %v; synthetic Gaussian input only fits float inputs: pass --data", in.Name, in.DType))
			}
			shape := append([]int{}, in.Shape[1:]...)
			if a, ok := f.moved[in.Name]; ok {
				shape = append(append([]int{}, in.Shape[:a]...), in.Shape[a+1:]...)
			}
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
			srcs, err := openData(g, f.order, name, path, o)
			if err != nil {
				return fail(err)
			}
			for k, s := range srcs {
				if _, dup := f.sources[k]; dup {
					s.Close()
					return fail(fmt.Errorf("input %q is given twice in --data", k))
				}
				f.sources[k] = s
				f.paths[k] = path
			}
		}
		for name, s := range f.sources {
			vi, ok := inputInfo(g, name)
			if !ok {
				return fail(fmt.Errorf("--data names %q, which is not an input of the model (inputs: %s)", name, strings.Join(f.all, ", ")))
			}
			if !perSample(name) {
				return fail(fmt.Errorf("input %q is given by --data and by --fixed or --carry; give it once", name))
			}
			if err := checkSource(vi, s, f.moved[name]); err != nil {
				return fail(err)
			}
		}
		var missing []string
		for _, name := range f.order {
			if f.sources[name] == nil {
				missing = append(missing, name)
			}
		}
		if len(missing) > 0 {
			return fail(missingError(g, missing, f.all))
		}
	}
	if err := f.chooseBatching(g, o.Batch, perSample); err != nil {
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
			return fail(fmt.Errorf("input %q has %d samples but another input has %d; pass the same number of samples for every input (an input that is the same for every sample goes in --fixed %s=FILE)", name, n, f.total, name))
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

// openData opens one --data path for the named input ("" = the single
// per-sample input of those in perSample, or npz keys).
func openData(g *loader.Graph, perSample []string, name, path string, o Sample) (map[string]loader.Source, error) {
	fi, err := os.Stat(path)
	if err != nil {
		return nil, err
	}
	target := name
	if target == "" {
		if len(perSample) == 1 {
			target = perSample[0]
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
		var ins []string
		for _, in := range g.Inputs {
			ins = append(ins, in.Name+" "+probe.ShapeString(in))
		}
		return nil, fmt.Errorf("--data %q: the model has %d inputs (%s); pass one file per input as INPUT=PATH, and inputs that do not vary per sample as --fixed NAME=FILE|VALUE|zeros", path, len(g.Inputs), strings.Join(ins, ", "))
	}
	s, err := loader.OpenFile(path)
	if err != nil {
		if strings.Contains(err.Error(), "no sample axis") {
			return nil, fmt.Errorf("%w; an input that is the same in every batch goes in --fixed %s=%s", err, target, path)
		}
		return nil, err
	}
	return map[string]loader.Source{target: s}, nil
}

// checkSource compares a source's per-sample shape and dtype with the model input.
// axis is the input's batch axis (0, or where the model's symbolic batch
// dimension is: the samples are moved there).
func checkSource(vi loader.ValueInfo, s loader.Source, axis int) error {
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
	one := append(append([]int{}, dims[:axis]...), dims[min(axis+1, len(dims)):]...) // a sample's shape
	fix := fmt.Sprintf("; pass --data %s=FILE holding samples of shape %s (the sample axis first), or --fixed %s=FILE for a value that is the same in every batch", vi.Name, dimsString(one, vi, axis), vi.Name)
	switch {
	case noSampleAxis(vi, s): // one sample a run
	case len(dims) == len(sample)+1:
		dims = one
	default:
		return fmt.Errorf("input %q: model expects shape %s, %q holds samples of shape %v%s", vi.Name, probe.ShapeString(vi), s.Name(), sample, fix)
	}
	for i, d := range dims {
		if d >= 0 && d != sample[i] {
			return fmt.Errorf("input %q: model expects shape %s, %q holds samples of shape %v%s", vi.Name, probe.ShapeString(vi), s.Name(), sample, fix)
		}
	}
	return nil
}

// dimsString renders dims, vi's declared shape without the batch axis, with
// its symbolic names.
func dimsString(dims []int, vi loader.ValueInfo, axis int) string {
	parts := make([]string, len(dims))
	for i, d := range dims {
		j := i
		if i >= axis {
			j = i + 1
		}
		switch {
		case d >= 0:
			parts[i] = fmt.Sprint(d)
		case j < len(vi.Symbols) && vi.Symbols[j] != "":
			parts[i] = vi.Symbols[j]
		default:
			parts[i] = "?"
		}
	}
	return "[" + strings.Join(parts, " ") + "]"
}

// missingError names the inputs left out and the two ways to give them.
func missingError(g *loader.Graph, missing, all []string) error {
	var b strings.Builder
	if len(missing) == 1 {
		fmt.Fprintf(&b, "model input %q has no data", missing[0])
	} else {
		fmt.Fprintf(&b, "model inputs %s have no data", strings.Join(quoteAll(missing), ", "))
	}
	b.WriteString(": pass ")
	for i, name := range missing {
		vi, _ := inputInfo(g, name)
		if i > 0 {
			b.WriteString("; ")
		}
		fmt.Fprintf(&b, "--data %s=FILE (a sample per row) or --fixed %s=FILE|VALUE|zeros (the same value in every batch; shape %s)", name, name, probe.ShapeString(vi))
	}
	fmt.Fprintf(&b, " (the model's inputs: %s)", strings.Join(all, ", "))
	return errors.New(b.String())
}

func quoteAll(s []string) []string {
	out := make([]string, len(s))
	for i, x := range s {
		out[i] = strconv.Quote(x)
	}
	return out
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
// the model's inputs have none (a view of the same values), the samples of
// an input whose batch axis is not the first moved there (a copy), the
// fixed inputs at the batch size, and the carried values (carried: by
// input name) in place of their fixed first values.
func (f *sampleFeed) runInputs(batch, carried map[string]*tensor.Tensor) map[string]*tensor.Tensor {
	if !f.unbatched && len(f.moved) == 0 && len(f.consts) == 0 {
		return batch
	}
	in := make(map[string]*tensor.Tensor, len(batch)+len(f.consts))
	k := batchLen(batch)
	for name, t := range batch {
		switch a, moved := f.moved[name]; {
		case f.unbatched:
			in[name] = t.Reshaped(t.Shape[1:])
		case moved:
			in[name] = spreadAxis(t, a, k, false)
		default:
			in[name] = t
		}
	}
	for name, c := range f.consts {
		if t, ok := carried[name]; ok {
			in[name] = t
		} else {
			in[name] = c.at(k)
		}
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
func (f *sampleFeed) chooseBatching(g *loader.Graph, batch int, perSample func(string) bool) error {
	var fixedBy, flatBy *loader.ValueInfo
	with := ""
	for i := range g.Inputs {
		in := &g.Inputs[i]
		s := f.sources[in.Name]
		_, moved := f.moved[in.Name]
		switch {
		case !perSample(in.Name):
			continue
		case noSampleAxis(*in, s):
			flatBy = in
		case moved:
			with = in.Name
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
		return fmt.Errorf("input %q (shape %s) has no sample axis but input %q has one; vitals feeds every input of --data the same samples: an input that is the same in every batch goes in --fixed %s=FILE|VALUE|zeros", flatBy.Name, probe.ShapeString(*flatBy), other, flatBy.Name)
	}
	if len(f.carry) > 0 {
		// each sample's carried output feeds the next sample: one a batch
		out, in := f.carry[0][0], f.carry[0][1]
		if batch > 1 {
			return fmt.Errorf("--batch %d: --carry %s=%s feeds each sample's output to the next sample, so samples run one at a time; pass --batch 1 or leave --batch out", batch, out, in)
		}
		if fixedBy != nil && fixedBy.Shape[0] != 1 {
			return fmt.Errorf("--carry %s=%s runs one sample a batch, but the model fixes the batch size to %d (input %q has shape %s)", out, in, fixedBy.Shape[0], fixedBy.Name, probe.ShapeString(*fixedBy))
		}
		batch = 1
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
