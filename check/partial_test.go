package check_test

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"google.golang.org/protobuf/proto"

	"github.com/vitals-health/vitals/check"
	"github.com/vitals-health/vitals/internal/modeltest"
	"github.com/vitals-health/vitals/loader/onnxpb"
	"github.com/vitals-health/vitals/report"
)

// sameReport compares two reports as their JSON: every string, bool and
// integer-valued number exactly (counts, histogram counts, unit flags,
// findings), other numbers to 1e-12 relative (sums taken in another order,
// the tolerance the shard design asks for). It names the first difference.
func sameReport(t *testing.T, want, got *report.Report) {
	t.Helper()
	var docs [2]any
	for i, r := range []*report.Report{want, got} {
		var buf bytes.Buffer
		if err := report.WriteJSON(&buf, r, report.Assets{}); err != nil {
			t.Fatal(err)
		}
		docs[i] = modeltest.DecodeJSON(t, buf.Bytes())
	}
	maxRel, err := modeltest.SameJSON(docs[0], docs[1], 1e-12)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("largest relative difference of a float: %.3g", maxRel)
}

type shardCase struct {
	name, model, data string
	batch             int
}

var shardCases = []shardCase{
	{"demo", demoModel, demoData, 64},
	{"demo-odd-batch", demoModel, demoData, 37},
	{"resnet_tiny", refModel, refData, 1},
	{"if_rate", "../testdata/controlflow/if_rate.onnx", "input=../testdata/controlflow/if_rate.input.npy", 2},
	{"loop_rnn", "../testdata/controlflow/loop_rnn.onnx", "../testdata/controlflow/loop_rnn.input.npy", 3},
	{"qop", "../testdata/quant/qop.onnx", "", 4},
	{"fp16", "../testdata/quant/fp16.onnx", "", 5},
	// attention entropy, residual-stream histograms and outlier counts (partTransformer)
	{"decoder_causal", "../testdata/transformer/decoder_causal.onnx", "../testdata/transformer/decoder_causal.input.npy", 5},
	{"massive_activation", "../testdata/transformer/massive_activation.onnx", "../testdata/transformer/massive_activation.input.npy", 4},
}

// partials runs every shard of n in process and returns their states.
func partials(t *testing.T, m *check.Model, s check.Sample, n int) []*check.State {
	t.Helper()
	var out []*check.State
	for k := 0; k < n; k++ {
		st, err := check.Partial(context.Background(), m, s, check.Shard{K: k, N: n}, check.Options{}, "test")
		if err != nil {
			t.Fatalf("shard %d/%d: %v", k, n, err)
		}
		out = append(out, st)
	}
	return out
}

// The report of merged shards equals the single run's (same batch size)
// for N = 1, 3, 7, merged at once in reverse order, left to right in
// pairs, and right to left through files: the reference is vitals' own
// single run, whose numbers other tests hold against PyTorch and ONNX
// Runtime (run_test.go, stats/reference_test.go).
func TestShardsMergeToSingleRun(t *testing.T) {
	for _, tc := range shardCases {
		t.Run(tc.name, func(t *testing.T) {
			m := load(t, tc.model)
			s := check.Sample{Batch: tc.batch, Samples: 0}
			if tc.name == "if_rate" {
				s.Fixed = []string{"sr=16000"}
			}
			if tc.data != "" {
				s.Data = []string{tc.data}
			} else {
				s.Samples = 40
			}
			single, err := check.Check(context.Background(), m, s, check.Options{})
			if err != nil {
				t.Fatal(err)
			}
			for _, n := range []int{1, 3, 7} {
				if batches := (single.Input.Samples + tc.batch - 1) / tc.batch; n > batches {
					n = batches // a small sample: as many shards as it has batches
				}
				parts := partials(t, m, s, n)
				// all at once, given in reverse
				rev := make([]*check.State, len(parts))
				for i := range parts {
					rev[len(parts)-1-i] = parts[i]
				}
				all, err := check.Merge(m, rev, nil, check.MergeOptions{})
				if err != nil {
					t.Fatalf("N=%d: %v", n, err)
				}
				r, err := all.Report(m, check.Options{})
				if err != nil {
					t.Fatal(err)
				}
				t.Run(fmt.Sprintf("N=%d/all", n), func(t *testing.T) { sameReport(t, single, r) })
				// ((0+1)+2)+... and ...+(5+6) through encoded files
				left := parts[0]
				for _, p := range parts[1:] {
					if left, err = check.Merge(m, []*check.State{left, p}, nil, check.MergeOptions{}); err != nil {
						t.Fatal(err)
					}
				}
				right := parts[n-1]
				for i := n - 2; i >= 0; i-- {
					enc, err := check.DecodeState(right.Encode(), "right")
					if err != nil {
						t.Fatal(err)
					}
					if right, err = check.Merge(m, []*check.State{parts[i], enc}, nil, check.MergeOptions{}); err != nil {
						t.Fatal(err)
					}
				}
				for name, st := range map[string]*check.State{"left": left, "right": right} {
					r, err := st.Report(m, check.Options{})
					if err != nil {
						t.Fatal(err)
					}
					t.Run(fmt.Sprintf("N=%d/%s", n, name), func(t *testing.T) { sameReport(t, single, r) })
				}
			}
		})
	}
}

