package probe_test

// Conformance against the ONNX project's published operator test data
// (onnx/backend/test/data: node/, pytorch-converted/, pytorch-operator/, simple/, light/).
// Source: the ONNX project, read from ../shared/onnx-conformance or $VITALS_CONFORMANCE.

import (
	"bufio"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

func conformanceDir(t *testing.T) string {
	if d := os.Getenv("VITALS_CONFORMANCE"); d != "" {
		return d
	}
	for _, d := range []string{"../../shared/onnx-conformance", "../shared/onnx-conformance"} {
		if fi, err := os.Stat(d); err == nil && fi.IsDir() {
			return d
		}
	}
	return ""
}

// knownFailures reads testdata/conformance-known-failures.txt: "test_name  reason" per line.
func knownFailures(t *testing.T) map[string]string {
	out := map[string]string{}
	f, err := os.Open("../testdata/conformance-known-failures.txt")
	if err != nil {
		return out
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		line := strings.TrimSpace(sc.Text())
		if line == "" || strings.HasPrefix(line, "#") {
			continue
		}
		name, reason, _ := strings.Cut(line, " ")
		out[name] = strings.TrimSpace(reason)
	}
	return out
}

// tolerances per test where the default rtol 1e-3 / atol 1e-5 is too tight (reason given).
var looser = map[string][2]float64{}

func TestConformance(t *testing.T) {
	root := conformanceDir(t)
	if root == "" {
		t.Skip("ONNX conformance data not found: put it at ../shared/onnx-conformance or set VITALS_CONFORMANCE")
	}
	known := knownFailures(t)
	only := os.Getenv("VITALS_CONFORMANCE_ONLY") // substring filter for local work
	for _, folder := range []string{"node", "pytorch-converted", "pytorch-operator", "simple", "light"} {
		var cases []string
		if folder == "light" {
			ms, _ := filepath.Glob(filepath.Join(root, folder, "*.onnx"))
			cases = ms
		} else {
			ds, _ := filepath.Glob(filepath.Join(root, folder, "test_*"))
			cases = ds
		}
		sort.Strings(cases)
		var pass, fail, skip, knownFail int
		var failures []string
		for _, c := range cases {
			name := strings.TrimSuffix(filepath.Base(c), ".onnx")
			if only != "" && !strings.Contains(name, only) {
				continue
			}
			err := runCase(folder, c)
			var se skipError
			switch {
			case err == nil:
				pass++
				if _, ok := known[name]; ok {
					t.Errorf("%s/%s passes but is listed in conformance-known-failures.txt", folder, name)
				}
			case errors.As(err, &se):
				skip++
				if os.Getenv("VITALS_CONFORMANCE_VERBOSE") != "" {
					t.Logf("skip %s/%s: %v", folder, name, err)
				}
			default:
				if reason, ok := known[name]; ok {
					knownFail++
					_ = reason
					continue
				}
				fail++
				failures = append(failures, fmt.Sprintf("%s/%s: %v", folder, name, err))
			}
		}
		for _, f := range failures {
			t.Error(f)
		}
		msg := fmt.Sprintf("conformance %s: %d passed, %d failed, %d skipped", folder, pass, fail, skip)
		if knownFail > 0 {
			msg += fmt.Sprintf(" (%d known failures listed with reasons)", knownFail)
		}
		fmt.Println(msg)
	}
}

type skipError struct{ error }

func runCase(folder, path string) (err error) {
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("panic: %v", r)
		}
	}()
	modelPath := path
	if folder != "light" {
		modelPath = filepath.Join(path, "model.onnx")
	}
	m, err := loader.LoadModel(modelPath)
	if err != nil {
		if strings.Contains(err.Error(), "unsupported data type") {
			return skipError{err}
		}
		return err
	}
	plan, err := probe.Compile(m)
	if err != nil {
		var ue *probe.UnsupportedError
		if errors.As(err, &ue) {
			return skipError{err}
		}
		return err
	}
	if folder == "light" {
		// The light models' expected outputs were computed from an all-ones input
		// (weights are constants, so outputs are uniform).
		ins := map[string]*tensor.Tensor{}
		for _, vi := range m.Graph.Inputs {
			shape := append([]int{}, vi.Shape...)
			for i, d := range shape {
				if d < 0 {
					shape[i] = 1
				}
			}
			x := tensor.New(tensor.Float32, shape)
			for i := range x.F32() {
				x.F32()[i] = 1
			}
			ins[vi.Name] = x
		}
		want, _, err := loader.DecodeTensorFile(strings.TrimSuffix(path, ".onnx") + "_output_0.pb")
		if err != nil {
			return err
		}
		got, err := plan.Run(ins, nil)
		if err != nil {
			return err
		}
		return compare(got[m.Graph.Outputs[0].Name], want, 1e-3, 1e-5)
	}
	sets, _ := filepath.Glob(filepath.Join(path, "test_data_set_*"))
	if len(sets) == 0 {
		return errors.New("no test_data_set")
	}
	for _, set := range sets {
		ins := map[string]*tensor.Tensor{}
		for i := 0; ; i++ {
			p := filepath.Join(set, fmt.Sprintf("input_%d.pb", i))
			if _, err := os.Stat(p); err != nil {
				break
			}
			x, name, err := loader.DecodeTensorFile(p)
			if err != nil {
				return skipError{err}
			}
			if name == "" && i < len(m.Graph.Inputs) {
				name = m.Graph.Inputs[i].Name
			}
			// inputs are listed in graph-input order, which may include defaults
			if i < len(m.Graph.Inputs) {
				name = m.Graph.Inputs[i].Name
			}
			ins[name] = x
		}
		got, err := plan.Run(ins, nil)
		if err != nil {
			if strings.Contains(err.Error(), "unsupported data type") {
				return skipError{err}
			}
			return err
		}
		for i, o := range m.Graph.Outputs {
			p := filepath.Join(set, fmt.Sprintf("output_%d.pb", i))
			want, _, err := loader.DecodeTensorFile(p)
			if err != nil {
				return skipError{err}
			}
			tol := [2]float64{1e-3, 1e-5}
			if l, ok := looser[filepath.Base(path)]; ok {
				tol = l
			}
			if err := compare(got[o.Name], want, tol[0], tol[1]); err != nil {
				return fmt.Errorf("output %q: %w", o.Name, err)
			}
		}
	}
	return nil
}

