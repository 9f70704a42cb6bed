package check

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"os"
	"reflect"
	"sort"
	"strings"
	"unsafe"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/stats"
	"github.com/vitals-health/vitals/tensor"
)

// Shard is the K-th (from 0) of N contiguous parts of a sample. The sample
// is cut at batch boundaries: with B samples a batch and T samples, the
// ⌈T/B⌉ batches are split as evenly as whole batches allow, part K taking
// batches ⌊K·⌈T/B⌉/N⌋ up to ⌊(K+1)·⌈T/B⌉/N⌋. Every part then runs the very
// batches a single run would, which keeps per-batch state (the dead-unit
// count half-way through the sample) exact.
type Shard struct{ K, N int }

// ParseShard reads "K/N".
func ParseShard(s string) (Shard, error) {
	a, b, ok := strings.Cut(s, "/")
	var sh Shard
	if !ok {
		return sh, fmt.Errorf("--shard wants K/N (K from 0), got %q", s)
	}
	if _, err := fmt.Sscanf(a+" "+b, "%d %d", &sh.K, &sh.N); err != nil || sh.N < 1 || sh.K < 0 || sh.K >= sh.N {
		return sh, fmt.Errorf("--shard wants K/N with 0 ≤ K < N, got %q", s)
	}
	return sh, nil
}

// Range is a half-open range [Start, End) of sample indices.
type Range struct{ Start, End int }

// State is the mergeable state of a run over part of a sample: every
// accumulator (stats.Parts) plus what identifies the model, the options
// and the sample, so that only states of the same run are merged.
type State struct {
	Version   string   // vitals version that wrote it
	ModelPath string   // the model file as given
	ModelHash string   // SHA-256 of the model file, hex
	Options   string   // the options that change statistics, one "name=value" a line
	Inputs    []string // "NAME=PATH SIZE" per input read from a file
	Total     int      // samples in the whole sample
	Batch     int      // samples a batch
	Source    string   // "file" or "synthetic"
	Ranges    []Range  // the sample ranges the state covers, sorted
	Files     []string // the partial files merged into it (for messages)
	Gaps      bool     // merged with samples missing (--allow-gaps)
	body      []byte   // the stats sections (stats.Collector.SaveState)
}

// Samples is the number of samples the state covers.
func (s *State) Samples() int {
	n := 0
	for _, r := range s.Ranges {
		n += r.End - r.Start
	}
	return n
}

// Partial runs model over one shard of the sample and returns its state.
// version is the vitals version recorded in it (merge refuses states of
// other versions). The sample's batch size must be fixed (Sample.Batch,
// or the model's fixed batch), so every shard cuts the sample as a single
// run does; a carried state (Sample.Carry) cannot be cut.
func Partial(ctx context.Context, model *Model, sample Sample, shard Shard, o Options, version string) (*State, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	if err := sample.validate(); err != nil {
		return nil, err
	}
	if shard.N < 1 || shard.K < 0 || shard.K >= shard.N {
		return nil, fmt.Errorf("shard %d/%d: want 0 ≤ K < N", shard.K, shard.N)
	}
	if len(sample.Carry) > 0 {
		return nil, fmt.Errorf("--shard: --carry feeds each sample's output to the next, across any cut; run it whole")
	}
	hash, err := modelHash(model)
	if err != nil {
		return nil, err
	}
	feed, err := openFeed(model.graph(), sample, &tensor.Arena{Budget: o.MemoryBudget})
	if err != nil {
		return nil, err
	}
	defer feed.Close()
	if feed.auto {
		return nil, fmt.Errorf("--shard needs --batch N: every shard must cut the sample into the batches one run would")
	}
	if feed.total < 0 {
		return nil, fmt.Errorf("--shard: the sample's length is not known ahead, so it cannot be cut into parts")
	}
	st := &State{Version: version, ModelPath: model.Path(), ModelHash: hash, Options: optionText(sample),
		Total: feed.total, Batch: int(feed.batch.Load()), Source: "file"}
	if feed.synthetic {
		st.Source = "synthetic"
	}
	if st.Inputs, err = inputFiles(feed); err != nil {
		return nil, err
	}
	nb := (st.Total + st.Batch - 1) / st.Batch
	b0, b1 := shard.K*nb/shard.N, (shard.K+1)*nb/shard.N
	if b0 == b1 {
		return nil, fmt.Errorf("--shard %d/%d: the sample has %d batches of %d samples, too few for %d shards", shard.K, shard.N, nb, st.Batch, shard.N)
	}
	r := Range{b0 * st.Batch, min(b1*st.Batch, st.Total)}
	if err := feed.restrict(r.Start, r.End); err != nil {
		return nil, err
	}
	o.Gradients = nil // gradient sums are not part of a partial state (docs/shards.md)
	c, _, _, err := collect(ctx, model, feed, o, nil)
	if err != nil {
		return nil, err
	}
	note(o, feed)
	if st.body, err = c.SaveState(); err != nil {
		return nil, err
	}
	st.Ranges = []Range{r}
	return st, nil
}