// Mismatched or incomplete partials are refused naming the files; with
// AllowGaps the report says which samples it lacks; a damaged file fails its checksum.
func TestMergeRefusesMismatch(t *testing.T) {
	m := load(t, demoModel)
	s := check.Sample{Data: []string{demoData}, Batch: 64}
	parts := partials(t, m, s, 3)
	names := []string{"a.part", "b.part", "c.part"}
	if _, err := check.Merge(m, []*check.State{parts[0], parts[2]}, names[:2], check.MergeOptions{}); err == nil || !strings.Contains(err.Error(), "a.part, b.part") || !strings.Contains(err.Error(), "samples 640–1343") {
		t.Errorf("gap: %v", err)
	}
	two, err := check.Merge(m, []*check.State{parts[1], parts[0]}, names[:2], check.MergeOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := two.Report(m, check.Options{}); err == nil || !strings.Contains(err.Error(), "cover samples 0–1343 of 2000 only") {
		t.Errorf("missing end: %v", err)
	}
	if _, err := check.Merge(m, []*check.State{parts[0], parts[1], parts[1]}, names, check.MergeOptions{}); err == nil || !strings.Contains(err.Error(), "c.part overlaps") {
		t.Errorf("overlap: %v", err)
	}
	s2 := s
	s2.Samples = 1999
	other := partials(t, m, s2, 3)
	if _, err := check.Merge(m, []*check.State{parts[0], other[1]}, names[:2], check.MergeOptions{}); err == nil || !strings.Contains(err.Error(), "a.part and b.part come from different runs") {
		t.Errorf("options: %v", err)
	}
	healthy := load(t, "../testdata/demo/spindle-healthy.onnx")
	hp := partials(t, healthy, s, 3)
	if _, err := check.Merge(m, []*check.State{parts[0], hp[1]}, names[:2], check.MergeOptions{}); err == nil || !strings.Contains(err.Error(), "their model differ") {
		t.Errorf("model: %v", err)
	}
	if _, err := check.Merge(healthy, parts, names, check.MergeOptions{}); err == nil || !strings.Contains(err.Error(), "SHA-256 differs") {
		t.Errorf("wrong model file: %v", err)
	}
	g, err := check.Merge(m, []*check.State{parts[0], parts[2]}, names[:2], check.MergeOptions{AllowGaps: true})
	if err != nil {
		t.Fatal(err)
	}
	r, err := g.Report(m, check.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if r.Input.Samples != 640+656 || !strings.Contains(r.Input.Note, "1296 of 2000 samples, ranges 0–639, 1344–1999") {
		t.Errorf("gaps report: %d samples, note %q", r.Input.Samples, r.Input.Note)
	}
	dir := t.TempDir()
	p := filepath.Join(dir, "x.part")
	if err := parts[0].WriteFile(p); err != nil {
		t.Fatal(err)
	}
	b, _ := os.ReadFile(p)
	b[len(b)/2] ^= 1
	os.WriteFile(p, b, 0o644)
	if _, err := check.ReadState(p); err == nil || !strings.Contains(err.Error(), "checksum") || !strings.Contains(err.Error(), p) {
		t.Errorf("damaged: %v", err)
	}
	if _, err := check.Partial(context.Background(), m, check.Sample{Data: []string{demoData}}, check.Shard{K: 0, N: 2}, check.Options{}, "test"); err == nil || !strings.Contains(err.Error(), "--batch") {
		t.Errorf("no batch: %v", err)
	}
	if _, err := check.Partial(context.Background(), m, s, check.Shard{K: 0, N: 40}, check.Options{}, "test"); err == nil || !strings.Contains(err.Error(), "too few") {
		t.Errorf("too many shards: %v", err)
	}
}

// Compare of two merged states (each model's shards merged) equals Compare
// over the whole sample, except the output agreement, which needs both
// models' outputs side by side and is not measured from states.
func TestCompareStatesMatchesCompare(t *testing.T) {
	old, new := load(t, "../testdata/demo/spindle-healthy.onnx"), load(t, demoModel)
	s := check.Sample{Data: []string{demoData}, Labels: "../testdata/demo/conditions.npy", Batch: 64}
	want, err := check.Compare(context.Background(), old, new, s, check.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if want.Compare == nil || want.Compare.Agreement == nil {
		t.Fatal("Compare measured no agreement")
	}
	want.Compare.Agreement = nil
	merged := func(m *check.Model, n int) *check.State {
		st, err := check.Merge(m, partials(t, m, s, n), nil, check.MergeOptions{})
		if err != nil {
			t.Fatal(err)
		}
		return st
	}
	got, err := check.CompareStates(old, new, merged(old, 3), merged(new, 7), check.Options{})
	if err != nil {
		t.Fatal(err)
	}
	sameReport(t, want, got)
	s2 := s
	s2.Samples = 1000
	if _, err := check.CompareStates(old, new, merged(old, 3), func() *check.State {
		st, err := check.Merge(new, partials(t, new, s2, 2), nil, check.MergeOptions{})
		if err != nil {
			t.Fatal(err)
		}
		return st
	}(), check.Options{}); err == nil || !strings.Contains(err.Error(), "different samples") {
		t.Errorf("different samples: %v", err)
	}
}

// A model whose weights live in an external data file: a partial made with
// one version of the weights is refused against the model with the file
// changed (the .onnx file itself unchanged), naming the model.
func TestMergeRefusesChangedExternalWeights(t *testing.T) {
	b, err := os.ReadFile(demoModel)
	if err != nil {
		t.Fatal(err)
	}
	var mp onnxpb.ModelProto
	if err := proto.Unmarshal(b, &mp); err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	var raw []byte
	for _, tp := range mp.Graph.Initializer {
		if tp.GetName() == "fc2.weight" {
			raw = tp.RawData
			if raw == nil {
				t.Skip("fc2.weight is not stored as raw data")
			}
			tp.RawData = nil
			tp.DataLocation = onnxpb.TensorProto_EXTERNAL.Enum()
			tp.ExternalData = []*onnxpb.StringStringEntryProto{{Key: proto.String("location"), Value: proto.String("weights.bin")},
				{Key: proto.String("offset"), Value: proto.String("0")}, {Key: proto.String("length"), Value: proto.String(fmt.Sprint(len(raw)))}}
		}
	}
	if raw == nil {
		t.Fatal("no fc2.weight in the demo model")
	}
	out, err := proto.Marshal(&mp)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, "m.onnx")
	os.WriteFile(path, out, 0o644)
	os.WriteFile(filepath.Join(dir, "weights.bin"), raw, 0o644)
	m := load(t, path)
	s := check.Sample{Data: []string{demoData}, Batch: 64}
	parts := partials(t, m, s, 2)
	if _, err := check.Merge(m, parts, nil, check.MergeOptions{}); err != nil {
		t.Fatalf("same weights: %v", err)
	}
	changed := append([]byte(nil), raw...)
	changed[0] ^= 0x40
	os.WriteFile(filepath.Join(dir, "weights.bin"), changed, 0o644)
	m2 := load(t, path)
	if _, err := check.Merge(m2, parts, nil, check.MergeOptions{}); err == nil || !strings.Contains(err.Error(), "SHA-256 differs") || !strings.Contains(err.Error(), path) {
		t.Errorf("changed external weights: %v", err)
	}
}
