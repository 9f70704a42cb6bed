package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"github.com/vitals-health/vitals/stats"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/vitals-health/vitals/plots"
	"github.com/vitals-health/vitals/report"
)

// writers is the one table of output formats (report.Formats), by name.
var writers = func() map[string]report.Format {
	m := map[string]report.Format{}
	for _, f := range report.Formats {
		m[f.Name] = f
	}
	return m
}()

func formatNames() []string { return report.FormatNames() }

func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	fi, err := f.Stat()
	return err == nil && fi.Mode()&os.ModeCharDevice != 0 && os.Getenv("NO_COLOR") == ""
}

// prepareOut creates the output folder and proves it is writable before any work starts.
func prepareOut(dir string) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("--out %q: %w", dir, err)
	}
	f, err := os.CreateTemp(dir, ".vitals-probe-*")
	if err != nil {
		return fmt.Errorf("--out %q is not writable: %w", dir, err)
	}
	name := f.Name()
	f.Close()
	return os.Remove(name)
}

// emit writes the report to stdout in --format and, with --out, report.json,
// the plots and the chosen format's file.
func emit(r *report.Report, c *common, stdout io.Writer) error {
	wr := writers[c.format]
	a := report.Assets{Color: isTerminal(stdout), All: c.all}
	if c.out != "" {
		var err error
		if a, err = plots.Render(r, plots.Options{All: c.all}); err != nil {
			return err
		}
		a.Color, a.All = isTerminal(stdout), c.all
		if err := plots.WriteFiles(c.out, a); err != nil {
			return fmt.Errorf("writing plots to %q: %w", c.out, err)
		}
		if err := report.WriteFileAtomic(filepath.Join(c.out, "report.json"), func(w io.Writer) error { return report.WriteJSON(w, r, a) }); err != nil {
			return err
		}
		if wr.File != "" && wr.File != "report.json" {
			if err := report.WriteFileAtomic(filepath.Join(c.out, wr.File), func(w io.Writer) error { return wr.Write(w, r, a) }); err != nil {
				return err
			}
		}
	}
	var buf bytes.Buffer
	if wr.Files {
		// the file is under --out; stdout gets the terminal summary
		if err := report.WriteText(&buf, r, a); err != nil {
			return err
		}
		fmt.Fprintf(&buf, "\nReport written to %s\n", filepath.Join(c.out, wr.File))
	} else if err := wr.Write(&buf, r, a); err != nil {
		return err
	}
	_, err := stdout.Write(buf.Bytes())
	return err
}

// loadThresholds reads --config: a JSON object {"dead-units.warning": 0.3, ...}
// or lines "dead-units.warning: 0.3" (a small YAML subset; # starts a comment).
func loadThresholds(path string) (map[string]float64, error) {
	if path == "" {
		return nil, nil
	}
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, userErr("--config: %v", err)
	}
	th, err := ParseThresholds(b)
	if err == nil {
		// unknown names fail here, before a model is loaded or a batch runs
		err = stats.ValidateThresholds(th, stats.CompareChecks...)
	}
	if err != nil {
		return nil, userErr("--config %q: %v", path, err)
	}
	return th, nil
}

// ParseThresholds parses the --config formats (see loadThresholds). Names
// must be non-empty and values finite (NaN would silently disable a check).
func ParseThresholds(b []byte) (map[string]float64, error) {
	th := map[string]float64{}
	trim := bytes.TrimSpace(b)
	if len(trim) > 0 && trim[0] == '{' {
		if err := json.Unmarshal(trim, &th); err != nil {
			return nil, err
		}
		for k := range th {
			if strings.TrimSpace(k) == "" {
				return nil, errors.New("empty threshold name")
			}
		}
		return th, nil
	}
	for i, line := range strings.Split(string(b), "\n") {
		if j := strings.IndexByte(line, '#'); j >= 0 {
			line = line[:j]
		}
		line = strings.TrimSpace(line)
		if line == "" {
			continue
		}
		k, v, ok := strings.Cut(line, ":")
		if !ok {
			return nil, fmt.Errorf("line %d: want \"name.param: value\", got %q", i+1, line)
		}
		f, err := strconv.ParseFloat(strings.TrimSpace(v), 64)
		if err != nil || math.IsNaN(f) || math.IsInf(f, 0) {
			return nil, fmt.Errorf("line %d: %q is not a finite number", i+1, strings.TrimSpace(v))
		}
		name := strings.TrimSpace(strings.Trim(strings.TrimSpace(k), `"'`))
		if name == "" {
			return nil, fmt.Errorf("line %d: empty threshold name", i+1)
		}
		th[name] = f
	}
	return th, nil
}
