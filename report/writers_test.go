package report

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// The format table is complete and its help names every format.
func TestFormatsTable(t *testing.T) {
	seen := map[string]bool{}
	for _, f := range Formats {
		if f.Name == "" || f.Help == "" || f.Write == nil || seen[f.Name] {
			t.Errorf("bad or duplicate format entry %+v", f)
		}
		seen[f.Name] = true
		if f.Files && f.File == "" {
			t.Errorf("%s needs --out but names no file", f.Name)
		}
		if !strings.Contains(FormatHelp(), f.Name+" ("+f.Help+")") {
			t.Errorf("help lacks %s: %s", f.Name, FormatHelp())
		}
		if g, ok := LookupFormat(f.Name); !ok || g.Name != f.Name {
			t.Errorf("LookupFormat(%q) = %v, %v", f.Name, g.Name, ok)
		}
	}
	if _, ok := LookupFormat("pdf"); ok {
		t.Error("LookupFormat accepted an unknown format")
	}
	for _, want := range []string{"text", "json", "markdown", "html"} {
		if !seen[want] {
			t.Errorf("format %s missing", want)
		}
	}
}

// Every writer writes the same report through the same signature.
func TestEveryFormatWrites(t *testing.T) {
	r := sampleCheckReport()
	a := Assets{Figures: []Figure{{File: "depth-profile.png", PNG: []byte("png")}}, Notes: []string{"No weight-scale figure: none."}}
	for _, f := range Formats {
		var b bytes.Buffer
		if err := f.Write(&b, r, a); err != nil {
			t.Fatalf("%s: %v", f.Name, err)
		}
		if b.Len() == 0 {
			t.Errorf("%s wrote nothing", f.Name)
		}
		if f.Name != "json" && !strings.Contains(b.String(), "No weight-scale figure") {
			t.Errorf("%s does not show the figure notes", f.Name)
		}
	}
}

// WriteFileAtomic leaves the old file in place and no temporary file when
// filling fails, and replaces it when filling succeeds.
func TestWriteFileAtomic(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "report.md")
	if err := os.WriteFile(path, []byte("old"), 0o644); err != nil {
		t.Fatal(err)
	}
	boom := errors.New("boom")
	err := WriteFileAtomic(path, func(w io.Writer) error {
		io.WriteString(w, "half")
		return boom
	})
	if !errors.Is(err, boom) || !strings.Contains(err.Error(), path) {
		t.Errorf("error %v, want boom naming %s", err, path)
	}
	if b, _ := os.ReadFile(path); string(b) != "old" {
		t.Errorf("file is %q after a failed write, want the old content", b)
	}
	if err := WriteFileAtomic(path, func(w io.Writer) error { _, err := io.WriteString(w, "new"); return err }); err != nil {
		t.Fatal(err)
	}
	if b, _ := os.ReadFile(path); string(b) != "new" {
		t.Errorf("file is %q, want new", b)
	}
	if st, _ := os.Stat(path); st.Mode().Perm() != 0o644 {
		t.Errorf("mode %v, want 0644", st.Mode().Perm())
	}
	if left, _ := filepath.Glob(filepath.Join(dir, ".*")); len(left) > 0 {
		t.Errorf("temporary files left: %v", left)
	}
}

// The number formatters show unknown and non-finite values the same way.
func TestFormatters(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	for _, tc := range []struct{ got, want string }{
		{FmtNum(nil), Unknown}, {FmtNum(&nan), Unknown}, {FmtNum(&inf), Unknown},
		{FmtNum(Num(12345.678)), "1.235e+04"}, {FmtNum(Num(0.012345)), "0.01235"}, {FmtNum(Num(0)), "0"},
		{FmtPct(Num(0.125)), "12.5"}, {FmtPercent(Num(0.125)), "12.5%"}, {FmtPercent(nil), Unknown},
	} {
		if tc.got != tc.want {
			t.Errorf("got %q, want %q", tc.got, tc.want)
		}
	}
}

// The text report folds findings of one check, severity and layer (one per
// attention head, say) into their first line with a count; --all (Assets.All)
// lists each. A regression test: a 12-layer decoder once printed 132 note
// lines, one per head.
func TestTextFoldsAlikeFindings(t *testing.T) {
	r := sampleCheckReport()
	r.Findings = nil
	for h := 0; h < 3; h++ {
		r.Findings = append(r.Findings, Finding{Check: "attention-uniform", Severity: Info, Node: "/blocks.1/Softmax",
			Message: fmt.Sprintf("block 1, head %d: uniform", h)})
	}
	r.Findings = append(r.Findings, Finding{Check: "attention-uniform", Severity: Info, Node: "/blocks.2/Softmax", Message: "block 2, head 0: uniform"})
	r.Ranking = nil
	for _, all := range []bool{false, true} {
		var b bytes.Buffer
		if err := WriteText(&b, r, Assets{All: all}); err != nil {
			t.Fatal(err)
		}
		out := b.String()
		lines := strings.Count(out, "INFO attention-uniform")
		folded := strings.Contains(out, "block 1, head 0: uniform (+2 more like it on this layer")
		if !all && (lines != 2 || !folded || strings.Contains(out, "head 1")) {
			t.Errorf("folded: %d note lines (want 2), first line with the count %v:\n%s", lines, folded, out)
		}
		if all && (lines != 4 || folded) {
			t.Errorf("--all: %d note lines (want 4), folded %v:\n%s", lines, folded, out)
		}
	}
}
