package loader

import (
	"io"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"google.golang.org/protobuf/proto"

	"github.com/vitals-health/vitals/loader/onnxpb"
	"github.com/vitals-health/vitals/tensor"
)

func TestSyntheticDeterministic(t *testing.T) {
	a, err := Synthetic([]int{3, 2}, 7, 42)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := Synthetic([]int{3, 2}, 7, 42)
	c, _ := Synthetic([]int{3, 2}, 7, 43)
	// Same seed, different batch sizes: same values.
	xa, xb, xc := drain(t, a, 3), drain(t, b, 5), drain(t, c, 7)
	if !reflect.DeepEqual(xa.Data, xb.Data) {
		t.Error("same seed, different batching: values differ")
	}
	if reflect.DeepEqual(xa.Data, xc.Data) {
		t.Error("different seeds: same values")
	}
	if !reflect.DeepEqual(xa.Shape, []int{7, 3, 2}) {
		t.Errorf("shape %v", xa.Shape)
	}
	for _, bad := range [][]int{{0, 3}, {-1}} {
		if _, err := Synthetic(bad, 1, 0); err == nil {
			t.Errorf("shape %v accepted", bad)
		}
	}
}

// For n i.i.d. N(0,1) draws the sample mean has standard error 1/√n and the
// sample variance 2/√n approximately (Var[s²] = 2/(n−1)); both must lie
// within 4 standard errors.
func TestSyntheticMoments(t *testing.T) {
	src, _ := Synthetic([]int{100}, 1000, 7)
	x := drain(t, src, 256).F32()
	n := float64(len(x))
	var sum, sq float64
	for _, v := range x {
		sum += float64(v)
	}
	mean := sum / n
	for _, v := range x {
		sq += (float64(v) - mean) * (float64(v) - mean)
	}
	variance := sq / (n - 1)
	if math.Abs(mean) > 4/math.Sqrt(n) {
		t.Errorf("mean %v beyond 4σ/√n = %v", mean, 4/math.Sqrt(n))
	}
	if math.Abs(variance-1) > 4*math.Sqrt(2/(n-1)) {
		t.Errorf("variance %v beyond 1 ± %v", variance, 4*math.Sqrt(2/(n-1)))
	}
}

func TestOpenCSV(t *testing.T) {
	dir := t.TempDir()
	write := func(name, body string) string {
		p := filepath.Join(dir, name)
		os.WriteFile(p, []byte(body), 0o644)
		return p
	}
	want := []float32{1, 2.5, -3, 4e-3, 5, 6, 7, 8, 9, 10, 11, float32(math.Inf(1))}
	for name, body := range map[string]string{
		"header.csv":    "\xef\xbb\xbfa,b,c\n1,2.5,-3\n4e-3, 5,6\n7,8,9\n10,11,inf\n",
		"noheader.csv":  "1,2.5,-3\n4e-3,5,6\n7,8,9\n10,11,+Inf",
		"crlf.csv":      "x,y,z\r\n1,2.5,-3\r\n4e-3,5,6\r\n7,8,9\r\n10,11,Inf\r\n",
		"quoted.csv":    "\"a\",\"b\",\"c\"\n\"1\",2.5,-3\n4e-3,5,6\n7,8,9\n10,11,inf\n",
		"blankline.csv": "1,2.5,-3\n\n4e-3,5,6\n7,8,9\n10,11,inf\n",
	} {
		for _, b := range []int{1, 3, 4, 100} {
			src, err := OpenCSV(write(name, body))
			if err != nil {
				t.Fatal(err)
			}
			if src.Len() != -1 || !reflect.DeepEqual(src.SampleShape(), []int{3}) {
				t.Fatalf("%s: Len %d shape %v", name, src.Len(), src.SampleShape())
			}
			x := drain(t, src, b)
			if !reflect.DeepEqual(x.F32(), want) || x.Shape[0] != 4 {
				t.Errorf("%s batch %d: %v %v", name, b, x.Shape, x.F32())
			}
		}
	}
	for name, c := range map[string]struct{ body, want string }{
		"text.csv":    {"a,b\n1,2\n3,x\n", `line 3, column 2 ("b"): "x" is not a number`},
		"empty.csv":   {"1,2\n3,\n", "line 2, column 2: empty cell"},
		"ragged.csv":  {"1,2\n3,4,5\n", "line 2"},
		"range.csv":   {"1,2\n3,1e39\n", "outside float32 range"},
		"nothing.csv": {"", "empty CSV"},
	} {
		src, err := OpenCSV(write(name, c.body))
		if err == nil {
			for err == nil {
				_, err = src.Next(10)
			}
			src.Close()
		}
		if err == nil || err == io.EOF || !strings.Contains(err.Error(), name) || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: want error with %q, got %v", name, c.want, err)
		}
	}
}

func TestOpenTensorPB(t *testing.T) {
	dt := int32(tensor.Float32)
	tp := &onnxpb.TensorProto{Dims: []int64{5, 2}, DataType: &dt, FloatData: []float32{0, 1, 2, 3, 4, 5, 6, 7, 8, 9}}
	b, err := proto.Marshal(tp)
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), "input_0.pb")
	os.WriteFile(p, b, 0o644)
	src, err := OpenFile(p)
	if err != nil {
		t.Fatal(err)
	}
	if src.Len() != 5 || !reflect.DeepEqual(src.SampleShape(), []int{2}) {
		t.Fatalf("Len %d shape %v", src.Len(), src.SampleShape())
	}
	first, _ := src.Next(2)
	first.F32()[0] = 99 // batches are copies
	src2, _ := OpenFile(p)
	x := drain(t, src2, 2)
	if !reflect.DeepEqual(x.F32(), tp.FloatData) {
		t.Errorf("got %v", x.F32())
	}
	src.Close()

	os.WriteFile(p, []byte("\xff\xff\xff"), 0o644)
	if _, err := OpenFile(p); err == nil || !strings.Contains(err.Error(), "input_0.pb") {
		t.Errorf("bad pb: %v", err)
	}
	if _, err := OpenFile(filepath.Join(t.TempDir(), "x.parquet")); err == nil || !strings.Contains(err.Error(), "x.parquet") {
		t.Errorf("unknown extension: %v", err)
	}
	if _, err := NewTensorSource("s", tensor.Scalar(1)); err == nil {
		t.Error("scalar tensor source accepted")
	}
}
