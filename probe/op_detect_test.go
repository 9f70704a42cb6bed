package probe

import (
	"fmt"
	"math"
	"reflect"
	"strings"
	"testing"
	"time"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// Detection operators (NonMaxSuppression, RoiAlign): small hand-checked
// results beyond the conformance data, and bad inputs that must give an
// error naming the problem, never a panic.

// detectRun runs one kernel through shapeRun, turning a panic into an error
// that fails the test.
func detectRun(t *testing.T, op string, opset int, attrs map[string]*loader.Attr, ins ...*tensor.Tensor) (out *tensor.Tensor, err error) {
	t.Helper()
	defer func() {
		if r := recover(); r != nil {
			t.Errorf("%s panicked: %v", op, r)
			err = fmt.Errorf("panic: %v", r)
		}
	}()
	outs, err := shapeRun(op, opset, attrs, 1, ins...)
	if err != nil {
		return nil, err
	}
	return outs[0], nil
}

func detectInt(name string, v int64) *loader.Attr {
	return &loader.Attr{Name: name, Kind: loader.AttrInt, I: v}
}

func detectFloat(name string, v float32) *loader.Attr {
	return &loader.Attr{Name: name, Kind: loader.AttrFloat, F: v}
}

func detectWantErr(t *testing.T, what string, err error, words ...string) {
	t.Helper()
	if err == nil {
		t.Errorf("%s: no error", what)
		return
	}
	for _, w := range words {
		if !strings.Contains(err.Error(), w) {
			t.Errorf("%s: error %q does not mention %q", what, err, w)
		}
	}
}

func TestNonMaxSuppressionSelects(t *testing.T) {
	// box 1 overlaps box 0 with IoU 0.81 (suppressed at 0.5), box 2 is apart;
	// class 1 ranks them the other way; box 3 has zero area and suppresses nothing
	boxes := tensor.From([]float32{
		0, 0, 1, 1,
		1, 1.1, 0, 0.1, // corners given in the other order
		0, 5, 1, 6,
		2, 2, 2, 3,
	}, 1, 4, 4)
	scores := tensor.From([]float32{
		0.9, 0.8, 0.7, 0.1,
		0.2, 0.95, 0.95, 0.6,
	}, 1, 2, 4)
	maxOut := tensor.From([]int64{10})
	iou := tensor.From([]float32{0.5})
	for _, opset := range []int{10, 11} {
		got, err := detectRun(t, "NonMaxSuppression", opset, nil, boxes, scores, maxOut, iou)
		if err != nil {
			t.Fatal(err)
		}
		want := []int64{0, 0, 0, 0, 0, 2, 0, 0, 3, 0, 1, 1, 0, 1, 2, 0, 1, 3}
		if !reflect.DeepEqual(got.Shape, []int{6, 3}) || !reflect.DeepEqual(got.I64(), want) {
			t.Errorf("opset %d: got %v %v, want [6 3] %v", opset, got.Shape, got.I64(), want)
		}
	}
	// score_threshold keeps scores strictly above it; max_output_boxes_per_class caps each class
	got, err := detectRun(t, "NonMaxSuppression", 11, nil, boxes, scores, tensor.From([]int64{1}), iou, tensor.From([]float32{0.9}))
	if err != nil {
		t.Fatal(err)
	}
	if want := []int64{0, 1, 1}; !reflect.DeepEqual(got.I64(), want) {
		t.Errorf("with score_threshold 0.9 and at most 1 box: got %v, want %v", got.I64(), want)
	}
	// without max_output_boxes_per_class nothing is selected
	got, err = detectRun(t, "NonMaxSuppression", 11, nil, boxes, scores)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got.Shape, []int{0, 3}) {
		t.Errorf("default max_output_boxes_per_class: shape %v, want [0 3]", got.Shape)
	}
	// center_point_box = 1: [x_center, y_center, width, height]
	centered := tensor.From([]float32{0.5, 0.5, 1, 1, 0.6, 0.5, 1, 1, 5, 5, 1, 1}, 1, 3, 4)
	got, err = detectRun(t, "NonMaxSuppression", 11, map[string]*loader.Attr{"center_point_box": detectInt("center_point_box", 1)},
		centered, tensor.From([]float32{0.5, 0.9, 0.1}, 1, 1, 3), maxOut, iou)
	if err != nil {
		t.Fatal(err)
	}
	if want := []int64{0, 0, 1, 0, 0, 2}; !reflect.DeepEqual(got.I64(), want) {
		t.Errorf("center_point_box 1: got %v, want %v", got.I64(), want)
	}
	// a NaN score ranks below every number: boxes 3, 1, then 0 and 2 (box 0
	// overlaps box 1, which the default iou_threshold 0 suppresses)
	nan := float32(math.NaN())
	got, err = detectRun(t, "NonMaxSuppression", 11, nil, boxes, tensor.From([]float32{nan, 0.1, nan, 0.2}, 1, 1, 4), maxOut)
	if err != nil {
		t.Fatal(err)
	}
	if want := []int64{0, 0, 3, 0, 0, 1, 0, 0, 2}; !reflect.DeepEqual(got.I64(), want) {
		t.Errorf("NaN scores: got %v, want %v", got.I64(), want)
	}
}

