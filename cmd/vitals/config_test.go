package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/stats"
)

// An unknown name in --config fails with exit 2 before anything runs: the
// model path here does not exist, so an error naming the threshold (not the
// model) shows that the config was judged first.
func TestConfigUnknownNameFailsFirst(t *testing.T) {
	cfg := filepath.Join(t.TempDir(), "th.yaml")
	if err := os.WriteFile(cfg, []byte("dead-unit.warning: 0.3\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	code, _, stderr := runCLI(t, "check", "no-such-model.onnx", "--data", "no-such.npy", "--config", cfg)
	if code != 2 || !strings.Contains(stderr, `"dead-unit.warning"`) || strings.Contains(stderr, "no-such-model") {
		t.Fatalf("exit %d, stderr %q: want 2 naming the unknown threshold before the model is opened", code, stderr)
	}
}

// `vitals --help` prints every check's whole first sentence, which is the
// summary the check's Doc starts with.
func TestHelpPrintsWholeSummaries(t *testing.T) {
	_, _, stderr := runCLI(t, "--help")
	for _, c := range append(append([]*stats.Check{}, stats.Checks...), stats.CompareChecks...) {
		s := stats.HelpLine(c.Doc)
		if !strings.Contains(stderr, c.Name) || !strings.Contains(stderr, s) {
			t.Errorf("help lacks %s: %q", c.Name, s)
		}
	}
}
