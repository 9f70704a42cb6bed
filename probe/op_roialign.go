package probe

import (
	"fmt"
	"math"
	"strings"

	"github.com/vitals-health/vitals/tensor"
)

// Region pooling: RoiAlign (opsets 10 and 16).
//
// RoI r = (x1, y1, x2, y2) of image batch_indices[r] becomes, in feature-map
// coordinates, s·x1 − o … s·x2 − o (s = spatial_scale; o = 0.5 for
// coordinate_transformation_mode half_pixel, the default from opset 16, and
// o = 0 for output_half_pixel, the only behaviour of opset 10, which also
// widens a RoI to at least 1×1). It is cut into output_height × output_width
// bins of size bh × bw, each sampled on a gh × gw grid (gh = sampling_ratio,
// or ceil(bh) when sampling_ratio is 0; likewise gw) at
//
//	y = y1 + ph·bh + (iy + ½)·bh/gh,   x = x1 + pw·bw + (ix + ½)·bw/gw,
//
// where X is read by bilinear interpolation between its four neighbours
// (a sample with y outside [−1, H] or x outside [−1, W] reads 0; otherwise y
// and x are clamped to [0, H−1] and [0, W−1]). A bin is
//
//	avg: Σ_samples Σ_corners w·X / (gh·gw)
//	max: max_samples max_corners w·X
//
// (max takes the largest bilinear-weighted corner value, not the largest
// interpolated value, as the operator's reference implementation does).

func init() {
	reg("RoiAlign", roiAlignKernel, 10, 16)
}

// roiAlignMaxSamples bounds the samples one RoI may place along an axis
// (output size × grid size): a RoI in image pixels pooled with a mistaken
// spatial_scale would otherwise take hours instead of failing.
const roiAlignMaxSamples = 1 << 20

type roiAlignOpts struct {
	oh, ow    int
	sampling  int
	scale     float64
	max       bool
	halfPixel bool
}

func roiAlignKernel(c *Call) error {
	if err := c.Need(3); err != nil {
		return err
	}
	x, rois, bi := c.In[0], c.In[1], c.In[2]
	if x.Rank() != 4 {
		return fmt.Errorf("X must have rank 4 [N, C, H, W], got shape %v", x.Shape)
	}
	if x.DType != tensor.Float32 && x.DType != tensor.Float64 {
		return fmt.Errorf("X must be a float tensor, got %v", x.DType)
	}
	if rois.Rank() != 2 || rois.Shape[1] != 4 {
		return fmt.Errorf("rois must have shape [num_rois, 4], got %v", rois.Shape)
	}
	if !rois.DType.IsFloat() {
		return fmt.Errorf("rois must be a float tensor, got %v", rois.DType)
	}
	if bi.DType != tensor.Int64 && bi.DType != tensor.Int32 {
		return fmt.Errorf("batch_indices must be an int64 tensor, got %v", bi.DType)
	}
	if bi.Rank() != 1 || bi.Shape[0] != rois.Shape[0] {
		return fmt.Errorf("batch_indices must have shape [%d] to match rois %v, got %v", rois.Shape[0], rois.Shape, bi.Shape)
	}

	o := roiAlignOpts{
		oh:       int(c.Int("output_height", 1)),
		ow:       int(c.Int("output_width", 1)),
		sampling: int(c.Int("sampling_ratio", 0)),
		scale:    float64(c.Float("spatial_scale", 1)),
	}
	if o.oh < 1 || o.ow < 1 {
		return fmt.Errorf("attributes output_height and output_width must be >= 1, got %d and %d", o.oh, o.ow)
	}
	if o.sampling < 0 {
		return fmt.Errorf("attribute sampling_ratio must be >= 0, got %d", o.sampling)
	}
	switch m := strings.ToLower(c.Str("mode", "avg")); m {
	case "avg":
	case "max":
		o.max = true
	default:
		return fmt.Errorf("attribute mode must be \"avg\" or \"max\", got %q", m)
	}
	if c.Opset >= 16 {
		switch m := strings.ToLower(c.Str("coordinate_transformation_mode", "half_pixel")); m {
		case "half_pixel":
			o.halfPixel = true
		case "output_half_pixel":
		default:
			return fmt.Errorf("attribute coordinate_transformation_mode must be \"half_pixel\" or \"output_half_pixel\", got %q", m)
		}
	}

	n, ch := x.Shape[0], x.Shape[1]
	idx := bi.Ints()
	for r, b := range idx {
		if b < 0 || b >= n {
			return fmt.Errorf("batch_indices[%d] = %d is outside [0, %d) for X of shape %v", r, b, n, x.Shape)
		}
	}
	out, err := c.Arena().Alloc(x.DType, []int{len(idx), ch, o.oh, o.ow})
	if err != nil {
		return err
	}
	if out.Size() > 0 {
		switch d := x.Data.(type) {
		case []float32:
			err = roiAlignRun(o, d, x.Shape, rois, idx, out.F32())
		case []float64:
			err = roiAlignRun(o, d, x.Shape, rois, idx, out.F64())
		}
		if err != nil {
			return err
		}
	}
	c.Set(0, out)
	return nil
}

// roiTap is one sample position along an axis: the two neighbours and their
// weights (lo weight h = 1 − l, hi weight l).
type roiTap struct {
	lo, hi int
	h, l   float64
}