// restrict makes the feed read samples [start, end) only: a source that
// can (loader.Skipper: .npy files seek, image folders skip files) passes
// over the samples before start, others read and drop them.
func (f *sampleFeed) restrict(start, end int) error {
	for _, name := range f.order {
		src := f.sources[name]
		if sk, ok := src.(loader.Skipper); ok && start > 0 {
			if err := sk.Skip(start); err != nil {
				return fmt.Errorf("input %q: skipping to sample %d: %v", name, start, err)
			}
			continue
		}
		for left := start; left > 0; {
			k := min(left, 256)
			t, err := src.Next(k)
			if err != nil {
				return fmt.Errorf("input %q: skipping to sample %d: %v", name, start, err)
			}
			left -= t.Shape[0]
		}
	}
	if f.labels != nil {
		f.labels = f.labels[start:]
	}
	f.total = end - start
	return nil
}

// optionText lists the sample options that change statistics.
func optionText(s Sample) string {
	var b strings.Builder
	fmt.Fprintf(&b, "data=%s\nfixed=%s\nlabels=%s\nsamples=%d\nmean=%v\nstd=%v\nlayout=%s\nseed=%d\n",
		strings.Join(s.Data, ","), strings.Join(s.Fixed, ","), s.Labels, s.Samples, s.Mean, s.Std, s.Layout, s.Seed)
	names := make([]string, 0, len(s.Arrays))
	for n := range s.Arrays {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		fmt.Fprintf(&b, "array=%s%v\n", n, s.Arrays[n].Shape)
	}
	return b.String()
}

// inputFiles names each file input with its size in bytes.
func inputFiles(f *sampleFeed) ([]string, error) {
	var out []string
	names := make([]string, 0, len(f.paths))
	for n := range f.paths {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		p := f.paths[n]
		size := int64(-1)
		if fi, err := os.Stat(p); err == nil && !fi.IsDir() {
			size = fi.Size()
		}
		out = append(out, fmt.Sprintf("%s=%s %d", n, p, size))
	}
	return out, nil
}

// modelHash identifies a model: SHA-256 of its file, then of every
// initializer of the main graph (name, type, shape, values) in name order,
// which covers weights kept in external data files beside it.
func modelHash(m *Model) (string, error) {
	path := m.Path()
	f, err := os.Open(path)
	if err != nil {
		return "", fmt.Errorf("hashing model %q: %w", path, err)
	}
	defer f.Close()
	h := sha256.New()
	if _, err := io.Copy(h, f); err != nil {
		return "", fmt.Errorf("hashing model %q: %w", path, err)
	}
	g := m.graph()
	names := make([]string, 0, len(g.Initializers))
	for n := range g.Initializers {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		t := g.Initializers[n]
		fmt.Fprintf(h, "\x00%s\x00%v%v\x00", n, t.DType, t.Shape)
		if ss, ok := t.Data.([]string); ok {
			for _, x := range ss {
				fmt.Fprintf(h, "%d:%s", len(x), x)
			}
			continue
		}
		v := reflect.ValueOf(t.Data)
		if v.Kind() == reflect.Slice && v.Len() > 0 {
			h.Write(unsafe.Slice((*byte)(v.UnsafePointer()), v.Len()*int(v.Type().Elem().Size())))
		}
	}
	return hex.EncodeToString(h.Sum(nil)), nil
}

// MergeOptions tune Merge.
type MergeOptions struct {
	// AllowGaps merges states that leave samples out; the report says so.
	AllowGaps bool
}