func TestNonMaxSuppressionBadInputs(t *testing.T) {
	boxes := tensor.From([]float32{0, 0, 1, 1, 0, 0, 2, 2}, 1, 2, 4)
	scores := tensor.From([]float32{0.9, 0.8}, 1, 1, 2)
	maxOut := tensor.From([]int64{3})
	for _, c := range []struct {
		name  string
		attrs map[string]*loader.Attr
		ins   []*tensor.Tensor
		words []string
	}{
		{"boxes of rank 2", nil, []*tensor.Tensor{tensor.From([]float32{0, 0, 1, 1}, 1, 4), scores, maxOut}, []string{"boxes", "[1 4]"}},
		{"boxes with 5 coordinates", nil, []*tensor.Tensor{tensor.New(tensor.Float32, []int{1, 2, 5}), scores, maxOut}, []string{"boxes", "4]"}},
		{"scores of rank 2", nil, []*tensor.Tensor{boxes, tensor.From([]float32{0.9, 0.8}, 1, 2), maxOut}, []string{"scores", "[1 2]"}},
		{"scores for 3 boxes", nil, []*tensor.Tensor{boxes, tensor.New(tensor.Float32, []int{1, 1, 3}), maxOut}, []string{"scores", "[1 1 3]", "[1 2 4]"}},
		{"scores for 2 batches", nil, []*tensor.Tensor{boxes, tensor.New(tensor.Float32, []int{2, 1, 2}), maxOut}, []string{"scores", "[2 1 2]"}},
		{"integer boxes", nil, []*tensor.Tensor{tensor.New(tensor.Int64, []int{1, 2, 4}), scores, maxOut}, []string{"boxes", "int64"}},
		{"max_output_boxes_per_class of 2 elements", nil, []*tensor.Tensor{boxes, scores, tensor.From([]int64{1, 2}, 2)}, []string{"max_output_boxes_per_class", "scalar"}},
		{"float max_output_boxes_per_class", nil, []*tensor.Tensor{boxes, scores, tensor.From([]float32{3})}, []string{"max_output_boxes_per_class", "integer"}},
		{"iou_threshold of 2 elements", nil, []*tensor.Tensor{boxes, scores, maxOut, tensor.From([]float32{0.5, 0.5}, 2)}, []string{"iou_threshold", "scalar"}},
		{"center_point_box 2", map[string]*loader.Attr{"center_point_box": detectInt("center_point_box", 2)}, []*tensor.Tensor{boxes, scores, maxOut}, []string{"center_point_box", "2"}},
		{"missing scores", nil, []*tensor.Tensor{boxes}, []string{"input 1"}},
	} {
		_, err := detectRun(t, "NonMaxSuppression", 11, c.attrs, c.ins...)
		detectWantErr(t, c.name, err, c.words...)
	}
}

