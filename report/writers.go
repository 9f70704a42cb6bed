package report

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
)

// Figure is one plot rendered in memory: its file name under --out
// ("depth-profile.png", "histograms-01.png", …) and its PNG bytes.
type Figure struct {
	File string
	PNG  []byte
}

// Assets is everything a writer gets besides the report: the figures
// rendered in memory (in figure order; none when no plots were drawn), the
// notes that say which figures were not drawn or were cut short and why, and
// the options of the terminal writer.
type Assets struct {
	Figures []Figure
	Notes   []string
	Color   bool // ANSI colour for severities (only when stdout is a terminal)
	All     bool // every ranked layer instead of the top 10
}

// figureNames returns the file names of a's figures.
func (a Assets) figureNames() []string {
	n := make([]string, len(a.Figures))
	for i, f := range a.Figures {
		n[i] = f.File
	}
	return n
}

// Format is one output format: its --format name, the one-line help the
// command shows, the file it is written to under --out ("" for none) and
// the writer. Every writer has the same signature.
type Format struct {
	Name  string
	Help  string
	File  string
	Write func(w io.Writer, r *Report, a Assets) error
	// Files: the writer refers to figure files next to its own file, so the
	// format needs --out (Markdown and HTML).
	Files bool
}

// Formats is the one table of output formats, in the order the help lists
// them. With --out, report.json and the plots are written whatever the
// format.
var Formats = []Format{
	{Name: "text", Help: "ranked findings and a per-layer table, on stdout", Write: WriteText},
	{Name: "json", Help: "the JSON contract for CI, on stdout", File: "report.json", Write: WriteJSON},
	{Name: "markdown", Help: "report.md beside the PNG plots under --out for a code review, the text summary on stdout", File: "report.md", Write: WriteMarkdown, Files: true},
	{Name: "html", Help: "one self-contained report.html with the plots embedded under --out, the text summary on stdout", File: "report.html", Write: WriteHTML, Files: true},
}

// LookupFormat returns the format called name.
func LookupFormat(name string) (Format, bool) {
	for _, f := range Formats {
		if f.Name == name {
			return f, true
		}
	}
	return Format{}, false
}

// FormatNames lists the format names in table order.
func FormatNames() []string {
	n := make([]string, len(Formats))
	for i, f := range Formats {
		n[i] = f.Name
	}
	return n
}

// FormatHelp is the --format help text made from the table: each name with
// its help in parentheses.
func FormatHelp() string {
	parts := make([]string, len(Formats))
	for i, f := range Formats {
		parts[i] = f.Name + " (" + f.Help + ")"
	}
	return "report format: " + strings.Join(parts, ", ")
}

// WriteFileAtomic writes path through a temporary file in the same folder
// that is renamed into place once fill has succeeded and the file is closed,
// so that a reader (or an interrupted run) never sees a half-written file.
// The file gets mode 0644. On error the temporary file is removed and the
// error names path.
func WriteFileAtomic(path string, fill func(w io.Writer) error) (err error) {
	f, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	defer func() {
		if err != nil {
			f.Close()
			os.Remove(f.Name())
			err = fmt.Errorf("writing %s: %w", path, err)
		}
	}()
	if err = fill(f); err != nil {
		return err
	}
	if err = f.Chmod(0o644); err != nil {
		return err
	}
	if err = f.Close(); err != nil {
		return err
	}
	return os.Rename(f.Name(), path)
}
