// Command vitals checks the health of a trained ONNX model on a sample of
// real data, layer by layer, on the CPU.
//
//	vitals check MODEL.onnx [--data PATH | --data INPUT=PATH ...] [flags]
//	vitals compare OLD.onnx NEW.onnx --data PATH [flags]
//	vitals check MODEL.onnx --data PATH --batch B --shard K/N --partial FILE
//	vitals merge FILE... [--partial OUT] [flags]
//	vitals ops [--model FILE]
//
// Exit codes: 0 healthy (or findings below --fail-on), 1 findings at or above
// --fail-on, 2 usage or input error, 130 interrupted.
package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"runtime/debug"
	"runtime/pprof"
	"strconv"
	"strings"

	flag "github.com/spf13/pflag"

	"github.com/vitals-health/vitals/check"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/stats"
)

// version is set at build time with -ldflags "-X main.version=..."; "dev" otherwise.
var version = "dev"

const usage = `vitals: layer-by-layer health of a trained ONNX model on real data, on the CPU.

Usage:
  vitals check MODEL.onnx [--data PATH | --data INPUT=PATH ...] [flags]
  vitals compare OLD.onnx NEW.onnx --data PATH [flags]
  vitals check MODEL.onnx --data PATH --batch B --shard K/N --partial FILE
  vitals merge FILE... [--partial OUT | --format ... --out DIR] [flags]
  vitals compare OLD.part NEW.part [flags]   (two merged partial states)
  vitals ops [--model FILE]

Run "vitals check --help" for the flags. Checks:
`

