package probe

import (
	"cmp"
	"fmt"
	"math"
	"slices"

	"github.com/vitals-health/vitals/tensor"
)

// Detection post-processing: NonMaxSuppression (opsets 10 and 11).
//
// For every batch b and class k, the boxes of batch b whose score in class k
// exceeds score_threshold (when that input is given: score > threshold) are
// visited in descending score order, equal scores lowest box index first. A
// box is kept unless, for some box already kept in (b, k),
//
//	IoU(a, c) = area(a ∩ c) / (area(a) + area(c) − area(a ∩ c)) > iou_threshold,
//
// and at most max_output_boxes_per_class boxes are kept per (b, k) (0, the
// default, keeps none). Boxes without area or overlap never suppress.
// center_point_box = 0 reads a box as [y1, x1, y2, x2], any two diagonal
// corners; 1 reads it as [x_center, y_center, width, height]. The output is
// int64 [num_selected, 3], one (batch, class, box) row per kept box, grouped
// by batch then class, each group in the order its boxes were kept.

func init() {
	reg("NonMaxSuppression", nmsKernel, 10, 11)
}

func nmsKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	boxes, scores := c.In[0], c.In[1]
	if boxes.Rank() != 3 || boxes.Shape[2] != 4 {
		return fmt.Errorf("boxes must have shape [num_batches, spatial_dimension, 4], got %v", boxes.Shape)
	}
	if scores.Rank() != 3 {
		return fmt.Errorf("scores must have shape [num_batches, num_classes, spatial_dimension], got %v", scores.Shape)
	}
	if scores.Shape[0] != boxes.Shape[0] || scores.Shape[2] != boxes.Shape[1] {
		return fmt.Errorf("scores shape %v does not match boxes shape %v: want [%d, num_classes, %d]",
			scores.Shape, boxes.Shape, boxes.Shape[0], boxes.Shape[1])
	}
	for _, in := range []struct {
		name string
		t    *tensor.Tensor
	}{{"boxes", boxes}, {"scores", scores}} {
		if in.t.DType != tensor.Float32 && in.t.DType != tensor.Float64 {
			return fmt.Errorf("%s must be a float tensor, got %v", in.name, in.t.DType)
		}
	}
	center := c.Int("center_point_box", 0)
	if center != 0 && center != 1 {
		return fmt.Errorf("attribute center_point_box must be 0 or 1, got %d", center)
	}

	var maxOut int64
	if t, err := nmsScalar(c, 2, "max_output_boxes_per_class"); err != nil {
		return err
	} else if t != nil {
		if t.DType.IsFloat() || t.DType == tensor.Bool || t.DType == tensor.String {
			return fmt.Errorf("max_output_boxes_per_class must be an integer tensor, got %v", t.DType)
		}
		// read exactly: exporters write INT64_MAX for "no limit", which
		// through float64 becomes 2^63 and converts to a negative count
		maxOut = max(t.Int64At(0), 0)
	}
	iou, hasScore, scoreThr := 0.0, false, 0.0
	if t, err := nmsScalar(c, 3, "iou_threshold"); err != nil {
		return err
	} else if t != nil {
		iou = t.Float64At(0)
	}
	if t, err := nmsScalar(c, 4, "score_threshold"); err != nil {
		return err
	} else if t != nil {
		hasScore, scoreThr = true, t.Float64At(0)
	}

	p := nmsParams{
		batches: boxes.Shape[0], classes: scores.Shape[1], n: boxes.Shape[1],
		center: center == 1, maxOut: maxOut, hasScore: hasScore,
	}
	var sel []int64
	if boxes.DType == tensor.Float32 && scores.DType == tensor.Float32 {
		// the reference computes in single precision: thresholds are compared as float32
		sel = nmsRun(p, boxes.F32(), scores.F32(), float32(iou), float32(scoreThr))
	} else {
		sel = nmsRun(p, nmsFloat64(boxes), nmsFloat64(scores), iou, scoreThr)
	}
	c.Set(0, tensor.From(sel, len(sel)/3, 3))
	return nil
}

