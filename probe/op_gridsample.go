package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// GridSample (opsets 16, 20): X has shape [N, C, D1, …, Dr], grid has shape
// [N, O1, …, Or, r] holding normalised positions listed innermost axis first
// ((x, y) for 2-D, (x, y, z) for 3-D). For each output point the position g
// on spatial axis d of size L is mapped to pixel units by
//
//	align_corners=1: u = (g+1)/2 · (L−1)        (−1, 1 → centres of the corner pixels)
//	align_corners=0: u = ((g+1)·L − 1)/2        (−1, 1 → outer edges of the corner pixels)
//
// and Y[n, c, o…] = Σ_taps Π_d w_d · X[n, c, i_1, …, i_r] with, per axis,
//
//	nearest: one tap at round(u), ties to the even index;
//	linear:  taps ⌊u⌋, ⌊u⌋+1 with weights 1−t, t where t = u − ⌊u⌋;
//	cubic:   taps ⌊u⌋−1 … ⌊u⌋+2 with Keys' weights k(t+1), k(t), k(1−t), k(2−t), A = −0.75.
//
// padding_mode decides values outside the image: zeros reads 0 for any tap
// off the image; border first clamps an out-of-range u to [0, L−1] and then
// clamps every tap; reflection first folds u into [lo, hi] (the range −1…1
// maps to) and then folds every tap the same way. Opset 16 names the modes
// bilinear/nearest/bicubic and takes 4-D X only; opset 20 names them
// linear/nearest/cubic and takes any r ≥ 1. Either spelling is accepted at
// both opsets. Sums run in float64 (integer X is converted back by
// truncation); u is rounded to float32 when the grid is float32.

func init() {
	reg("GridSample", gridSampleKernel, 16, 20)
}

const gridCubicA = -0.75

type gridMode int

const (
	gridNearest gridMode = iota
	gridLinear
	gridCubic
)

type gridPad int

const (
	gridZeros gridPad = iota
	gridBorder
	gridReflect
)

func gridSampleKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x, g := c.In[0], c.In[1]
	if c.Opset < 20 && x.Rank() != 4 {
		return fmt.Errorf("X must be 4-D [N, C, H, W] at opset %d, got shape %v", c.Opset, x.Shape)
	}
	if x.Rank() < 3 {
		return fmt.Errorf("X must have rank >= 3 [N, C, D1, ...], got shape %v", x.Shape)
	}
	r := x.Rank() - 2
	if g.Rank() != x.Rank() {
		return fmt.Errorf("grid must have rank %d (N, %d output dims, %d), got shape %v", x.Rank(), r, r, g.Shape)
	}
	if g.Shape[0] != x.Shape[0] {
		return fmt.Errorf("grid batch %d does not match X batch %d (grid %v, X %v)", g.Shape[0], x.Shape[0], g.Shape, x.Shape)
	}
	if g.Shape[r+1] != r {
		return fmt.Errorf("grid last dimension must be %d for %d spatial dims, got shape %v", r, r, g.Shape)
	}
	var coords []float64
	single := false
	switch d := g.Data.(type) {
	case []float32:
		single = true
		coords = make([]float64, len(d))
		for i, v := range d {
			coords[i] = float64(v)
		}
	case []float64:
		coords = d
	default:
		return fmt.Errorf("grid must be float32 or float64, got %v", g.DType)
	}

	defMode := "linear"
	if c.Opset < 20 {
		defMode = "bilinear"
	}
	var mode gridMode
	switch s := c.Str("mode", defMode); s {
	case "nearest":
		mode = gridNearest
	case "linear", "bilinear":
		mode = gridLinear
	case "cubic", "bicubic":
		mode = gridCubic
	default:
		return fmt.Errorf("mode %q is not one of linear (bilinear), nearest, cubic (bicubic)", s)
	}
	var pad gridPad
	switch s := c.Str("padding_mode", "zeros"); s {
	case "zeros":
		pad = gridZeros
	case "border":
		pad = gridBorder
	case "reflection":
		pad = gridReflect
	default:
		return fmt.Errorf("padding_mode %q is not one of zeros, border, reflection", s)
	}
	align := c.Int("align_corners", 0) != 0

	N, C := x.Shape[0], x.Shape[1]
	in := x.Shape[2:]
	shape := append([]int{N, C}, g.Shape[1:r+1]...)
	out, err := shapeNew(c.Arena(), x.DType, shape)
	if err != nil {
		return err
	}
	s := &gridSampler{r: r, in: in, mode: mode, pad: pad, align: align, single: single}
	s.init()
	switch xd := x.Data.(type) {
	case []float32:
		gridSampleRun(s, out.Data.([]float32), xd, coords, N, C)
	case []float64:
		gridSampleRun(s, out.Data.([]float64), xd, coords, N, C)
	case []int64:
		gridSampleRun(s, out.Data.([]int64), xd, coords, N, C)
	case []int32:
		gridSampleRun(s, out.Data.([]int32), xd, coords, N, C)
	case []int16:
		gridSampleRun(s, out.Data.([]int16), xd, coords, N, C)
	case []int8:
		gridSampleRun(s, out.Data.([]int8), xd, coords, N, C)
	case []uint8:
		gridSampleRun(s, out.Data.([]uint8), xd, coords, N, C)
	case []uint16:
		gridSampleRun(s, out.Data.([]uint16), xd, coords, N, C)
	case []uint32:
		gridSampleRun(s, out.Data.([]uint32), xd, coords, N, C)
	case []uint64:
		gridSampleRun(s, out.Data.([]uint64), xd, coords, N, C)
	default:
		return fmt.Errorf("X of type %v is not supported (numeric types only)", x.DType)
	}
	c.Set(0, out)
	return nil
}