// roiAxis holds the in-range taps of every bin along one axis: the taps of
// bin p are taps[start[p]:start[p+1]]; full[p] tells whether all grid
// samples of bin p were in range (an out-of-range sample reads 0).
type roiAxis struct {
	taps  []roiTap
	start []int
	full  []bool
}

// roiAlignAxis computes the taps of bins of size bin starting at lo, grid
// samples per bin, over an input axis of length size.
func roiAlignAxis(ax *roiAxis, lo, bin float64, bins, grid, size int) {
	ax.taps, ax.start, ax.full = ax.taps[:0], ax.start[:0], ax.full[:0]
	for p := 0; p < bins; p++ {
		ax.start = append(ax.start, len(ax.taps))
		full := true
		for i := 0; i < grid; i++ {
			v := lo + float64(p)*bin + (float64(i)+0.5)*bin/float64(grid)
			if v < -1 || v > float64(size) || size == 0 {
				full = false
				continue
			}
			v = max(v, 0)
			t := roiTap{lo: int(v)}
			if t.lo >= size-1 {
				t.lo, t.hi, v = size-1, size-1, float64(size-1)
			} else {
				t.hi = t.lo + 1
			}
			t.l = v - float64(t.lo)
			t.h = 1 - t.l
			ax.taps = append(ax.taps, t)
		}
		ax.full = append(ax.full, full)
	}
	ax.start = append(ax.start, len(ax.taps))
}

func roiAlignRun[T Float](o roiAlignOpts, x []T, shape []int, rois *tensor.Tensor, idx []int, out []T) error {
	ch, h, w := shape[1], shape[2], shape[3]
	plane := h * w
	off := 0.0
	if o.halfPixel {
		off = 0.5
	}
	var ys, xs roiAxis
	for r, b := range idx {
		var q [4]float64
		for k := range q {
			v := rois.Float64At(4*r + k)
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("rois[%d] = %v has a non-finite coordinate", r, roiRow(rois, r))
			}
			q[k] = v*o.scale - off
		}
		x0, y0 := q[0], q[1]
		rw, rh := q[2]-q[0], q[3]-q[1]
		if !o.halfPixel {
			rw, rh = max(rw, 1), max(rh, 1)
		}
		bh, bw := rh/float64(o.oh), rw/float64(o.ow)
		fh, fw := float64(o.sampling), float64(o.sampling)
		if o.sampling == 0 {
			fh, fw = roiGrid(bh), roiGrid(bw)
		}
		if fh*float64(o.oh) > roiAlignMaxSamples || fw*float64(o.ow) > roiAlignMaxSamples {
			return fmt.Errorf("rois[%d] = %v needs a %.0f×%.0f sampling grid per bin for a %d×%d output (limit %d samples along each axis); check spatial_scale (%g) and sampling_ratio",
				r, roiRow(rois, r), fh, fw, o.oh, o.ow, roiAlignMaxSamples, o.scale)
		}
		gh, gw := int(fh), int(fw)
		roiAlignAxis(&ys, y0, bh, o.oh, gh, h)
		roiAlignAxis(&xs, x0, bw, o.ow, gw, w)
		count := float64(max(gh*gw, 1))
		for k := 0; k < ch; k++ {
			src := x[(b*ch+k)*plane : (b*ch+k+1)*plane]
			dst := out[(r*ch+k)*o.oh*o.ow : (r*ch+k+1)*o.oh*o.ow]
			for ph := 0; ph < o.oh; ph++ {
				ty := ys.taps[ys.start[ph]:ys.start[ph+1]]
				for pw := 0; pw < o.ow; pw++ {
					tx := xs.taps[xs.start[pw]:xs.start[pw+1]]
					var acc float64
					if o.max {
						// a bin with no samples, or with an out-of-range one, starts from 0
						first := gh > 0 && gw > 0 && ys.full[ph] && xs.full[pw]
						for _, a := range ty {
							for _, e := range tx {
								v := max(
									a.h*e.h*float64(src[a.lo*w+e.lo]),
									a.h*e.l*float64(src[a.lo*w+e.hi]),
									a.l*e.h*float64(src[a.hi*w+e.lo]),
									a.l*e.l*float64(src[a.hi*w+e.hi]))
								if first || v > acc {
									acc, first = v, false
								}
							}
						}
					} else {
						for _, a := range ty {
							for _, e := range tx {
								acc += a.h*e.h*float64(src[a.lo*w+e.lo]) +
									a.h*e.l*float64(src[a.lo*w+e.hi]) +
									a.l*e.h*float64(src[a.hi*w+e.lo]) +
									a.l*e.l*float64(src[a.hi*w+e.hi])
							}
						}
						acc /= count
					}
					dst[ph*o.ow+pw] = T(acc)
				}
			}
		}
	}
	return nil
}

// roiGrid is the adaptive grid size ceil(bin) (0 for an empty or inverted bin).
func roiGrid(bin float64) float64 {
	if g := math.Ceil(bin); g > 0 {
		return g
	}
	return 0
}

func roiRow(rois *tensor.Tensor, r int) [4]float64 {
	var q [4]float64
	for k := range q {
		q[k] = rois.Float64At(4*r + k)
	}
	return q
}