// nmsScalar returns optional input i, or nil when it is omitted or empty;
// a present input must hold exactly one element.
func nmsScalar(c *Call, i int, name string) (*tensor.Tensor, error) {
	t := c.Input(i)
	if t == nil || t.Size() == 0 {
		return nil, nil
	}
	if t.Size() != 1 {
		return nil, fmt.Errorf("%s must be a scalar, got shape %v", name, t.Shape)
	}
	return t, nil
}

func nmsFloat64(t *tensor.Tensor) []float64 {
	if d, ok := t.Data.([]float64); ok {
		return d
	}
	out := make([]float64, t.Size())
	for i := range out {
		out[i] = t.Float64At(i)
	}
	return out
}

type nmsParams struct {
	batches, classes, n int
	center              bool
	maxOut              int64
	hasScore            bool
}

// nmsRun selects boxes for every (batch, class) and returns the flattened
// [num_selected, 3] rows.
func nmsRun[T Float](p nmsParams, boxes, scores []T, iouThr, scoreThr T) []int64 {
	var sel []int64
	if p.maxOut == 0 || p.n == 0 {
		return sel
	}
	// corners per box: x_min, y_min, x_max, y_max, then the area
	geo := make([]T, 5*p.n)
	order := make([]int, 0, p.n)
	var kept []int
	for b := 0; b < p.batches; b++ {
		nmsCorners(geo, boxes[b*p.n*4:(b+1)*p.n*4], p.center)
		for k := 0; k < p.classes; k++ {
			s := scores[(b*p.classes+k)*p.n : (b*p.classes+k+1)*p.n]
			order = order[:0]
			for i, v := range s {
				if !p.hasScore || v > scoreThr {
					order = append(order, i)
				}
			}
			// descending score (cmp.Compare ranks NaN lowest, so NaN comes last);
			// the stable sort keeps equal scores in index order
			slices.SortStableFunc(order, func(i, j int) int { return cmp.Compare(s[j], s[i]) })
			if len(order) > nmsGridMin {
				kept = nmsSelectGrid(kept[:0], order, geo, iouThr, p.maxOut)
			} else {
				kept = nmsSelect(kept[:0], order, geo, iouThr, p.maxOut)
			}
			for _, i := range kept {
				sel = append(sel, int64(b), int64(k), int64(i))
			}
		}
	}
	return sel
}

// nmsSelect is the greedy selection: in score order, a box is kept unless
// it overlaps (IoU > thr) a box kept before it, up to maxOut boxes.
func nmsSelect[T Float](kept, order []int, geo []T, thr T, maxOut int64) []int {
	for _, i := range order {
		if int64(len(kept)) >= maxOut {
			break
		}
		keep := true
		for _, j := range kept {
			if nmsOverlaps(geo, i, j, thr) {
				keep = false
				break
			}
		}
		if keep {
			kept = append(kept, i)
		}
	}
	return kept
}

// nmsGridMin: candidate lists longer than this go through nmsSelectGrid.
const nmsGridMin = 256