func main() {
	// VITALS_CPUPROFILE=FILE writes a CPU profile of the whole command (a
	// developer aid for the benchmarks under bench/).
	if f := os.Getenv("VITALS_CPUPROFILE"); f != "" {
		if w, err := os.Create(f); err == nil {
			if pprof.StartCPUProfile(w) == nil {
				code := run(os.Args[1:], os.Stdout, os.Stderr)
				pprof.StopCPUProfile()
				w.Close()
				os.Exit(code)
			}
			w.Close()
		}
	}
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

// run is main without os.Exit, for tests. Unexpected panics become exit code 2
// with a one-line message (the stack only with --debug).
func run(args []string, stdout, stderr io.Writer) (code int) {
	debugOn := false
	for _, a := range args {
		if a == "--debug" {
			debugOn = true
		}
	}
	defer func() {
		if r := recover(); r != nil {
			msg := strings.Join(strings.Fields(fmt.Sprint(r)), " ")
			if debugOn {
				fmt.Fprintf(stderr, "vitals: internal error: %s\n%s\n", msg, debug.Stack())
			} else {
				fmt.Fprintf(stderr, "vitals: internal error: %s (rerun with --debug for the stack)\n", msg)
			}
			code = 2
		}
	}()
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		fmt.Fprint(stderr, usage)
		for _, c := range stats.Checks {
			fmt.Fprintf(stderr, "  %-26s %s\n", c.Name, stats.HelpLine(c.Doc))
		}
		fmt.Fprintln(stderr, "compare adds:")
		for _, c := range stats.CompareChecks {
			fmt.Fprintf(stderr, "  %-26s %s\n", c.Name, stats.HelpLine(c.Doc))
		}
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	var err error
	switch args[0] {
	case "check":
		code, err = cmdCheck(args[1:], stdout, stderr)
	case "compare":
		code, err = cmdCompare(args[1:], stdout, stderr)
	case "merge":
		code, err = cmdMerge(args[1:], stdout, stderr)
	case "ops":
		code, err = cmdOps(args[1:], stdout, stderr)
	case "version", "--version":
		fmt.Fprintln(stdout, "vitals", version)
		return 0
	default:
		fmt.Fprintf(stderr, "vitals: unknown command %q (want check, compare, merge or ops)\n", args[0])
		return 2
	}
	if err != nil {
		if errors.Is(err, context.Canceled) {
			fmt.Fprintln(stderr, "vitals: interrupted; no report written")
			return 130
		}
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		fmt.Fprintln(stderr, "vitals:", err)
		return 2
	}
	return code
}

// common holds the flags check and compare share.
type common struct {
	fs      *flag.FlagSet
	data    []string
	fixed   []string
	carry   []string
	labels  string
	samples int
	batch   int
	out     string
	format  string
	failOn  string
	config  string
	all     bool
	mean    string
	std     string
	layout  string
	seed    int64
	debug   bool
	maxMem  string
	budget  int64 // --max-memory in bytes, after validate
	// check only: --shard K/N and --partial FILE (shards.go)
	shard, partial string
	// check only: the backward pass (--gradients, --loss, --targets, --lr)
	gradients bool
	loss      string
	targets   string
	lr        float64
}

// inputErr marks errors caused by the user's files or flags (exit code 2).
type inputErr struct{ error }

func (e inputErr) Unwrap() error { return e.error }

func userErr(format string, args ...any) error { return inputErr{fmt.Errorf(format, args...)} }

func newCommon(name string, stderr io.Writer) *common {
	c := &common{fs: flag.NewFlagSet(name, flag.ContinueOnError)}
	fs := c.fs
	fs.SetOutput(stderr)
	fs.StringArrayVar(&c.data, "data", nil, "sample: a .npy/.npz/.pb/.csv file or a folder of images; INPUT=PATH per input for several inputs (repeatable)")
	fs.StringArrayVar(&c.fixed, "fixed", nil, "an input that does not vary per sample, the same in every batch: NAME=FILE (.npy/.pb), NAME=VALUE or NAME=zeros; repeated along the model's batch axis (repeatable)")
	fs.StringArrayVar(&c.carry, "carry", nil, "OUT=IN: output OUT of each sample is input IN of the next, in file order (streaming state; runs one sample a batch; repeatable)")
	fs.StringVar(&c.labels, "labels", "", "integer class ids (.npy), one per sample: adds accuracy and cross-entropy")
	fs.IntVar(&c.samples, "samples", 0, "use at most N samples (0: all; 64 for synthetic input)")
	fs.IntVar(&c.batch, "batch", 0, "samples per batch (default: the model's fixed batch size, or chosen from the size of its activations after one sample, 1 to 32)")
	fs.StringVar(&c.out, "out", "", "write report.json, the PNG plots and, for --format markdown or html, report.md or report.html into this folder")
	fs.StringVar(&c.format, "format", "text", report.FormatHelp())
	fs.StringVar(&c.failOn, "fail-on", "error", "exit 1 when a finding is at or above this severity: warning|error")
	fs.StringVar(&c.config, "config", "", "thresholds file (JSON object or \"name.param: value\" lines)")
	fs.BoolVar(&c.all, "all", false, "list every layer with findings, not just the top 10, and every finding of a layer (the text report folds findings of one check on one layer, such as one per attention head, into one line), and draw a histogram page for every layer under --out")
	fs.StringVar(&c.mean, "mean", "", "per-channel mean subtracted from images scaled to [0,1], e.g. 0.485,0.456,0.406")
	fs.StringVar(&c.std, "std", "", "per-channel std images are divided by, e.g. 0.229,0.224,0.225")
	fs.StringVar(&c.layout, "layout", "nchw", "image tensor layout the model wants: nchw|nhwc")
	fs.Int64Var(&c.seed, "seed", 1, "seed of the synthetic Gaussian input")
	fs.BoolVar(&c.debug, "debug", false, "show Go stack traces of internal errors")
	if name == "check" {
		fs.BoolVar(&c.gradients, "gradients", false, "add a backward pass: gradient RMS per layer, gradient and update size per weight (on by default with --labels, --loss, --targets or --lr; --gradients=false turns it off)")
		fs.StringVar(&c.loss, "loss", "cross-entropy", "loss of the backward pass: cross-entropy (against --labels, or the model's own top class) or mse (against --targets)")
		fs.StringVar(&c.targets, "targets", "", "target outputs (.npy, one row per sample) for --loss mse")
		fs.Float64Var(&c.lr, "lr", 0, "learning rate: predicts each weight's plain-SGD update ratio lr·‖dL/dW‖/‖W‖ (rule of thumb about 1e-3)")
	}
	fs.StringVar(&c.maxMem, "max-memory", "", "memory budget in bytes, e.g. 512M or 8G (default: half the physical memory; 0: none); tensors that would exceed it are refused with an error")
	if name == "check" {
		fs.StringVar(&c.shard, "shard", "", "K/N: run only the K-th (from 0) of N contiguous parts of the sample, cut at batch boundaries (needs --batch and --partial)")
		fs.StringVar(&c.partial, "partial", "", "write the mergeable state of the run to FILE instead of a report (vitals merge combines such files)")
	}
	return c
}

// sample is the sample the flags describe.
func (c *common) sample() (check.Sample, error) {
	o := check.Sample{Data: c.data, Fixed: c.fixed, Carry: c.carry, Labels: c.labels, Samples: c.samples, Batch: c.batch, Layout: strings.ToLower(c.layout), Seed: c.seed}
	var err error
	if o.Mean, err = parseFloats(c.mean); err != nil {
		return o, userErr("--mean: %v", err)
	}
	if o.Std, err = parseFloats(c.std); err != nil {
		return o, userErr("--std: %v", err)
	}
	if o.Layout != "nchw" && o.Layout != "nhwc" {
		return o, userErr("--layout must be nchw or nhwc, got %q", c.layout)
	}
	if c.samples < 0 {
		return o, userErr("--samples must be ≥ 0")
	}
	if c.batch < 0 {
		return o, userErr("--batch must be positive, got %d", c.batch)
	}
	return o, nil
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

// options are the run options the flags give: notes go to stderr after the
// progress line pg shows there.
func (c *common) options(th map[string]float64, pg *progress) check.Options {
	return check.Options{
		Thresholds:   th,
		MemoryBudget: c.budget,
		Progress:     pg.update,
		Note:         func(n string) { pg.finish(); fmt.Fprintf(pg.w, "vitals: %s\n", n) },
		Gradients:    c.gradientOptions(),
	}
}

// gradientOptions is the backward pass the check flags ask for (nil: none):
// on with --gradients, or when --labels, --loss, --targets or --lr is given
// and --gradients is not set to false. A shard (--shard) runs no backward
// pass unless asked: gradient sums are not part of a partial state.
func (c *common) gradientOptions() *check.Gradients {
	if c.fs.Lookup("gradients") == nil {
		return nil
	}
	on := c.gradients
	if !c.fs.Changed("gradients") && c.shard == "" {
		on = c.labels != "" || c.fs.Changed("loss") || c.targets != "" || c.lr != 0
	}
	if !on {
		return nil
	}
	return &check.Gradients{Loss: c.loss, Targets: c.targets, LR: c.lr}
}

func (c *common) validate() error {
	var err error
	if c.shard != "" && c.gradients {
		return userErr("--gradients cannot be combined with --shard: gradient sums are not part of a partial state; run the backward pass on one machine (see docs/shards.md)")
	}
	if c.budget, err = memoryBudget(c.maxMem); err != nil {
		return err
	}
	if _, ok := writers[c.format]; !ok {
		return userErr("--format must be one of %s, got %q", strings.Join(formatNames(), ", "), c.format)
	}
	if c.failOn != "warning" && c.failOn != "error" {
		return userErr("--fail-on must be warning or error, got %q", c.failOn)
	}
	if writers[c.format].Files && c.out == "" {
		return userErr("--format %s writes files next to its plots: give --out DIR", c.format)
	}
	if c.out != "" {
		if err := prepareOut(c.out); err != nil {
			return inputErr{err}
		}
	}
	return nil
}

// exitCode applies --fail-on to the findings.
func exitCode(r *report.Report, failOn string) int {
	level := 2
	if failOn == "warning" {
		level = 1
	}
	for _, f := range r.Findings {
		if f.Severity.Level() >= level {
			return 1
		}
	}
	return 0
}

// parseCommand parses a subcommand's flags and arguments (nArgs model files),
// validates them and reads --config; help is true after --help.
func parseCommand(name, usage string, nArgs int, args []string, stderr io.Writer) (c *common, o check.Sample, th map[string]float64, help bool, err error) {
	c = newCommon(name, stderr)
	c.fs.Usage = func() {
		fmt.Fprintln(stderr, "Usage: "+usage)
		c.fs.PrintDefaults()
	}
	if err = c.fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return c, o, nil, true, nil
		}
		return c, o, nil, false, userErr("%v", err)
	}
	if c.fs.NArg() != nArgs {
		c.fs.Usage()
		return c, o, nil, false, userErr("%s takes %d model file(s), got %d arguments", name, nArgs, c.fs.NArg())
	}
	if err = c.validate(); err != nil {
		return c, o, nil, false, err
	}
	if o, err = c.sample(); err != nil {
		return c, o, nil, false, err
	}
	if th, err = loadThresholds(c.config); err != nil {
		return c, o, nil, false, err
	}
	// unknown threshold names are refused here, before any model is loaded
	if err = (&check.Options{Thresholds: th}).Validate(); err != nil {
		return c, o, nil, false, userErr("--config %q: %v", c.config, err)
	}
	if err = (&check.Options{Gradients: c.gradientOptions()}).Validate(); err != nil {
		return c, o, nil, false, userErr("%v", err)
	}
	return c, o, th, false, nil
}

