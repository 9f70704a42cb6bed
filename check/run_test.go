package check_test

import (
	"bytes"
	"context"
	"errors"
	"strings"
	"sync"
	"testing"

	"github.com/vitals-health/vitals/check"
	"github.com/vitals-health/vitals/report"
)

const (
	demoModel = "../testdata/demo/spindle-overdriven.onnx"
	demoData  = "../testdata/demo/readings.npy"
	// resnet_tiny and its input were written by testdata/gen with torch 1.13
	refModel = "../testdata/ref/resnet_tiny.onnx"
	refData  = "../testdata/ref/resnet_tiny.input.npy"
)

func load(t *testing.T, path string) *check.Model {
	t.Helper()
	m, err := check.Load(path, check.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// jsonOf is the report as the JSON writer renders it, the form in which two
// runs are compared to the last bit.
func jsonOf(t *testing.T, r *report.Report) string {
	t.Helper()
	var b bytes.Buffer
	if err := report.WriteJSON(&b, r, report.Assets{}); err != nil {
		t.Fatal(err)
	}
	return b.String()
}

// Two different checks side by side in one process (run under -race in CI),
// each twice on one shared Model, each give exactly their solo report: a
// run's buffer pool, memory budget and progress belong to it. A third run at the same time, with a budget too
// small for its first hidden layer, fails naming that node while the others,
// without a budget, are unaffected.
func TestConcurrentRunsMatchSolo(t *testing.T) {
	type job struct {
		model, data string
		batch       int
	}
	jobs := []job{{demoModel, demoData, 64}, {refModel, refData, 1}}
	solo := make([]string, len(jobs))
	for i, j := range jobs {
		r, err := check.Check(context.Background(), load(t, j.model), check.Sample{Data: []string{j.data}, Batch: j.batch}, check.Options{})
		if err != nil {
			t.Fatal(err)
		}
		solo[i] = jsonOf(t, r)
	}
	// every job twice, so that runs of the same model overlap too
	jobs = append(jobs, jobs...)
	solo = append(solo, solo...)
	got := make([]string, len(jobs))
	progress := make([]int, len(jobs))
	var budgetErr error
	var wg sync.WaitGroup
	// one Model per file, shared by the two runs of it
	models := map[string]*check.Model{}
	for _, j := range jobs {
		if models[j.model] == nil {
			models[j.model] = load(t, j.model)
		}
	}
	for i, j := range jobs {
		m := models[j.model]
		wg.Add(1)
		go func() {
			defer wg.Done()
			o := check.Options{Progress: func(p check.Progress) { progress[i] = p.Done }}
			r, err := check.Check(context.Background(), m, check.Sample{Data: []string{j.data}, Batch: j.batch}, o)
			if err != nil {
				t.Error(err)
				return
			}
			got[i] = jsonOf(t, r)
		}()
	}
	small := load(t, demoModel)
	wg.Add(1)
	go func() {
		defer wg.Done()
		// 1000 samples × 64 float32 = 256000 bytes at the first hidden layer
		_, budgetErr = check.Check(context.Background(), small, check.Sample{Data: []string{demoData}, Batch: 1000}, check.Options{MemoryBudget: 120 << 10})
	}()
	wg.Wait()
	for i := range jobs {
		if got[i] != solo[i] {
			t.Errorf("%s: the report of the concurrent run differs from the solo run", jobs[i].model)
		}
	}
	if progress[0] != 2000 || progress[1] != 3 || progress[2] != 2000 || progress[3] != 3 {
		t.Errorf("progress reached %v samples, want [2000 3 2000 3]", progress)
	}
	if budgetErr == nil || !strings.Contains(budgetErr.Error(), `"/fc1/Gemm"`) || !strings.Contains(budgetErr.Error(), "256000 bytes") {
		t.Errorf("run over its own budget: %v", budgetErr)
	}
}

// Cancelling the context stops a long run (ten million synthetic samples)
// within a batch or two: Check returns context.Canceled and no report.
func TestCancelStopsRun(t *testing.T) {
	m := load(t, demoModel)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	batches := 0
	o := check.Options{Progress: func(check.Progress) {
		batches++
		if batches == 2 {
			cancel()
		}
	}}
	r, err := check.Check(ctx, m, check.Sample{Samples: 10_000_000, Batch: 32}, o)
	if !errors.Is(err, context.Canceled) || r != nil {
		t.Fatalf("got report %v, error %v; want context.Canceled", r != nil, err)
	}
	if batches > 3 {
		t.Errorf("%d batches ran after the cancel at batch 2", batches-2)
	}
}

// An unknown threshold, a bad layout and a data file that is not there are
// errors before any batch runs.
func TestRefusedBeforeRunning(t *testing.T) {
	m := load(t, demoModel)
	ran := func(check.Progress) { t.Error("a batch ran") }
	for _, c := range []struct {
		sample check.Sample
		opts   check.Options
		want   string
	}{
		{check.Sample{Data: []string{demoData}}, check.Options{Thresholds: map[string]float64{"dead-unit.error": 0.5}}, `unknown threshold "dead-unit.error"`},
		{check.Sample{Data: []string{demoData}, Layout: "chw"}, check.Options{}, "nchw or nhwc"},
		{check.Sample{Data: []string{"no-such.npy"}}, check.Options{}, "no-such.npy"},
		{check.Sample{Data: []string{"nope=" + demoData}}, check.Options{}, `"nope", which is not an input`},
	} {
		c.opts.Progress = ran
		if _, err := check.Check(context.Background(), m, c.sample, c.opts); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%+v: error %v, want %q", c.sample, err, c.want)
		}
	}
}