func compare(got, want *tensor.Tensor, rtol, atol float64) error {
	if got == nil {
		return errors.New("no output")
	}
	if !tensor.SameShape(got.Shape, want.Shape) {
		return fmt.Errorf("shape %v, want %v", got.Shape, want.Shape)
	}
	if got.DType != want.DType {
		return fmt.Errorf("type %v, want %v", got.DType, want.DType)
	}
	if want.DType == tensor.String {
		g, w := got.Data.([]string), want.Data.([]string)
		for i := range w {
			if g[i] != w[i] {
				return fmt.Errorf("element %d: %q, want %q", i, g[i], w[i])
			}
		}
		return nil
	}
	for i := 0; i < want.Size(); i++ {
		g, w := got.Float64At(i), want.Float64At(i)
		if math.IsNaN(w) {
			if !math.IsNaN(g) {
				return fmt.Errorf("element %d: %g, want NaN", i, g)
			}
			continue
		}
		if math.IsInf(w, 0) {
			if g != w {
				return fmt.Errorf("element %d: %g, want %g", i, g, w)
			}
			continue
		}
		if math.Abs(g-w) > atol+rtol*math.Abs(w) {
			return fmt.Errorf("element %d: %g, want %g (rtol %g, atol %g)", i, g, w, rtol, atol)
		}
	}
	return nil
}
