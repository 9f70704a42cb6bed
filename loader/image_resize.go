package loader

import (
	"image"
	"image/color"
	"math"
)

// pixelFunc returns the straight (non-premultiplied) RGB colour of the pixel at
// (x, y) relative to the image's bounds, each component in [0,1].
type pixelFunc func(x, y int) [3]float32

// rgbReader picks a fast path for the image types the PNG and JPEG decoders
// produce and falls back to color.NRGBA64Model for the others.
func rgbReader(img image.Image) pixelFunc {
	b := img.Bounds()
	const k8 = 1.0 / 255
	switch m := img.(type) {
	case *image.Gray:
		return func(x, y int) [3]float32 {
			v := float32(m.Pix[m.PixOffset(b.Min.X+x, b.Min.Y+y)]) * k8
			return [3]float32{v, v, v}
		}
	case *image.NRGBA:
		return func(x, y int) [3]float32 {
			p := m.Pix[m.PixOffset(b.Min.X+x, b.Min.Y+y):]
			return [3]float32{float32(p[0]) * k8, float32(p[1]) * k8, float32(p[2]) * k8}
		}
	case *image.YCbCr:
		return func(x, y int) [3]float32 {
			c := m.YCbCrAt(b.Min.X+x, b.Min.Y+y)
			r, g, bl := color.YCbCrToRGB(c.Y, c.Cb, c.Cr)
			return [3]float32{float32(r) * k8, float32(g) * k8, float32(bl) * k8}
		}
	}
	return func(x, y int) [3]float32 {
		c := color.NRGBA64Model.Convert(img.At(b.Min.X+x, b.Min.Y+y)).(color.NRGBA64)
		const k16 = 1.0 / 65535
		return [3]float32{float32(c.R) * k16, float32(c.G) * k16, float32(c.B) * k16}
	}
}

// axisMap holds, for each output coordinate, the two source coordinates and
// the weight of the second: sx = (x + 0.5)·in/out − 0.5 clamped to [0, in−1],
// i0 = ⌊sx⌋, i1 = min(i0+1, in−1), w = sx − i0.
type axisMap struct {
	i0, i1 []int
	w      []float32
}

func newAxisMap(in, out int) axisMap {
	m := axisMap{i0: make([]int, out), i1: make([]int, out), w: make([]float32, out)}
	scale := float64(in) / float64(out)
	for x := range out {
		s := (float64(x)+0.5)*scale - 0.5
		s = math.Max(0, math.Min(s, float64(in-1)))
		i0 := int(s)
		m.i0[x], m.i1[x], m.w[x] = i0, min(i0+1, in-1), float32(s-float64(i0))
	}
	return m
}

// resizeBilinear writes img resized to h×w into dst (one sample, channels
// first unless nhwc), converting to grayscale when channels is 1 and
// normalising each channel as (v − mean[c]) / std[c].
func resizeBilinear(img image.Image, channels, h, w int, nhwc bool, mean, std []float32, dst []float32) {
	b := img.Bounds()
	px := rgbReader(img)
	ys, xs := newAxisMap(b.Dy(), h), newAxisMap(b.Dx(), w)
	plane := h * w
	for y := range h {
		y0, y1, wy := ys.i0[y], ys.i1[y], ys.w[y]
		for x := range w {
			x0, x1, wx := xs.i0[x], xs.i1[x], xs.w[x]
			p00, p01, p10, p11 := px(x0, y0), px(x1, y0), px(x0, y1), px(x1, y1)
			var v [3]float32
			for c := range 3 {
				top := p00[c] + wx*(p01[c]-p00[c])
				bot := p10[c] + wx*(p11[c]-p10[c])
				v[c] = top + wy*(bot-top)
			}
			if channels == 1 {
				v[0] = 0.299*v[0] + 0.587*v[1] + 0.114*v[2]
			}
			for c := range channels {
				o := (v[c] - mean[c]) / std[c]
				if nhwc {
					dst[(y*w+x)*channels+c] = o
				} else {
					dst[c*plane+y*w+x] = o
				}
			}
		}
	}
}