// nmsSelectGrid is nmsSelect with the kept boxes filed in a uniform grid
// over the candidates' extent, so that a candidate is compared only with
// the kept boxes sharing a cell with it. Two boxes overlap only if their
// closed extents share a point, hence a cell, so the kept set is the same
// (detection exports put every class in one call with boxes offset by class,
// thousands of candidates that mostly lie far apart: the plain loop compares
// each with every kept box). Boxes without positive area (or with NaN
// corners) overlap nothing in nmsOverlaps: they are kept and not filed.
// Boxes spanning many cells go to a list every candidate is compared with.
// Non-finite extents fall back to nmsSelect.
func nmsSelectGrid[T Float](kept, order []int, geo []T, thr T, maxOut int64) []int {
	const cellsPerAxis = 128
	const wideCells = 64
	x0, y0 := math.Inf(1), math.Inf(1)
	x1, y1 := math.Inf(-1), math.Inf(-1)
	for _, i := range order {
		g := geo[5*i : 5*i+5]
		if !(g[4] > 0) {
			continue // never overlaps anything (nmsOverlaps)
		}
		x0, y0 = min(x0, float64(g[0])), min(y0, float64(g[1]))
		x1, y1 = max(x1, float64(g[2])), max(y1, float64(g[3]))
	}
	if math.IsInf(x0, 0) || math.IsInf(x1, 0) || math.IsInf(y0, 0) || math.IsInf(y1, 0) || x0 != x0 || y0 != y0 || x1 != x1 || y1 != y1 {
		return nmsSelect(kept, order, geo, thr, maxOut)
	}
	sx := float64(cellsPerAxis) / max(x1-x0, 1e-30)
	sy := float64(cellsPerAxis) / max(y1-y0, 1e-30)
	cell := func(v, lo, s float64) int { return min(max(int((v-lo)*s), 0), cellsPerAxis-1) }
	grid := make([][]int32, cellsPerAxis*cellsPerAxis)
	var wide []int
	for _, i := range order {
		if int64(len(kept)) >= maxOut {
			break
		}
		g := geo[5*i : 5*i+5]
		if !(g[4] > 0) {
			kept = append(kept, i) // overlaps no box, is overlapped by none
			continue
		}
		cx0, cx1 := cell(float64(g[0]), x0, sx), cell(float64(g[2]), x0, sx)
		cy0, cy1 := cell(float64(g[1]), y0, sy), cell(float64(g[3]), y0, sy)
		keep := true
		for _, j := range wide {
			if nmsOverlaps(geo, i, j, thr) {
				keep = false
				break
			}
		}
		for cy := cy0; cy <= cy1 && keep; cy++ {
			for cx := cx0; cx <= cx1 && keep; cx++ {
				for _, j := range grid[cy*cellsPerAxis+cx] {
					if nmsOverlaps(geo, i, int(j), thr) {
						keep = false
						break
					}
				}
			}
		}
		if !keep {
			continue
		}
		kept = append(kept, i)
		if (cx1-cx0+1)*(cy1-cy0+1) > wideCells {
			wide = append(wide, i)
			continue
		}
		for cy := cy0; cy <= cy1; cy++ {
			for cx := cx0; cx <= cx1; cx++ {
				grid[cy*cellsPerAxis+cx] = append(grid[cy*cellsPerAxis+cx], int32(i))
			}
		}
	}
	return kept
}

// nmsCorners fills geo with (x_min, y_min, x_max, y_max, area) for each box.
func nmsCorners[T Float](geo, boxes []T, center bool) {
	for i := 0; i < len(boxes)/4; i++ {
		v := boxes[4*i : 4*i+4]
		var x0, y0, x1, y1 T
		if center {
			hw, hh := v[2]/2, v[3]/2
			x0, x1 = v[0]-hw, v[0]+hw
			y0, y1 = v[1]-hh, v[1]+hh
		} else {
			y0, y1 = min(v[0], v[2]), max(v[0], v[2])
			x0, x1 = min(v[1], v[3]), max(v[1], v[3])
		}
		g := geo[5*i : 5*i+5]
		g[0], g[1], g[2], g[3] = x0, y0, x1, y1
		g[4] = T((x1 - x0) * (y1 - y0))
	}
}

// nmsOverlaps reports whether boxes i and j overlap with IoU > thr; a pair
// without intersection or with an empty box never does.
func nmsOverlaps[T Float](geo []T, i, j int, thr T) bool {
	a, b := geo[5*i:5*i+5], geo[5*j:5*j+5]
	ix0, ix1 := max(a[0], b[0]), min(a[2], b[2])
	if !(ix1 > ix0) {
		return false
	}
	iy0, iy1 := max(a[1], b[1]), min(a[3], b[3])
	if !(iy1 > iy0) {
		return false
	}
	inter := T((ix1 - ix0) * (iy1 - iy0))
	union := a[4] + b[4] - inter
	if !(inter > 0) || !(a[4] > 0) || !(b[4] > 0) || !(union > 0) {
		return false
	}
	return inter/union > thr
}
