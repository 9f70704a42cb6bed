package check_test

import (
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// A module outside this repository requires github.com/vitals-health/vitals
// (through a replace directive to this checkout), imports package check and
// runs a check on the demo model: the module path is importable and the
// public API is enough to do the job. The module cache is local, so the
// build needs no network (GOPROXY=off).
func TestOutsideModule(t *testing.T) {
	if testing.Short() {
		t.Skip("builds a module with the go tool")
	}
	goTool, err := exec.LookPath("go")
	if err != nil {
		t.Skip("the go tool is not on PATH")
	}
	root, err := filepath.Abs("..")
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	gomod := "module example.com/outside\n\ngo 1.26\n\nrequire github.com/vitals-health/vitals v0.0.0\n\nreplace github.com/vitals-health/vitals => " + root + "\n"
	prog := `package main

import (
	"context"
	"fmt"
	"os"

	"github.com/vitals-health/vitals/check"
)

func main() {
	m, err := check.Load(os.Args[1], check.LoadOptions{MemoryBudget: check.DefaultMemoryBudget()})
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(2)
	}
	r, err := check.Check(context.Background(), m, check.Sample{Data: []string{os.Args[2]}}, check.Options{})
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(2)
	}
	errs := 0
	for _, f := range r.Findings {
		if f.Severity.Level() >= 2 {
			errs++
		}
	}
	fmt.Printf("samples=%d layers=%d errors=%d\n", r.Input.Samples, len(r.Layers), errs)
}
`
	// the dependencies' checksums are this repository's (no lookup in the
	// checksum database)
	sum, err := os.ReadFile(filepath.Join(root, "go.sum"))
	if err != nil {
		t.Fatal(err)
	}
	for name, body := range map[string]string{"go.mod": gomod, "main.go": prog, "go.sum": string(sum)} {
		if err := os.WriteFile(filepath.Join(dir, name), []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	model, _ := filepath.Abs(demoModel)
	data, _ := filepath.Abs(demoData)
	cmd := exec.Command(goTool, "run", ".", model, data)
	cmd.Dir = dir
	cmd.Env = append(os.Environ(), "GOFLAGS=-mod=mod", "GOPROXY=off", "GOWORK=off")
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("go run in the outside module: %v\n%s", err, out)
	}
	// the over-driven demo model: 2000 readings, 7 layers, dead units at two
	// layers reported as errors (as ExampleCheck shows)
	if got := strings.TrimSpace(string(out)); got != "samples=2000 layers=7 errors=2" {
		t.Errorf("outside module printed %q", got)
	}
}
