package report

import (
	"fmt"
	"strings"
	"text/tabwriter"
)

// Gradients describes the backward pass of a check: the loss, how the sample
// was batched, and what it could not differentiate.
type Gradients struct {
	// Loss is "cross-entropy" or "mse"; Target says what it was measured
	// against: "labels", "pseudo-labels" (the model's own top class) or
	// "targets" (the targets file).
	Loss   string `json:"loss"`
	Target string `json:"target"`
	// Value is the loss L, the mean over the sample.
	Value *float64 `json:"value"`
	// Samples and Batches: L is the mean over Samples, gradients are summed
	// over the batches and scaled by 1/Samples; Batch is the batch size.
	Samples int `json:"samples"`
	Batches int `json:"batches"`
	Batch   int `json:"batch"`
	// LR is the learning rate of the predicted update ratios (nil: none).
	LR *float64 `json:"lr"`
	// Mode states how the model was differentiated (BatchNorm's running
	// statistics, Dropout as the identity).
	Mode string `json:"mode"`
	// Missing is one line per operator type without a gradient rule that a
	// gradient reached; layers above them have no gradient statistics.
	Missing []string `json:"missing"`
	// Stopped, when set, says why the backward pass stopped early (the rest
	// of the report is unaffected).
	Stopped string `json:"stopped,omitempty"`
}

// GradientSummary is the backward pass in sentences (nil without one): the
// loss and its target, how the sample was batched, the mode, and what was
// not differentiated.
func GradientSummary(r *Report) []string {
	g := r.Gradients
	if g == nil {
		return nil
	}
	target := map[string]string{"labels": "the labels", "pseudo-labels": "the model's own top class as pseudo-label (no labels given)", "targets": "the targets file"}[g.Target]
	lines := []string{fmt.Sprintf("Loss: mean %s against %s over %d samples, L = %s; gradients summed over %d batch(es) of up to %d samples and scaled by 1/%d.",
		g.Loss, target, g.Samples, FmtNum(g.Value), g.Batches, g.Batch, g.Samples)}
	if g.LR != nil {
		lines = append(lines, fmt.Sprintf("Update ratios are for plain SGD at learning rate %g (rule of thumb about 1e-3 per step; common practice).", *g.LR))
	}
	lines = append(lines, "Mode: "+g.Mode+".")
	for _, m := range g.Missing {
		lines = append(lines, "No gradient past: "+m+".")
	}
	if g.Stopped != "" {
		lines = append(lines, "Backward pass stopped: "+g.Stopped+".")
	}
	return lines
}

// GradientLayerHeader and GradientLayerRows: the activation-gradient RMS of
// every layer a gradient reached, in depth order.
var GradientLayerHeader = []string{"node", "op", "depth", "grad RMS"}

// GradientLayerRows are the rows of GradientLayerHeader.
func GradientLayerRows(r *Report) [][]string {
	var rows [][]string
	for _, l := range r.Layers {
		if l.GradRMS != nil {
			rows = append(rows, []string{l.Node, l.Op, fmt.Sprint(l.Depth), FmtNum(l.GradRMS)})
		}
	}
	return rows
}

// GradientWeightHeader and GradientWeightRows: gradient and update size per weight.
var GradientWeightHeader = []string{"weight", "node", "‖dL/dW‖", "‖W‖", "‖dL/dW‖/‖W‖", "SGD update ratio"}

// GradientWeightRows are the rows of GradientWeightHeader.
func GradientWeightRows(r *Report) [][]string {
	var rows [][]string
	for _, w := range r.Weights {
		if w.GradNorm != nil {
			rows = append(rows, []string{w.Name, w.Node, FmtNum(w.GradNorm), FmtNum(w.Norm), FmtNum(w.GradToWeight), FmtNum(w.UpdateRatio)})
		}
	}
	return rows
}

// writeGradientsText is the text writer's gradient section.
func writeGradientsText(b *strings.Builder, r *Report) {
	lines := GradientSummary(r)
	if lines == nil {
		return
	}
	fmt.Fprintln(b)
	fmt.Fprintln(b, "Gradients (backward pass):")
	for _, l := range lines {
		fmt.Fprintln(b, "  "+l)
	}
	for _, t := range []struct {
		h    []string
		rows [][]string
	}{{GradientLayerHeader, GradientLayerRows(r)}, {GradientWeightHeader, GradientWeightRows(r)}} {
		if len(t.rows) == 0 {
			continue
		}
		fmt.Fprintln(b)
		tw := tabwriter.NewWriter(b, 2, 4, 2, ' ', 0)
		fmt.Fprintln(tw, "  "+strings.Join(t.h, "\t")+"\t")
		for _, row := range t.rows {
			fmt.Fprintln(tw, "  "+strings.Join(row, "\t")+"\t")
		}
		tw.Flush()
	}
}