func TestRoiAlignValues(t *testing.T) {
	// X = [[0, 1], [2, 3]]; the RoI (0, 0)–(1, 1) with one sample per bin
	x := tensor.From([]float32{0, 1, 2, 3}, 1, 1, 2, 2)
	rois := tensor.From([]float32{0, 0, 1, 1}, 1, 4)
	bi := tensor.From([]int64{0}, 1)
	one := detectInt("sampling_ratio", 1)
	for _, c := range []struct {
		name  string
		opset int
		attrs map[string]*loader.Attr
		want  float32
	}{
		// opset 10 does not shift: the sample at (0.5, 0.5) averages all four pixels
		{"opset 10 avg", 10, map[string]*loader.Attr{"sampling_ratio": one}, 1.5},
		// max takes the largest weighted corner: 0.25·3
		{"opset 10 max", 10, map[string]*loader.Attr{"sampling_ratio": one, "mode": shapeStrAttr("mode", "max")}, 0.75},
		// half_pixel (the opset-16 default) shifts by −0.5: the sample lands on pixel (0, 0)
		{"opset 16 half_pixel", 16, map[string]*loader.Attr{"sampling_ratio": one}, 0},
		{"opset 16 output_half_pixel", 16, map[string]*loader.Attr{"sampling_ratio": one,
			"coordinate_transformation_mode": shapeStrAttr("coordinate_transformation_mode", "output_half_pixel")}, 1.5},
		// spatial_scale 0.5 maps the RoI (0, 0)–(2, 2) onto the same one
		{"spatial_scale", 10, map[string]*loader.Attr{"sampling_ratio": one, "spatial_scale": detectFloat("spatial_scale", 0.5)}, 1.5},
	} {
		r := rois
		if c.name == "spatial_scale" {
			r = tensor.From([]float32{0, 0, 2, 2}, 1, 4)
		}
		got, err := detectRun(t, "RoiAlign", c.opset, c.attrs, x, r, bi)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if !reflect.DeepEqual(got.Shape, []int{1, 1, 1, 1}) || math.Abs(float64(got.F32()[0]-c.want)) > 1e-6 {
			t.Errorf("%s: got %v %v, want %v", c.name, got.Shape, got.F32(), c.want)
		}
	}
	// a RoI wholly outside the map, and a map without pixels, read zeros
	for _, c := range []struct {
		name string
		x    *tensor.Tensor
		roi  []float32
	}{
		{"RoI outside", x, []float32{10, 10, 12, 12}},
		{"empty map", tensor.New(tensor.Float32, []int{1, 1, 0, 0}), []float32{0, 0, 1, 1}},
	} {
		got, err := detectRun(t, "RoiAlign", 16, map[string]*loader.Attr{"output_height": detectInt("output_height", 2)},
			c.x, tensor.From(c.roi, 1, 4), bi)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if !reflect.DeepEqual(got.Shape, []int{1, 1, 2, 1}) || !reflect.DeepEqual(got.F32(), []float32{0, 0}) {
			t.Errorf("%s: got %v %v, want [1 1 2 1] zeros", c.name, got.Shape, got.F32())
		}
	}
}

