package plots

import (
	"fmt"
	"io"
	"os"

	"github.com/vitals-health/vitals/report"
)

// WriteAll writes every figure of r into dir (which must exist) and returns
// the file names written, in this order: depth-profile.png, unit-health.png,
// histograms-NN.png, weights.png, with a backward pass gradient-depth.png
// and (with a learning rate) update-ratio.png, and, when r.Compare is set,
// compare-histograms-NN.png and compare-depth-profile.png. A figure with
// nothing to show (e.g. no activation layers, no weights) is skipped without
// error. Each file is written to a temporary name and renamed into place.
func WriteAll(dir string, r *report.Report) ([]string, error) {
	if st, err := os.Stat(dir); err != nil {
		return nil, fmt.Errorf("plots: %w", err)
	} else if !st.IsDir() {
		return nil, fmt.Errorf("plots: %s is not a directory", dir)
	}
	type job struct {
		name   string
		render func(io.Writer) error
	}
	var jobs []job
	chart := func(c *Chart) {
		if c != nil {
			jobs = append(jobs, job{c.File, func(w io.Writer) error { return RenderChart(w, c) }})
		}
	}
	pages := func(ps []Page) {
		for i := range ps {
			pg := &ps[i]
			jobs = append(jobs, job{pg.File, func(w io.Writer) error { return RenderPage(w, pg) }})
		}
	}
	chart(DepthProfileSpec(r))
	chart(UnitHealthSpec(r))
	pages(HistogramPagesSpec(r))
	chart(WeightsSpec(r))
	chart(GradientDepthSpec(r))
	chart(UpdateRatioSpec(r))
	if c := CompareSpec(r); c != nil {
		pages(c.Pages)
		chart(c.Depth)
	}
	var names []string
	for _, j := range jobs {
		if err := saveAtomic(dir, j.name, j.render); err != nil {
			return names, fmt.Errorf("plots: %w", err)
		}
		names = append(names, j.name)
	}
	return names, nil
}
