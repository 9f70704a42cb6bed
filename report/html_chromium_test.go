package report_test

import (
	"bytes"
	"context"
	"encoding/json"
	"image/png"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/vitals-health/vitals/plots"
	"github.com/vitals-health/vitals/report"
)

// chromiumPath finds a Chromium binary or skips the test.
func chromiumPath(t *testing.T) string {
	t.Helper()
	if _, err := os.Stat("/usr/bin/chromium"); err == nil {
		return "/usr/bin/chromium"
	}
	if p, err := exec.LookPath("chromium"); err == nil {
		return p
	}
	t.Skip("chromium not installed: apt-get install chromium to run the HTML rendering test")
	return ""
}

// runChromium loads url headless with a fresh profile and no network
// services, with the extra flag (--dump-dom or --screenshot=…), and returns
// stdout and stderr.
func runChromium(t *testing.T, bin, url string, extra ...string) (string, string) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()
	args := []string{"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
		"--disable-background-networking", "--disable-component-update", "--disable-sync",
		"--user-data-dir=" + t.TempDir(), "--enable-logging=stderr", "--v=0", "--window-size=1280,1600"}
	args = append(append(args, extra...), url)
	cmd := exec.CommandContext(ctx, bin, args...)
	var out, errb bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errb
	if err := cmd.Run(); err != nil {
		t.Fatalf("chromium: %v\n%s", err, errb.String())
	}
	return out.String(), errb.String()
}

// pageErrors returns the console lines Chromium logged for the page: every
// console message ("CONSOLE" lines; the report logs nothing on purpose) and
// uncaught exceptions.
func pageErrors(stderr string) []string {
	var bad []string
	for _, l := range strings.Split(stderr, "\n") {
		if strings.Contains(l, ":CONSOLE") || strings.Contains(l, "Uncaught") {
			bad = append(bad, l)
		}
	}
	return bad
}

// TestPageErrorsDetectsBrokenScript makes sure the console check can fail.
func TestPageErrorsDetectsBrokenScript(t *testing.T) {
	bin := chromiumPath(t)
	page := filepath.Join(t.TempDir(), "broken.html")
	if err := os.WriteFile(page, []byte(`<!DOCTYPE html><html><body><p>x</p><script>noSuchFunction();</script></body></html>`), 0o644); err != nil {
		t.Fatal(err)
	}
	_, stderr := runChromium(t, bin, "file://"+page, "--dump-dom")
	if len(pageErrors(stderr)) == 0 {
		t.Fatalf("an uncaught ReferenceError was not detected; stderr:\n%s", stderr)
	}
}

func TestHTMLRendersInChromium(t *testing.T) {
	bin := chromiumPath(t)
	b, err := os.ReadFile(filepath.Join("testdata", "sample-compare.json"))
	if err != nil {
		t.Fatal(err)
	}
	var r report.Report
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	if d := os.Getenv("VITALS_HTML_OUT"); d != "" {
		dir = d
	}
	assets, err := plots.Render(&r, plots.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if err := plots.WriteFiles(dir, assets); err != nil {
		t.Fatal(err)
	}
	page := filepath.Join(dir, "report.html")
	var hb bytes.Buffer
	if err := report.WriteHTML(&hb, &r, assets); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(page, hb.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}

	dom, stderr := runChromium(t, bin, "file://"+page, "--dump-dom")
	if bad := pageErrors(stderr); len(bad) > 0 {
		t.Errorf("console output from the page:\n%s", strings.Join(bad, "\n"))
	}
	if n := strings.Count(dom, `<tr class="layer`); n != len(r.Layers) {
		t.Errorf("rendered DOM has %d layer rows, want %d", n, len(r.Layers))
	}
	if !strings.Contains(dom, `data-sort-ready="yes"`) || !strings.Contains(dom, `title="sort by std"`) {
		t.Error("the sorting script did not run")
	}

	// Sort the layer table by std (column 4) through the #sort= hash and
	// check the rendered order is ascending.
	dom, stderr = runChromium(t, bin, "file://"+page+"#sort=layers:4", "--dump-dom")
	if bad := pageErrors(stderr); len(bad) > 0 {
		t.Errorf("console output while sorting:\n%s", strings.Join(bad, "\n"))
	}
	if !strings.Contains(dom, `aria-sort="ascending"`) {
		t.Error("no column marked as sorted")
	}
	table := dom[strings.Index(dom, `id="layers"`):]
	table = table[:strings.Index(table, "</table>")]
	var stds []float64
	for _, row := range regexp.MustCompile(`(?s)<tr class="layer.*?</tr>`).FindAllString(table, -1) {
		cells := regexp.MustCompile(`data-v="([^"]*)"`).FindAllStringSubmatch(row, -1)
		v, err := strconv.ParseFloat(cells[1][1], 64)
		if err != nil {
			t.Fatalf("std cell %q: %v", cells[1][1], err)
		}
		stds = append(stds, v)
	}
	if len(stds) != len(r.Layers) {
		t.Fatalf("%d sorted rows", len(stds))
	}
	for i := 1; i < len(stds); i++ {
		if stds[i] < stds[i-1] {
			t.Fatalf("not sorted by std: %v", stds)
		}
	}

	shot := filepath.Join(dir, "shot.png")
	_, stderr = runChromium(t, bin, "file://"+page, "--screenshot="+shot)
	if bad := pageErrors(stderr); len(bad) > 0 {
		t.Errorf("console output during the screenshot:\n%s", strings.Join(bad, "\n"))
	}
	f, err := os.Open(shot)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	img, err := png.Decode(f)
	if err != nil {
		t.Fatal(err)
	}
	if img.Bounds().Dx() != 1280 {
		t.Errorf("screenshot %v", img.Bounds())
	}
}
