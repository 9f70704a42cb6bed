package report

import (
	"fmt"
	"strings"
	"text/tabwriter"
)

// writeQuantText lists the quantized tensors (inputs first, then layers in
// depth order) with their quantization parameters, clipped share and share
// of integer levels used, and the float16 activations; nothing for a model
// without quantizers or float16.
func writeQuantText(b *strings.Builder, r *Report) {
	type row struct {
		tensor  string
		q       *Quantization
		clipped *float64
		levels  *float64
	}
	var rows []row
	for _, in := range r.Input.PerInput {
		if in.Quantization != nil {
			rows = append(rows, row{in.Name, in.Quantization, in.ClippedFraction, in.LevelsUsedFraction})
		}
	}
	var half []string
	for _, l := range r.Layers {
		if l.Quantization != nil {
			rows = append(rows, row{l.Output, l.Quantization, l.ClippedFraction, l.LevelsUsedFraction})
		}
		if l.Float16 {
			half = append(half, l.Output)
		}
	}
	if len(rows) > 0 {
		fmt.Fprintln(b)
		fmt.Fprintln(b, "Quantized tensors (q = saturate(round(v/scale) + zero point)), over the whole sample:")
		tw := tabwriter.NewWriter(b, 2, 4, 2, ' ', 0)
		fmt.Fprintln(tw, "tensor\tquantizer\ttype\tgranularity\tscale\tzero point\tclipped\tlevels used\t")
		for _, x := range rows {
			sc, zp := "–", "–"
			switch {
			case len(x.q.Scale) == 1:
				sc, zp = fmt.Sprintf("%.4g", x.q.Scale[0]), fmt.Sprintf("%g", x.q.ZeroPoint[0])
			case len(x.q.Scale) > 1:
				sc, zp = fmt.Sprintf("%d values", len(x.q.Scale)), fmt.Sprintf("%d values", len(x.q.ZeroPoint))
			}
			fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", x.tensor, x.q.Node, x.q.Type, x.q.Granularity, sc, zp, FmtPercent(x.clipped), FmtPercent(x.levels))
		}
		tw.Flush()
	}
	if len(half) > 0 || len(r.Model.Float16Weights) > 0 {
		fmt.Fprintln(b)
		fmt.Fprintf(b, "Float16 in the model (computed here in float32): %d weights, %d activations", len(r.Model.Float16Weights), len(half))
		if len(half) > 0 && len(half) <= 12 {
			fmt.Fprintf(b, " (%s)", strings.Join(half, ", "))
		}
		fmt.Fprintln(b)
	}
}
