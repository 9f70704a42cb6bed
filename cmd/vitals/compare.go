package main

import (
	"io"

	"github.com/vitals-health/vitals/check"
)

// cmdCompare runs OLD and NEW on the same batches in the same order and diffs
// their statistics into NEW's report (check.Compare); given two merged
// partial states instead of models, it diffs those (check.CompareStates).
func cmdCompare(args []string, stdout, stderr io.Writer) (int, error) {
	c, o, th, help, err := parseCommand("compare", "vitals compare OLD.onnx NEW.onnx --data PATH [flags], or OLD.part NEW.part (merged partial states)", 2, args, stderr)
	if help {
		return 0, nil
	}
	if err != nil {
		return 2, err
	}
	if isState(c.fs.Arg(0)) || isState(c.fs.Arg(1)) {
		return compareStates(c, th, stdout)
	}
	ctx, stop := signalContext()
	defer stop()
	m, err := loadModels(c, c.fs.Arg(0), c.fs.Arg(1))
	if err != nil {
		return 2, err
	}
	pg := newProgress(stderr)
	r, err := check.Compare(ctx, m[0], m[1], o, c.options(th, pg))
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