func TestRoiAlignBadInputs(t *testing.T) {
	x := tensor.New(tensor.Float32, []int{2, 3, 8, 8})
	rois := tensor.From([]float32{0, 0, 4, 4, 1, 1, 6, 6}, 2, 4)
	bi := tensor.From([]int64{0, 1}, 2)
	attr := func(a *loader.Attr) map[string]*loader.Attr { return map[string]*loader.Attr{a.Name: a} }
	for _, c := range []struct {
		name  string
		attrs map[string]*loader.Attr
		ins   []*tensor.Tensor
		words []string
	}{
		{"batch index past N", nil, []*tensor.Tensor{x, rois, tensor.From([]int64{0, 2}, 2)}, []string{"batch_indices[1] = 2", "[0, 2)"}},
		{"negative batch index", nil, []*tensor.Tensor{x, rois, tensor.From([]int64{-1, 0}, 2)}, []string{"batch_indices[0] = -1"}},
		{"batch_indices of another length", nil, []*tensor.Tensor{x, rois, tensor.From([]int64{0}, 1)}, []string{"batch_indices", "[2]"}},
		{"float batch_indices", nil, []*tensor.Tensor{x, rois, tensor.From([]float32{0, 1}, 2)}, []string{"batch_indices", "float32"}},
		{"X of rank 3", nil, []*tensor.Tensor{tensor.New(tensor.Float32, []int{3, 8, 8}), rois, bi}, []string{"X", "rank 4"}},
		{"rois of rank 1", nil, []*tensor.Tensor{x, tensor.From([]float32{0, 0, 4, 4}, 4), tensor.From([]int64{0}, 1)}, []string{"rois", "[num_rois, 4]"}},
		{"rois with 5 columns", nil, []*tensor.Tensor{x, tensor.New(tensor.Float32, []int{2, 5}), bi}, []string{"rois", "[2 5]"}},
		{"NaN RoI", nil, []*tensor.Tensor{x, tensor.From([]float32{0, 0, 4, 4, 0, float32(math.NaN()), 4, 4}, 2, 4), bi}, []string{"rois[1]", "non-finite"}},
		{"mode min", attr(shapeStrAttr("mode", "min")), []*tensor.Tensor{x, rois, bi}, []string{"mode", `"min"`}},
		{"coordinate_transformation_mode", attr(shapeStrAttr("coordinate_transformation_mode", "align_corners")), []*tensor.Tensor{x, rois, bi}, []string{"coordinate_transformation_mode", "align_corners"}},
		{"output_height 0", attr(detectInt("output_height", 0)), []*tensor.Tensor{x, rois, bi}, []string{"output_height"}},
		{"negative sampling_ratio", attr(detectInt("sampling_ratio", -2)), []*tensor.Tensor{x, rois, bi}, []string{"sampling_ratio", "-2"}},
		{"missing batch_indices", nil, []*tensor.Tensor{x, rois}, []string{"input 2"}},
	} {
		_, err := detectRun(t, "RoiAlign", 16, c.attrs, c.ins...)
		detectWantErr(t, c.name, err, c.words...)
	}
	// RoIs in image pixels pooled with spatial_scale 1 instead of 1/16 fail fast instead of sampling for hours
	start := time.Now()
	_, err := detectRun(t, "RoiAlign", 16, nil, x, tensor.From([]float32{0, 0, 4e9, 4e9}, 1, 4), tensor.From([]int64{0}, 1))
	detectWantErr(t, "huge RoI", err, "rois[0]", "sampling grid", "spatial_scale")
	if d := time.Since(start); d > 5*time.Second {
		t.Errorf("huge RoI took %v to refuse", d)
	}
}

// Through a plan, a kernel's complaint names the node.
func TestDetectErrorsNameTheNode(t *testing.T) {
	m := graphModel(map[string]*tensor.Tensor{
		"rois": tensor.From([]float32{0, 0, 1, 1}, 1, 4),
		"bi":   tensor.From([]int64{5}, 1),
	}, []string{"y"}, &loader.Node{Name: "pool_rois", OpType: "RoiAlign", Inputs: []string{"x", "rois", "bi"}, Outputs: []string{"y"}})
	p, err := Compile(m)
	if err != nil {
		t.Fatal(err)
	}
	_, err = p.Run(map[string]*tensor.Tensor{"x": tensor.New(tensor.Float32, []int{1, 1, 4, 4})}, nil)
	detectWantErr(t, "RoiAlign in a plan", err, `node "pool_rois"`, "batch_indices[0] = 5")
}