func cmdCheck(args []string, stdout, stderr io.Writer) (int, error) {
	c, o, th, help, err := parseCommand("check", "vitals check MODEL.onnx [--data PATH | --data INPUT=PATH ...] [flags]", 1, args, stderr)
	if help {
		return 0, nil
	}
	if err != nil {
		return 2, err
	}
	ctx, stop := signalContext()
	defer stop()
	m, err := loadModels(c, c.fs.Arg(0))
	if err != nil {
		return 2, err
	}
	if c.partial != "" || c.shard != "" {
		return checkPartial(ctx, c, m[0], o, th, stderr)
	}
	pg := newProgress(stderr)
	r, err := check.Check(ctx, m[0], o, c.options(th, pg))
	pg.finish()
	if err != nil {
		return 2, err
	}
	r.Version = version
	if err := emit(r, c, stdout); err != nil {
		return 2, err
	}
	return exitCode(r, c.failOn), nil
}

// loadModels loads and compiles the models the command names and sizes the
// garbage collector to their weights (tuneGC).
func loadModels(c *common, paths ...string) ([]*check.Model, error) {
	var ms []*check.Model
	var weights int64
	for _, p := range paths {
		m, err := check.Load(p, check.LoadOptions{MemoryBudget: c.budget, Debug: c.debug})
		if err != nil {
			return nil, inputErr{err}
		}
		ms = append(ms, m)
		weights += m.WeightBytes()
	}
	tuneGC(weights)
	return ms, nil
}