// Merge combines states of one model, options, sample and version into
// one, in sample order whatever the order given. names (may be nil) are
// the files the states came from, for messages. States that overlap, or
// (without AllowGaps) leave samples out, are refused naming the files.
// The model must be the one the states were made with (its hash is checked).
func Merge(model *Model, states []*State, names []string, mo MergeOptions) (*State, error) {
	if len(states) == 0 {
		return nil, errors.New("merge: no partial states")
	}
	name := func(i int) string {
		if i < len(names) {
			return names[i]
		}
		return fmt.Sprintf("state %d", i+1)
	}
	first := states[0]
	for i, s := range states[1:] {
		i++
		for _, f := range []struct{ what, a, b string }{{"vitals version", first.Version, s.Version}, {"model", first.ModelHash, s.ModelHash},
			{"options", first.Options, s.Options}, {"input files", strings.Join(first.Inputs, "; "), strings.Join(s.Inputs, "; ")}} {
			if f.a != f.b {
				return nil, fmt.Errorf("%s and %s come from different runs: their %s differ (%s vs %s)", name(0), name(i), f.what, short(f.a), short(f.b))
			}
		}
		if s.Total != first.Total || s.Batch != first.Batch {
			return nil, fmt.Errorf("%s and %s come from different runs: %d samples in batches of %d vs %d in batches of %d", name(0), name(i), first.Total, first.Batch, s.Total, s.Batch)
		}
	}
	if h, err := modelHash(model); err != nil {
		return nil, err
	} else if h != first.ModelHash {
		return nil, fmt.Errorf("model %q is not the model %s was made with (%s): its SHA-256 differs", model.Path(), name(0), first.ModelPath)
	}
	type piece struct {
		r    Range
		file int
	}
	var pieces []piece
	for i, s := range states {
		for _, r := range s.Ranges {
			pieces = append(pieces, piece{r, i})
		}
	}
	sort.SliceStable(pieces, func(a, b int) bool { return pieces[a].r.Start < pieces[b].r.Start })
	gaps := false
	var missing []string
	at := 0
	for _, p := range pieces {
		if p.r.Start < at {
			return nil, fmt.Errorf("%s overlaps another partial: samples %d–%d are in both", name(p.file), p.r.Start, min(at, p.r.End)-1)
		}
		if p.r.Start > at {
			missing = append(missing, fmt.Sprintf("%d–%d", at, p.r.Start-1))
		}
		at = p.r.End
	}
	if at < first.Total {
		missing = append(missing, fmt.Sprintf("%d–%d", at, first.Total-1))
	}
	// a hole between the merged ranges is refused (the state would not be
	// one run's over consecutive samples); samples missing at the ends are
	// checked when a report is made (State.Report), so that neighbouring
	// shards can be merged in stages
	if len(missing) > 0 {
		gaps = mo.AllowGaps
		inner := len(missing)
		if at < first.Total {
			inner--
		}
		if pieces[0].r.Start > 0 {
			inner--
		}
		if inner > 0 && !mo.AllowGaps {
			var files []string
			for i := range states {
				files = append(files, name(i))
			}
			return nil, fmt.Errorf("samples %s of %d are in none of %s (merge with --allow-gaps to report without them)", strings.Join(missing, ", "), first.Total, strings.Join(files, ", "))
		}
	}
	// states in sample order (a state with several ranges sorts by its first)
	order := make([]int, len(states))
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return states[order[a]].Ranges[0].Start < states[order[b]].Ranges[0].Start })
	c := stats.NewCollector(model.model, model.plan)
	out := &State{Version: first.Version, ModelPath: first.ModelPath, ModelHash: first.ModelHash, Options: first.Options,
		Inputs: first.Inputs, Total: first.Total, Batch: first.Batch, Source: first.Source, Gaps: gaps}
	for _, i := range order {
		if err := c.LoadState(states[i].body); err != nil {
			return nil, fmt.Errorf("%s: %w", name(i), err)
		}
		out.Gaps = out.Gaps || states[i].Gaps
		if len(states[i].Files) > 0 {
			out.Files = append(out.Files, states[i].Files...)
		} else {
			out.Files = append(out.Files, name(i))
		}
	}
	for _, p := range pieces {
		if n := len(out.Ranges); n > 0 && out.Ranges[n-1].End == p.r.Start {
			out.Ranges[n-1].End = p.r.End
		} else {
			out.Ranges = append(out.Ranges, p.r)
		}
	}
	var err error
	if out.body, err = c.SaveState(); err != nil {
		return nil, err
	}
	return out, nil
}