// gridSampler holds the per-node settings and the scratch tap tables of one output point.
type gridSampler struct {
	r      int
	in     []int // spatial sizes D1…Dr
	mode   gridMode
	pad    gridPad
	align  bool
	single bool // the grid is float32: coordinates are rounded to float32 like the grid

	lo, hi  []float64 // the range −1…1 maps to, per axis
	strides []int     // row-major strides of the spatial block
	nTap    int       // taps per axis
	idx     [][]int   // per axis: tap index into X, or −1 for a zero tap
	w       [][]float64
	offs    []int // combined taps: flat spatial offset and weight
	ws      []float64
}

func (s *gridSampler) init() {
	s.lo = make([]float64, s.r)
	s.hi = make([]float64, s.r)
	for d, L := range s.in {
		if s.align {
			s.lo[d], s.hi[d] = 0, float64(L-1)
		} else {
			s.lo[d], s.hi[d] = -0.5, float64(L)-0.5
		}
	}
	s.strides = tensor.Strides(s.in)
	s.nTap = map[gridMode]int{gridNearest: 1, gridLinear: 2, gridCubic: 4}[s.mode]
	s.idx = make([][]int, s.r)
	s.w = make([][]float64, s.r)
	for d := range s.idx {
		s.idx[d] = make([]int, s.nTap)
		s.w[d] = make([]float64, s.nTap)
	}
}

// denorm maps a normalised position onto axis d in pixel units.
func (s *gridSampler) denorm(g float64, d int) float64 {
	L := float64(s.in[d])
	var u float64
	if s.align {
		u = (g + 1) / 2 * (L - 1)
	} else {
		u = ((g+1)*L - 1) / 2
	}
	if s.single {
		u = float64(float32(u))
	}
	return u
}

// gridFold folds u into [lo, hi] by repeated mirroring at the ends.
func gridFold(u, lo, hi float64) float64 {
	span := hi - lo
	if span <= 0 {
		return lo
	}
	switch {
	case u < lo:
		dist := lo - u
		k := math.Floor(dist / span)
		rem := dist - k*span
		if math.Mod(k, 2) == 0 {
			return lo + rem
		}
		return hi - rem
	case u > hi:
		dist := u - hi
		k := math.Floor(dist / span)
		rem := dist - k*span
		if math.Mod(k, 2) == 0 {
			return hi - rem
		}
		return lo + rem
	}
	return u
}

