package plots

import (
	"image/color"
	"strconv"
)

// The figure colours: muted, distinguishable in greyscale by line style too.
var (
	inkText    = color.RGBA{R: 20, G: 20, B: 28, A: 255}
	white      = color.RGBA{R: 255, G: 255, B: 255, A: 255}
	inkNavy    = color.RGBA{R: 28, G: 44, B: 94, A: 255}
	bandBlue   = color.RGBA{R: 176, G: 198, B: 230, A: 255}
	pctGreen   = color.RGBA{R: 46, G: 120, B: 92, A: 255}
	slateBar   = color.RGBA{R: 74, G: 92, B: 128, A: 255}
	ochreBar   = color.RGBA{R: 214, G: 150, B: 48, A: 255}
	errorRed   = color.RGBA{R: 190, G: 30, B: 45, A: 255}
	warnAmber  = color.RGBA{R: 230, G: 140, B: 0, A: 255}
	refPurple  = color.RGBA{R: 120, G: 60, B: 150, A: 255}
	refTeal    = color.RGBA{R: 0, G: 128, B: 128, A: 255}
	histFill   = color.RGBA{R: 120, G: 150, B: 200, A: 255}
	oldGrey    = color.RGBA{R: 90, G: 90, B: 90, A: 255}
	newMagenta = color.RGBA{R: 176, G: 40, B: 110, A: 255}
	paleTint   = color.RGBA{R: 236, G: 241, B: 250, A: 255}
)

// ramp is a single-hue sequential palette of n colours from `from` (the
// heat map's minimum) to `to` (its maximum), interpolated linearly in RGB:
// one hue reads as "more or less of one thing", which a two-hue diverging
// scale (with a meaningless midpoint) does not.
type ramp struct {
	from, to color.RGBA
	n        int
}

// Colors implements gonum's palette.Palette.
func (r ramp) Colors() []color.Color {
	out := make([]color.Color, r.n)
	mix := func(a, b uint8, t float64) uint8 { return uint8(float64(a) + t*(float64(b)-float64(a)) + 0.5) }
	for i := range out {
		t := float64(i) / float64(r.n-1)
		out[i] = color.RGBA{R: mix(r.from.R, r.to.R, t), G: mix(r.from.G, r.to.G, t), B: mix(r.from.B, r.to.B, t), A: 255}
	}
	return out
}

func itoa(i int) string { return strconv.Itoa(i) }

// darker returns c with each channel at 60%.
func darker(c color.RGBA) color.RGBA {
	f := func(v uint8) uint8 { return uint8(int(v) * 3 / 5) }
	return color.RGBA{R: f(c.R), G: f(c.G), B: f(c.B), A: c.A}
}

func plotFormat(v float64) string  { return strconv.FormatFloat(v, 'f', -1, 64) }
func plotFormatE(v float64) string { return strconv.FormatFloat(v, 'g', 2, 64) }