func short(s string) string {
	s = strings.ReplaceAll(s, "\n", " ")
	if len(s) > 80 {
		return s[:77] + "..."
	}
	return s
}

// Report runs the health checks on a (merged) state and returns the report
// one run over its samples would have given. model must be the state's.
func (s *State) Report(model *Model, o Options) (*report.Report, error) {
	col, err := s.collected(model, o)
	if err != nil {
		return nil, err
	}
	return col.Report, nil
}

// collected rebuilds the statistics of a state and runs the checks on them.
func (s *State) collected(model *Model, o Options) (*stats.Collected, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	if h, err := modelHash(model); err != nil {
		return nil, err
	} else if h != s.ModelHash {
		return nil, fmt.Errorf("model %q is not the model the partial was made with (%s): its SHA-256 differs", model.Path(), s.ModelPath)
	}
	if n := s.Samples(); n < s.Total && !s.Gaps {
		files := "the partial"
		if len(s.Files) > 0 {
			files = strings.Join(s.Files, ", ")
		}
		return nil, fmt.Errorf("%s cover samples %s of %d only; merge the missing shards in, or merge with --allow-gaps", files, rangesText(s.Ranges), s.Total)
	}
	c := stats.NewCollector(model.model, model.plan)
	if err := c.LoadState(s.body); err != nil {
		return nil, err
	}
	col := c.Finish(s.Source)
	if err := stats.Run(col, stats.Checks, o.Thresholds); err != nil {
		return nil, err
	}
	r := col.Report
	paths := map[string]string{}
	for _, in := range s.Inputs {
		nameAndPath, _, _ := strings.Cut(in, " ") // "NAME=PATH SIZE" (a path with spaces keeps them up to the size)
		if i := strings.LastIndexByte(in, ' '); i > 0 {
			nameAndPath = in[:i]
		}
		n, p, _ := strings.Cut(nameAndPath, "=")
		paths[n] = p
	}
	for i := range r.Input.PerInput {
		if p, ok := paths[r.Input.PerInput[i].Name]; ok {
			r.Input.PerInput[i].Path = p
		}
	}
	if s.Gaps {
		r.Input.Note = fmt.Sprintf("merged with samples missing (--allow-gaps): %d of %d samples, ranges %s", s.Samples(), s.Total, rangesText(s.Ranges))
	}
	return col, nil
}

// CompareStates is Compare for two states (each merged from the shards of
// one model over the same sample): the same per-layer shifts, weight
// changes and compare findings as Compare over the whole sample. What
// needs both models' outputs for the same batch side by side is left out:
// the output agreement (top-1, KL, max |Δ|) and the SQNR of a quantized
// model (the report shows the agreement as not measured). The states must have the
// same options, input files, sample size and batch size.
func CompareStates(old, new *Model, olds, news *State, o Options) (*report.Report, error) {
	if olds.Options != news.Options || strings.Join(olds.Inputs, "; ") != strings.Join(news.Inputs, "; ") || olds.Total != news.Total || olds.Batch != news.Batch {
		return nil, fmt.Errorf("OLD and NEW states are of different samples or options: compare needs both models run on the same sample")
	}
	if olds.Version != news.Version {
		return nil, fmt.Errorf("OLD and NEW states come from different vitals versions (%s, %s)", olds.Version, news.Version)
	}
	oldCol, err := olds.collected(old, o)
	if err != nil {
		return nil, fmt.Errorf("OLD: %w", err)
	}
	newCol, err := news.collected(new, o)
	if err != nil {
		return nil, fmt.Errorf("NEW: %w", err)
	}
	stats.Compare(oldCol, newCol, oldCol.Graph, newCol.Graph, nil)
	return newCol.Report, nil
}

func rangesText(rs []Range) string {
	var p []string
	for _, r := range rs {
		p = append(p, fmt.Sprintf("%d–%d", r.Start, r.End-1))
	}
	return strings.Join(p, ", ")
}