// tapIndex resolves a (possibly off-image) integer tap on axis d: −1 means a zero.
// The result is always −1 or inside [0, L), whatever the grid held (NaN, ±Inf).
func (s *gridSampler) tapIndex(i, d int) int {
	L := s.in[d]
	switch s.pad {
	case gridBorder:
		return min(max(i, 0), L-1)
	case gridReflect:
		if i >= 0 && i < L {
			return i
		}
		j := int(gridFold(float64(i), s.lo[d], s.hi[d]))
		return min(max(j, 0), L-1)
	}
	if i < 0 || i >= L {
		return -1
	}
	return i
}

func gridCubicWeight(t float64) float64 { return cubicWeight(t, gridCubicA) }

// point fills offs/ws with the taps of one output point whose grid vector is v
// (innermost axis first).
func (s *gridSampler) point(v []float64) {
	r := s.r
	for d := 0; d < r; d++ {
		u := s.denorm(v[r-1-d], d)
		if s.mode == gridNearest {
			u = math.RoundToEven(u)
		}
		if u < s.lo[d] || u > s.hi[d] {
			switch s.pad {
			case gridBorder:
				u = min(max(u, 0), float64(s.in[d]-1))
			case gridReflect:
				u = gridFold(u, s.lo[d], s.hi[d])
			}
		}
		idx, w := s.idx[d], s.w[d]
		switch s.mode {
		case gridNearest:
			idx[0], w[0] = s.tapIndex(gridTrunc(u), d), 1
		case gridLinear:
			f := math.Floor(u)
			t, i0 := u-f, gridTrunc(f)
			idx[0], w[0] = s.tapIndex(i0, d), 1-t
			idx[1], w[1] = s.tapIndex(i0+1, d), t
		case gridCubic:
			f := math.Floor(u)
			t, i0 := u-f, gridTrunc(f)
			for q := 0; q < 4; q++ {
				idx[q] = s.tapIndex(i0-1+q, d)
			}
			w[0], w[1], w[2], w[3] = gridCubicWeight(t+1), gridCubicWeight(t), gridCubicWeight(1-t), gridCubicWeight(2-t)
		}
	}
	// combine the per-axis taps, dropping zero taps
	s.offs, s.ws = s.offs[:0], s.ws[:0]
	s.combine(0, 0, 1)
}

func (s *gridSampler) combine(d, off int, w float64) {
	if d == s.r {
		s.offs = append(s.offs, off)
		s.ws = append(s.ws, w)
		return
	}
	for q := 0; q < s.nTap; q++ {
		if s.idx[d][q] < 0 {
			continue
		}
		s.combine(d+1, off+s.idx[d][q]*s.strides[d], w*s.w[d][q])
	}
}

// gridTrunc converts an integral (or non-finite) coordinate to int without
// relying on Go's implementation-specific conversion of out-of-range values.
func gridTrunc(u float64) int {
	const lim = 1 << 40
	switch {
	case u != u:
		return -lim
	case u < -lim:
		return -lim
	case u > lim:
		return lim
	}
	return int(u)
}

func gridSampleRun[T Number](s *gridSampler, y, x []T, coords []float64, N, C int) {
	P := len(y)
	if N*C > 0 {
		P /= N * C // output points per (n, c)
	}
	spatial := 1
	for _, L := range s.in {
		spatial *= L
	}
	r := s.r
	for n := 0; n < N; n++ {
		for p := 0; p < P; p++ {
			s.point(coords[(n*P+p)*r : (n*P+p+1)*r])
			for ch := 0; ch < C; ch++ {
				base := (n*C + ch) * spatial
				var acc float64
				for k, o := range s.offs {
					acc += s.ws[k] * float64(x[base+o])
				}
				y[(n*C+ch)*P+p] = T(acc)
			}
		}
	}
}
