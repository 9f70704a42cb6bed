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
	"sort"
	"strconv"
	"strings"

	"github.com/vitals-health/vitals/plots"
	"github.com/vitals-health/vitals/report"
)

// writer renders the report in one format; dir is the --out folder ("" if none)
// and images the plot files written there.
type writer struct {
	help  string
	write func(w io.Writer, r *report.Report, c *common, dir string, images []string) error
	file  string // file name under --out
}

// writers is the one table of output formats; it also produces the --format help.
var writers = map[string]writer{
	"text": {help: "ranked findings and a per-layer table for the terminal", file: "",
		write: func(w io.Writer, r *report.Report, c *common, _ string, _ []string) error {
			return report.WriteText(w, r, report.TextOptions{Color: isTerminal(w), All: c.all})
		}},
	"json": {help: "the JSON contract, for CI", file: "report.json",
		write: func(w io.Writer, r *report.Report, _ *common, _ string, _ []string) error {
			return report.WriteJSON(w, r)
		}},
	"markdown": {help: "report.md with links to the PNG plots, for a code review", file: "report.md",
		write: func(w io.Writer, r *report.Report, _ *common, _ string, images []string) error {
			return report.WriteMarkdown(w, r, images)
		}},
	"html": {help: "one self-contained report.html with the plots embedded", file: "report.html",
		write: func(w io.Writer, r *report.Report, _ *common, dir string, images []string) error {
			data := map[string][]byte{}
			for _, im := range images {
				b, err := os.ReadFile(filepath.Join(dir, im))
				if err != nil {
					return err
				}
				data[im] = b
			}
			return report.WriteHTML(w, r, data)
		}},
}

func formatNames() []string {
	var n []string
	for k := range writers {
		n = append(n, k)
	}
	sort.Strings(n)
	return n
}

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

// writeAtomic writes a file via a temporary file in the same folder and a rename,
// so an interrupted run never leaves a half-written report.
func writeAtomic(path string, fill func(w io.Writer) error) error {
	f, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return err
	}
	tmp := f.Name()
	if err := fill(f); err != nil {
		f.Close()
		os.Remove(tmp)
		return err
	}
	if err := f.Close(); err != nil {
		os.Remove(tmp)
		return err
	}
	if err := os.Chmod(tmp, 0o644); err != nil {
		os.Remove(tmp)
		return err
	}
	return os.Rename(tmp, path)
}

// emit writes the report to stdout in --format and, with --out, report.json,
// the plots and the chosen format's file.
func emit(r *report.Report, c *common, stdout io.Writer) error {
	wr := writers[c.format]
	var images []string
	if c.out != "" {
		var err error
		images, err = plots.WriteAll(c.out, r)
		if err != nil {
			return fmt.Errorf("writing plots to %q: %w", c.out, err)
		}
		if err := writeAtomic(filepath.Join(c.out, "report.json"), func(w io.Writer) error { return report.WriteJSON(w, r) }); err != nil {
			return fmt.Errorf("writing %q: %w", c.out, err)
		}
		if wr.file != "" && wr.file != "report.json" {
			if err := writeAtomic(filepath.Join(c.out, wr.file), func(w io.Writer) error { return wr.write(w, r, c, c.out, images) }); err != nil {
				return fmt.Errorf("writing %s: %w", wr.file, err)
			}
		}
	}
	var buf bytes.Buffer
	switch c.format {
	case "markdown", "html":
		// the file is under --out; stdout gets the terminal summary
		if err := report.WriteText(&buf, r, report.TextOptions{Color: isTerminal(stdout), All: c.all}); err != nil {
			return err
		}
		fmt.Fprintf(&buf, "\nReport written to %s\n", filepath.Join(c.out, wr.file))
	default:
		if err := wr.write(&buf, r, c, c.out, images); err != nil {
			return err
		}
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
