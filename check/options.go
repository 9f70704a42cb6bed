package check

import (
	"bufio"
	"fmt"
	"os"
	"strconv"
	"strings"
	"sync/atomic"
	"time"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/stats"
	"github.com/vitals-health/vitals/tensor"
)

// Sample describes the data a model is run on. With no Data and no Arrays,
// every float input gets synthetic Gaussian samples (Seed, Samples or 64).
// Error messages name the vitals command's flags (--data, --fixed,
// --batch, ...): each is the field of the same name here.
type Sample struct {
	// Data are "PATH" (the model has one input, or an .npz whose keys name
	// the inputs) or "INPUT=PATH", one per input: a .npy, .npz, .pb (ONNX
	// TensorProto) or .csv file with the sample axis first, or a folder of
	// images for a rank-4 image input.
	Data []string
	// Arrays are samples already in memory, by input name, the sample axis
	// first (alone or beside Data for other inputs). They are read, not
	// changed.
	Arrays map[string]*tensor.Tensor
	// Labels is an optional .npy of integer class ids, one per sample: it
	// adds accuracy and cross-entropy to the output statistics.
	Labels string
	// Samples caps the number of samples used (0: all; 64 for synthetic input).
	Samples int
	// Batch is the number of samples per run of the model (0: the model's
	// fixed batch size, or chosen from the size of its node outputs after
	// one sample, 1 to 32).
	Batch int
	// Mean and Std normalise images scaled to [0, 1] per channel,
	// x' = (x − mean[c]) / std[c]; Layout is the image tensor layout the
	// model takes, "nchw" (default) or "nhwc".
	Mean, Std []float64
	Layout    string
	// Seed seeds the synthetic Gaussian input (input i uses Seed+i).
	Seed int64
	// Fixed are inputs that do not vary per sample, fed the same value in
	// every batch: "NAME=FILE" (.npy or .pb), "NAME=VALUE" (a number, for
	// the input's declared shape) or "NAME=zeros". When the input's declared
	// shape carries the model's symbolic batch dimension (the "batch" of
	// [2, batch, 128]), the value has size 1 on that axis (or lacks it) and
	// is repeated along it to the batch size.
	Fixed []string
	// Carry are "OUT=IN" pairs: output OUT of each sample is input IN of the
	// next, in file order (the state of a streaming model). IN starts from
	// its Fixed value, zeros without one. Carrying runs one sample a batch.
	Carry []string
}

// Options tune a run.
type Options struct {
	// Thresholds override the checks' defaults by "check.param" name (see
	// stats.DefaultThresholds); an unknown name is an error before any
	// batch runs.
	Thresholds map[string]float64
	// MemoryBudget caps, in bytes, any one tensor the run allocates and a
	// batch of every input (0: none; DefaultMemoryBudget is what the CLI
	// uses). Over it a run stops with an error naming the tensor.
	MemoryBudget int64
	// Progress, when set, is called after every batch on the goroutine
	// that called Check or Compare.
	Progress func(Progress)
	// Note, when set, receives what the user should know about how the
	// sample was fed (samples left out for a fixed batch size, a model
	// fixed to one sample a batch), one sentence per call.
	Note func(string)
	// Outputs, when set, sees every batch's graph outputs by name (valid
	// during the call only) and the batch's sample count, after the batch
	// has run; an error stops the run. Compare calls it for NEW's batches.
	Outputs func(outs map[string]*tensor.Tensor, samples int) error
	// Gradients, when set, adds a backward pass to Check (gradients.go);
	// Compare ignores it.
	Gradients *Gradients

	// recycled, when set (by this package's tests), counts the values whose
	// storage went back to the pool within a batch.
	recycled *atomic.Int64
	// tap, when set, also sees every node's outputs before the statistics
	// do (compare's SQNR between float and quantized models, stats/sqnr.go)
	tap func(n *loader.Node, outs []*tensor.Tensor)
}

// Progress is how far a run has come.
type Progress struct {
	Model   string        // the model's path
	Done    int           // samples run so far
	Total   int           // samples to run (−1: not known ahead)
	Elapsed time.Duration // since the model's first batch was read
}

// Validate checks the options that can be checked before anything runs:
// every threshold name is one a check has, and the budget is not negative.
// Check and Compare call it first; a caller may call it earlier.
func (o *Options) Validate() error {
	if o.MemoryBudget < 0 {
		return fmt.Errorf("memory budget %d is negative", o.MemoryBudget)
	}
	if o.Gradients != nil {
		if err := o.Gradients.validate(); err != nil {
			return err
		}
	}
	return validThresholds(o.Thresholds)
}

// validThresholds rejects names no check has (compare's checks included:
// their thresholds are valid for Check and Compare alike, as in --config),
// and values that are not finite, before any batch runs.
func validThresholds(th map[string]float64) error {
	return stats.ValidateThresholds(th, stats.CompareChecks...)
}

// validate checks the sample description and fills in defaults.
func (s *Sample) validate() error {
	s.Layout = strings.ToLower(s.Layout)
	if s.Layout == "" {
		s.Layout = "nchw"
	}
	if s.Layout != "nchw" && s.Layout != "nhwc" {
		return fmt.Errorf("--layout must be nchw or nhwc, got %q", s.Layout)
	}
	if s.Samples < 0 {
		return fmt.Errorf("--samples must be ≥ 0")
	}
	if s.Batch < 0 {
		return fmt.Errorf("--batch must be positive, got %d", s.Batch)
	}
	return nil
}

// fallbackBudget is the memory budget when /proc/meminfo cannot be read.
const fallbackBudget = 8 << 30

// DefaultMemoryBudget is half the physical memory (MemTotal in
// /proc/meminfo), or 8 GiB where that cannot be read.
func DefaultMemoryBudget() int64 {
	f, err := os.Open("/proc/meminfo")
	if err != nil {
		return fallbackBudget
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		fields := strings.Fields(sc.Text())
		if len(fields) >= 2 && fields[0] == "MemTotal:" {
			kb, err := strconv.ParseInt(fields[1], 10, 64)
			if err != nil || kb <= 0 {
				break
			}
			return kb * 1024 / 2
		}
	}
	return fallbackBudget
}
