package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"

	flag "github.com/spf13/pflag"

	"github.com/vitals-health/vitals/check"
)

// checkPartial is `vitals check --shard K/N --partial FILE`: one part of
// the sample, its mergeable state written to FILE (docs/shards.md).
func checkPartial(ctx context.Context, c *common, m *check.Model, o check.Sample, th map[string]float64, stderr io.Writer) (int, error) {
	if c.partial == "" {
		return 2, userErr("--shard writes a partial state, not a report: give --partial FILE")
	}
	sh := check.Shard{K: 0, N: 1}
	if c.shard != "" {
		var err error
		if sh, err = check.ParseShard(c.shard); err != nil {
			return 2, userErr("%v", err)
		}
	}
	if c.out != "" || c.fs.Changed("format") {
		return 2, userErr("--partial writes a state, not a report: --format and --out belong to vitals merge")
	}
	pg := newProgress(stderr)
	st, err := check.Partial(ctx, m, o, sh, c.options(th, pg), version)
	pg.finish()
	if err != nil {
		return 2, inputErr{err}
	}
	if err := st.WriteFile(c.partial); err != nil {
		return 2, err
	}
	r := st.Ranges[0]
	fmt.Fprintf(stderr, "vitals: shard %d/%d: samples %d–%d of %d written to %s\n", sh.K, sh.N, r.Start, r.End-1, st.Total, c.partial)
	return 0, nil
}

const mergeUsage = "vitals merge FILE... [--partial OUT | --format FORMAT --out DIR] [--fail-on ...] [--allow-gaps] [--model PATH]"

// cmdMerge combines partial states (check --shard ... --partial) into one
// report, or with --partial into one state for a later merge.
func cmdMerge(args []string, stdout, stderr io.Writer) (int, error) {
	c, mf := mergeFlags(stderr)
	fs := c.fs
	allowGaps, modelPath := &mf.allowGaps, &mf.model
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0, nil
		}
		return 2, userErr("%v", err)
	}
	if fs.NArg() == 0 {
		fs.Usage()
		return 2, userErr("merge takes one or more partial files")
	}
	if err := c.validate(); err != nil {
		return 2, err
	}
	th, err := loadThresholds(c.config)
	if err != nil {
		return 2, err
	}
	if err := (&check.Options{Thresholds: th}).Validate(); err != nil {
		return 2, userErr("--config %q: %v", c.config, err)
	}
	var states []*check.State
	for _, p := range fs.Args() {
		st, err := check.ReadState(p)
		if err != nil {
			return 2, inputErr{err}
		}
		states = append(states, st)
	}
	if *modelPath == "" {
		*modelPath = states[0].ModelPath
	}
	if _, err := os.Stat(*modelPath); err != nil {
		return 2, userErr("merge needs the model the partials were made with: %v (give --model PATH)", err)
	}
	ms, err := loadModels(c, *modelPath)
	if err != nil {
		return 2, err
	}
	merged, err := check.Merge(ms[0], states, fs.Args(), check.MergeOptions{AllowGaps: *allowGaps})
	if err != nil {
		return 2, inputErr{err}
	}
	if c.partial != "" {
		if err := merged.WriteFile(c.partial); err != nil {
			return 2, err
		}
		fmt.Fprintf(stderr, "vitals: merged %d partials (%d of %d samples) into %s\n", len(states), merged.Samples(), merged.Total, c.partial)
		return 0, nil
	}
	r, err := merged.Report(ms[0], check.Options{Thresholds: th})
	if err != nil {
		return 2, inputErr{err}
	}
	r.Version = version
	if err := emit(r, c, stdout); err != nil {
		return 2, err
	}
	return exitCode(r, c.failOn), nil
}

// mergeOnly are the flags merge has beyond the report flags of common.
type mergeOnly struct {
	allowGaps bool
	model     string
}

// mergeFlags is merge's flag set.
func mergeFlags(stderr io.Writer) (*common, *mergeOnly) {
	c := &common{fs: flag.NewFlagSet("merge", flag.ContinueOnError)}
	mf := &mergeOnly{}
	fs := c.fs
	fs.SetOutput(stderr)
	fs.StringVar(&c.partial, "partial", "", "write the merged state to OUT (for a later merge) instead of a report")
	fs.BoolVar(&mf.allowGaps, "allow-gaps", false, "merge even when samples are missing; the report says which")
	fs.StringVar(&mf.model, "model", "", "the model file, when it is no longer at the path the partials recorded (its SHA-256 must match)")
	fs.StringVar(&c.out, "out", "", "write report.json, the PNG plots and, for --format markdown or html, report.md or report.html into this folder")
	fs.StringVar(&c.format, "format", "text", "report format (as for vitals check)")
	fs.StringVar(&c.failOn, "fail-on", "error", "exit 1 when a finding is at or above this severity: warning|error")
	fs.StringVar(&c.config, "config", "", "thresholds file (JSON object or \"name.param: value\" lines)")
	fs.BoolVar(&c.all, "all", false, "list every layer with findings, not just the top 10, and every finding of a layer (not folded per check)")
	fs.StringVar(&c.maxMem, "max-memory", "", "memory budget in bytes for loading the model (default: half the physical memory; 0: none)")
	fs.BoolVar(&c.debug, "debug", false, "show Go stack traces of internal errors")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "Usage: "+mergeUsage)
		fs.PrintDefaults()
	}
	return c, mf
}

// isState reports whether path is a partial state file (by its magic bytes).
func isState(path string) bool {
	f, err := os.Open(path)
	if err != nil {
		return false
	}
	defer f.Close()
	b := make([]byte, 8)
	n, _ := io.ReadFull(f, b)
	return n == 8 && string(b) == "VTLSTATE"
}

// compareStates is `vitals compare OLD.part NEW.part`: two merged states,
// each with the model it recorded.
func compareStates(c *common, th map[string]float64, stdout io.Writer) (int, error) {
	var states []*check.State
	for _, p := range []string{c.fs.Arg(0), c.fs.Arg(1)} {
		st, err := check.ReadState(p)
		if err != nil {
			return 2, inputErr{fmt.Errorf("compare takes two models or two partial states: %w", err)}
		}
		states = append(states, st)
	}
	ms, err := loadModels(c, states[0].ModelPath, states[1].ModelPath)
	if err != nil {
		return 2, err
	}
	r, err := check.CompareStates(ms[0], ms[1], states[0], states[1], check.Options{Thresholds: th})
	if err != nil {
		return 2, inputErr{err}
	}
	r.Version = version
	if err := emit(r, c, stdout); err != nil {
		return 2, err
	}
	return exitCode(r, c.failOn), nil
}