// The partial file format (version 1), all integers little-endian:
//
//	magic    8 bytes  "VTLSTATE"
//	version  uint32   1
//	length   uint64   bytes of the payload that follows
//	payload           header fields, then the stats sections
//	checksum 32 bytes SHA-256 of magic, version, length and payload
//
// The payload is a sequence of varint-length-prefixed fields (stats.Enc):
// vitals version, model path, model SHA-256 (hex), options text, input
// files, total samples, batch size, source, ranges (count, then start and
// end), merged files, gaps flag, and the stats sections (stats.Parts).
const (
	stateMagic   = "VTLSTATE"
	stateVersion = 1
)

// Encode returns the state in the partial file format.
func (s *State) Encode() []byte {
	e := &stats.Enc{}
	e.String(s.Version)
	e.String(s.ModelPath)
	e.String(s.ModelHash)
	e.String(s.Options)
	e.Uvarint(uint64(len(s.Inputs)))
	for _, in := range s.Inputs {
		e.String(in)
	}
	e.Varint(int64(s.Total))
	e.Varint(int64(s.Batch))
	e.String(s.Source)
	e.Uvarint(uint64(len(s.Ranges)))
	for _, r := range s.Ranges {
		e.Varint(int64(r.Start))
		e.Varint(int64(r.End))
	}
	e.Uvarint(uint64(len(s.Files)))
	for _, f := range s.Files {
		e.String(f)
	}
	e.Bool(s.Gaps)
	e.Bytes(s.body)
	var b bytes.Buffer
	b.WriteString(stateMagic)
	binary.Write(&b, binary.LittleEndian, uint32(stateVersion))
	binary.Write(&b, binary.LittleEndian, uint64(len(e.B)))
	b.Write(e.B)
	sum := sha256.Sum256(b.Bytes())
	b.Write(sum[:])
	return b.Bytes()
}

// DecodeState reads a state in the partial file format; name is used in errors.
func DecodeState(b []byte, name string) (*State, error) {
	bad := func(format string, a ...any) (*State, error) {
		return nil, fmt.Errorf("%s: %s", name, fmt.Sprintf(format, a...))
	}
	if len(b) < 20+32 || string(b[:8]) != stateMagic {
		return bad("not a vitals partial state (no %q header)", stateMagic)
	}
	if v := binary.LittleEndian.Uint32(b[8:]); v != stateVersion {
		return bad("partial format version %d; this vitals reads version %d", v, stateVersion)
	}
	n := binary.LittleEndian.Uint64(b[12:])
	if n != uint64(len(b)-20-32) {
		return bad("truncated or padded: the header says %d payload bytes, the file has %d", n, len(b)-20-32)
	}
	if sum := sha256.Sum256(b[:len(b)-32]); !bytes.Equal(sum[:], b[len(b)-32:]) {
		return bad("checksum mismatch: the file is damaged")
	}
	d := &stats.Dec{B: b[20 : len(b)-32]}
	s := &State{Version: d.String(), ModelPath: d.String(), ModelHash: d.String(), Options: d.String()}
	for i, k := 0, d.Len(1); i < k && d.Err == nil; i++ {
		s.Inputs = append(s.Inputs, d.String())
	}
	s.Total, s.Batch = int(d.Varint()), int(d.Varint())
	s.Source = d.String()
	for i, k := 0, d.Len(2); i < k && d.Err == nil; i++ {
		s.Ranges = append(s.Ranges, Range{int(d.Varint()), int(d.Varint())})
	}
	for i, k := 0, d.Len(1); i < k && d.Err == nil; i++ {
		s.Files = append(s.Files, d.String())
	}
	s.Gaps = d.Bool()
	s.body = d.Bytes()
	if d.Err != nil {
		return bad("%v", d.Err)
	}
	if len(d.B) != 0 {
		return bad("%d bytes after the state", len(d.B))
	}
	if len(s.Ranges) == 0 {
		return bad("covers no samples")
	}
	return s, nil
}

// WriteFile writes the state to path atomically (a temporary file renamed).
func (s *State) WriteFile(path string) error {
	return report.WriteFileAtomic(path, func(w io.Writer) error {
		_, err := w.Write(s.Encode())
		return err
	})
}

// ReadState reads a partial state file.
func ReadState(path string) (*State, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("partial %q: %w", path, err)
	}
	return DecodeState(b, fmt.Sprintf("partial %q", path))
}
