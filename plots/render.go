package plots

import (
	"bufio"
	"image/png"
	"io"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/text"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
)

// Figures are 1200 px wide at 96 dpi (12.5 in), which stays readable when a
// code-review tool scales them to the width of a comment.
const (
	dpi     = 96
	widthPx = 1200
)

// pngEncoder compresses with zlib's fastest level: on the 7 figures of a
// deep model's report (bench/report.sh) encoding took 58% of the drawing
// time at the default level; the fastest level is several times quicker
// for files somewhat larger (measured numbers in docs/performance.md).
var pngEncoder = png.Encoder{CompressionLevel: png.BestSpeed}

// px converts pixels at the figure resolution to a vg length.
func px(n float64) vg.Length { return vg.Length(n/dpi) * vg.Inch }

// sans returns a text style in Liberation Sans of the given point size.
func sans(size vg.Length) text.Style {
	return text.Style{
		Color:   inkText,
		Font:    font.From(font.Font{Typeface: "Liberation", Variant: "Sans"}, size),
		Handler: plot.DefaultTextHandler,
	}
}

// writePNG renders a w×h pixel image with draw and encodes it as PNG.
func writePNG(out io.Writer, wPx, hPx float64, drawFn func(draw.Canvas) error) error {
	c := vgimg.NewWith(vgimg.UseWH(px(wPx), px(hPx)), vgimg.UseDPI(dpi), vgimg.UseBackgroundColor(white))
	if err := drawFn(draw.New(c)); err != nil {
		return err
	}
	bw := bufio.NewWriter(out)
	if err := pngEncoder.Encode(bw, c.Image()); err != nil {
		return err
	}
	return bw.Flush()
}

// dashes returns the dash pattern of a style.
func dashes(s Style) []vg.Length {
	switch s {
	case Dashed:
		return []vg.Length{vg.Points(7), vg.Points(4)}
	case Dotted:
		return []vg.Length{vg.Points(1.5), vg.Points(3)}
	}
	return nil
}

// glyph returns the marker drawer of a shape.
func glyph(s Shape) draw.GlyphDrawer {
	switch s {
	case Triangle:
		return draw.PyramidGlyph{}
	case Square:
		return draw.BoxGlyph{}
	}
	return draw.CircleGlyph{}
}
