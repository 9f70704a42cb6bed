package plots

import (
	"bytes"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"sync"

	"github.com/vitals-health/vitals/report"
)

// DefaultHistogramPages is how many histogram pages Render draws unless
// Options.All is set: 4 pages of 16 panels, the 64 worst-ranked layers. A
// deep model has hundreds of layers (Swin-T: about 60 pages), and drawing
// them all cost seconds; the layers that matter are ranked first anyway.
const DefaultHistogramPages = 4

// Options choose what Render draws.
type Options struct {
	// All draws a histogram page for every layer instead of the first
	// DefaultHistogramPages.
	All bool
	// Workers is how many figures are rendered at once (0: GOMAXPROCS).
	Workers int
}

// job is one figure to render.
type job struct {
	name   string
	render func(io.Writer) error
}

// Render draws every figure of r in memory and returns them in this order:
// depth-profile.png, unit-health.png, histograms-NN.png (at most
// DefaultHistogramPages unless o.All), weights.png and, when r.Compare is
// set, compare-histograms-NN.png and compare-depth-profile.png. The figures
// are rendered o.Workers at a time. For every figure that has nothing to
// show, and for histogram pages left out, the assets carry a note that says
// so and why (Assets.Notes), which the writers print.
func Render(r *report.Report, o Options) (report.Assets, error) {
	var jobs []job
	var notes []string
	chart := func(c *Chart, why func() string) {
		if c != nil {
			jobs = append(jobs, job{c.File, func(w io.Writer) error { return RenderChart(w, c) }})
		} else if why != nil {
			notes = append(notes, why())
		}
	}
	pages := func(ps []Page) {
		for i := range ps {
			pg := &ps[i]
			jobs = append(jobs, job{pg.File, func(w io.Writer) error { return RenderPage(w, pg) }})
		}
	}
	chart(DepthProfileSpec(r), func() string { return depthNote(r) })
	chart(UnitHealthSpec(r), func() string { return unitNote(r) })
	hp := HistogramPagesSpec(r)
	if !o.All && len(hp) > DefaultHistogramPages {
		shown, total := 0, 0
		for i, pg := range hp {
			if i < DefaultHistogramPages {
				shown += len(pg.Panels)
			}
			total += len(pg.Panels)
		}
		notes = append(notes, fmt.Sprintf("Histograms: %d of %d pages drawn, the %d worst-ranked of %d layers; %d layers left out (--all draws every one).",
			DefaultHistogramPages, len(hp), shown, total, total-shown))
		hp = hp[:DefaultHistogramPages]
	} else if len(hp) == 0 {
		notes = append(notes, "No histograms: no layer has a histogram of finite values.")
	}
	pages(hp)
	chart(WeightsSpec(r), func() string {
		return "No weight-scale figure: no weight tensor with a finite gain std·√fan_in (the model has no Conv, Gemm or MatMul weights the statistics recognised)."
	})
	// transformers: residual stream max/median along depth, attention entropy per block and head
	chart(ResidualRatioSpec(r), nil)
	if h := AttentionEntropySpec(r); h != nil {
		jobs = append(jobs, job{h.File, func(w io.Writer) error { return RenderHeat(w, h) }})
	}
	// the backward pass: gradient RMS along depth, update ratio per weight
	chart(GradientDepthSpec(r), nil)
	chart(UpdateRatioSpec(r), nil)
	if c := CompareSpec(r); c != nil {
		pages(c.Pages)
		chart(c.Depth, func() string {
			return "No comparison depth profile: no matched layer has a finite std in both checkpoints."
		})
		// float against quantized only: no note when there is no SQNR
		chart(SQNRSpec(r), nil)
	}
	figs := make([]report.Figure, len(jobs))
	errs := make([]error, len(jobs))
	workers := o.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	var wg sync.WaitGroup
	next := make(chan int)
	for range min(workers, len(jobs)) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				var b bytes.Buffer
				errs[i] = jobs[i].render(&b)
				figs[i] = report.Figure{File: jobs[i].name, PNG: b.Bytes()}
			}
		}()
	}
	for i := range jobs {
		next <- i
	}
	close(next)
	wg.Wait()
	for i, err := range errs {
		if err != nil {
			return report.Assets{}, fmt.Errorf("plots: rendering %s: %w", jobs[i].name, err)
		}
	}
	return report.Assets{Figures: figs, Notes: notes}, nil
}

// depthNote says why there is no depth profile.
func depthNote(r *report.Report) string {
	if len(activationLayers(r)) == 0 {
		return "No depth profile: the model has no activation layer with statistics (" + activationListNote + ")."
	}
	return "No depth profile: no activation layer has a finite standard deviation."
}

// unitNote says why there is no unit-health figure.
func unitNote(r *report.Report) string {
	if len(activationLayers(r)) == 0 {
		return "No unit-health figure: the model has no activation layer with statistics (" + activationListNote + ")."
	}
	return "No unit-health figure: no activation layer has a dead or saturated fraction (they are measured for the ReLU family, ReLU-like smooth units and bounded units such as tanh and sigmoid)."
}

// WriteFiles writes every figure of a into dir (which must exist), each
// through a temporary file renamed into place (report.WriteFileAtomic).
func WriteFiles(dir string, a report.Assets) error {
	if st, err := os.Stat(dir); err != nil {
		return fmt.Errorf("plots: %w", err)
	} else if !st.IsDir() {
		return fmt.Errorf("plots: %s is not a directory", dir)
	}
	for _, f := range a.Figures {
		if err := report.WriteFileAtomic(filepath.Join(dir, f.File), func(w io.Writer) error {
			_, err := w.Write(f.PNG)
			return err
		}); err != nil {
			return fmt.Errorf("plots: %w", err)
		}
	}
	return nil
}
