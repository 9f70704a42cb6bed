package loader

import (
	"bytes"
	"encoding/binary"
	"errors"
	"io"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/tensor"
)

// f4Fixture is f4_c.npy: float32 (4, 3, 2), x[i] = 0.5*i - 3.
func f4Fixture() *tensor.Tensor {
	d := make([]float32, 24)
	for i := range d {
		d[i] = 0.5*float32(i) - 3
	}
	return tensor.From(d, 4, 3, 2)
}

// The fixtures in testdata were written by NumPy 1.24 (make_fixtures.py).
func TestReadNpyFixtures(t *testing.T) {
	fortran := make([]float64, 12)
	for r := range 3 {
		for c := range 4 {
			fortran[4*r+c] = float64(10*r + c)
		}
	}
	be := make([]int32, 10)
	for r := range 5 {
		for c := range 2 {
			be[2*r+c] = int32((r-2)*1000003 + c)
		}
	}
	v23 := []float32{0.25, 1.25, 2.25, 3.25, 4.25, 5.25}
	u1 := make([]uint8, 12)
	for i := range u1 {
		u1[i] = uint8(20 * i)
	}
	cases := []struct {
		file string
		want *tensor.Tensor
	}{
		{"f4_c.npy", f4Fixture()},
		{"f8_fortran.npy", tensor.From(fortran, 3, 4)},
		{"bool.npy", tensor.From([]bool{true, false, true, false, false, true}, 2, 3)},
		{"i8.npy", tensor.From([]int64{-1 << 62, -1, 0, 7, 1 << 40}, 5)},
		{"be_i4.npy", tensor.From(be, 5, 2)},
		{"be_f4.npy", tensor.From([]float32{1.5, -2.25, 3e38, float32(math.Copysign(0, -1))}, 2, 2)},
		{"f2.npy", tensor.From([]float32{0.5, -2, 65504, 1.0 / (1 << 24)}, 4)},
		{"v2.npy", tensor.From(v23, 2, 3)},
		{"v3.npy", tensor.From(v23, 2, 3)},
		{"u1.npy", tensor.From(u1, 3, 2, 2)},
	}
	for _, c := range cases {
		got, err := ReadNpy(filepath.Join("testdata", c.file))
		if err != nil {
			t.Fatalf("%s: %v", c.file, err)
		}
		if got.DType != c.want.DType || !tensor.SameShape(got.Shape, c.want.Shape) || !reflect.DeepEqual(got.Data, c.want.Data) {
			t.Errorf("%s: got %v %v, want %v %v", c.file, got, got.Data, c.want, c.want.Data)
		}
		if c.file == "be_f4.npy" && !math.Signbit(float64(got.F32()[3])) {
			t.Errorf("be_f4.npy: -0 lost its sign")
		}
		// The streaming reader agrees with the whole-file reader.
		src, err := OpenNpy(filepath.Join("testdata", c.file))
		if err != nil {
			t.Fatalf("%s: %v", c.file, err)
		}
		all := drain(t, src, 2)
		if !reflect.DeepEqual(all.Data, c.want.Data) || !tensor.SameShape(all.Shape, c.want.Shape) {
			t.Errorf("%s streamed: got %v %v, want %v", c.file, all, all.Data, c.want.Data)
		}
	}
}

// NumPy's np.save writes exactly these bytes; WriteNpy must match them.
func TestWriteNpyMatchesNumPy(t *testing.T) {
	for _, c := range []struct {
		file string
		t    *tensor.Tensor
	}{
		{"f4_c.npy", f4Fixture()},
		{"bool.npy", tensor.From([]bool{true, false, true, false, false, true}, 2, 3)},
		{"i8.npy", tensor.From([]int64{-1 << 62, -1, 0, 7, 1 << 40}, 5)},
	} {
		var buf bytes.Buffer
		if err := WriteNpy(&buf, c.t); err != nil {
			t.Fatal(err)
		}
		want, err := os.ReadFile(filepath.Join("testdata", c.file))
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(buf.Bytes(), want) {
			t.Errorf("%s: WriteNpy differs from np.save:\n got %q\nwant %q", c.file, buf.Bytes(), want)
		}
	}
}

// Layout per NumPy's format spec: magic, version 1.0, little-endian uint16
// header length, dict ending in '\n', data at a multiple of 64 bytes.
func TestWriteNpyLayout(t *testing.T) {
	var buf bytes.Buffer
	if err := WriteNpy(&buf, tensor.From([]float64{1, 2, 3}, 3)); err != nil {
		t.Fatal(err)
	}
	b := buf.Bytes()
	if string(b[:6]) != "\x93NUMPY" || b[6] != 1 || b[7] != 0 {
		t.Fatalf("bad preamble %q", b[:8])
	}
	hlen := int(binary.LittleEndian.Uint16(b[8:10]))
	start := 10 + hlen
	if start%64 != 0 || b[start-1] != '\n' {
		t.Errorf("data starts at %d (want multiple of 64), header ends with %q", start, b[start-1])
	}
	if !strings.HasPrefix(string(b[10:]), "{'descr': '<f8', 'fortran_order': False, 'shape': (3,), }") {
		t.Errorf("header %q", b[10:start])
	}
	if len(b) != start+24 || math.Float64frombits(binary.LittleEndian.Uint64(b[start+8:])) != 2 {
		t.Errorf("data: %d bytes", len(b)-start)
	}
}

func writeNpyFile(t *testing.T, dir, name string, tt *tensor.Tensor) string {
	t.Helper()
	var buf bytes.Buffer
	if err := WriteNpy(&buf, tt); err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(dir, name)
	if err := os.WriteFile(p, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// drain reads a source to io.EOF in batches of b and concatenates along axis 0.
func drain(t *testing.T, s Source, b int) *tensor.Tensor {
	t.Helper()
	defer s.Close()
	var parts []*tensor.Tensor
	n := 0
	for {
		x, err := s.Next(b)
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("%s: %v", s.Name(), err)
		}
		if x.Shape[0] < 1 || x.Shape[0] > b || !tensor.SameShape(x.Shape[1:], s.SampleShape()) || x.DType != s.DType() {
			t.Fatalf("%s: batch %v for batch size %d, sample shape %v", s.Name(), x, b, s.SampleShape())
		}
		parts = append(parts, x)
		n += x.Shape[0]
	}
	if _, err := s.Next(b); err != io.EOF {
		t.Fatalf("%s: Next after the end: %v, want io.EOF", s.Name(), err)
	}
	if l := s.Len(); l >= 0 && l != n {
		t.Fatalf("%s: Len %d, served %d", s.Name(), l, n)
	}
	out := tensor.New(s.DType(), append([]int{n}, s.SampleShape()...))
	off := 0
	for _, p := range parts {
		off += tensor.CopyData(sliceRange(out.Data, off, sliceLen(out.Data)), p.Data)
	}
	return out
}

func TestNpyStreamBoundaries(t *testing.T) {
	dir := t.TempDir()
	const n, f = 10, 3
	d := make([]int16, n*f)
	for i := range d {
		d[i] = int16(i*7 - 50)
	}
	p := writeNpyFile(t, dir, "x.npy", tensor.From(d, n, f))
	for _, b := range []int{1, 3, 4, 7, 10, 11, 1000} {
		src, err := OpenNpy(p)
		if err != nil {
			t.Fatal(err)
		}
		if src.Len() != n || !reflect.DeepEqual(src.SampleShape(), []int{f}) || src.DType() != tensor.Int16 {
			t.Fatalf("Len %d shape %v dtype %v", src.Len(), src.SampleShape(), src.DType())
		}
		var sizes []int
		var got []int16
		for {
			x, err := src.Next(b)
			if err == io.EOF {
				break
			}
			if err != nil {
				t.Fatal(err)
			}
			sizes = append(sizes, x.Shape[0])
			got = append(got, x.Data.([]int16)...)
		}
		src.Close()
		if !reflect.DeepEqual(got, d) {
			t.Errorf("batch %d: data differs", b)
		}
		if want := (n + b - 1) / b; len(sizes) != want || sizes[len(sizes)-1] != n-(want-1)*b {
			t.Errorf("batch %d: sizes %v", b, sizes)
		}
	}
}

func TestNpyEmptyAndScalar(t *testing.T) {
	dir := t.TempDir()
	p := writeNpyFile(t, dir, "empty.npy", tensor.From([]float32{}, 0, 5))
	src, err := OpenNpy(p)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := src.Next(4); err != io.EOF {
		t.Errorf("empty: %v", err)
	}
	src.Close()
	p = writeNpyFile(t, dir, "scalar.npy", tensor.From([]float32{3}))
	if _, err := OpenNpy(p); err == nil || !strings.Contains(err.Error(), "scalar.npy") {
		t.Errorf("scalar as source: %v", err)
	}
	if x, err := ReadNpy(p); err != nil || x.Rank() != 0 || x.F32()[0] != 3 {
		t.Errorf("ReadNpy scalar: %v %v", x, err)
	}
}

func TestNpyFortranBudget(t *testing.T) {
	old := MaxFortranBytes
	defer func() { MaxFortranBytes = old }()
	MaxFortranBytes = 64
	_, err := OpenNpy(filepath.Join("testdata", "f8_fortran.npy"))
	if err == nil || !strings.Contains(err.Error(), "f8_fortran.npy") || !strings.Contains(err.Error(), "Fortran") {
		t.Errorf("want a Fortran-order refusal naming the file, got %v", err)
	}
}

func TestNpyMalformed(t *testing.T) {
	good, err := os.ReadFile(filepath.Join("testdata", "f4_c.npy"))
	if err != nil {
		t.Fatal(err)
	}
	hdr := func(dict string) []byte {
		b := []byte("\x93NUMPY\x01\x00\x00\x00" + dict + "\n")
		binary.LittleEndian.PutUint16(b[8:], uint16(len(dict)+1))
		return b
	}
	cases := map[string][]byte{
		"truncated data":   good[:len(good)-1],
		"truncated header": good[:40],
		"bad magic":        append([]byte("\x93NUMPX"), good[6:]...),
		"version 4":        append(append([]byte{}, good[:6]...), append([]byte{4, 0}, good[8:]...)...),
		"structured":       hdr("{'descr': [('a', '<f4')], 'fortran_order': False, 'shape': (1,), }"),
		"object dtype":     hdr("{'descr': '|O', 'fortran_order': False, 'shape': (1,), }"),
		"no shape":         hdr("{'descr': '<f4', 'fortran_order': False, }"),
		"negative dim":     hdr("{'descr': '<f4', 'fortran_order': False, 'shape': (-1,), }"),
		"huge shape":       hdr("{'descr': '<f4', 'fortran_order': False, 'shape': (1099511627776, 1099511627776), }"),
		"huge claim":       hdr("{'descr': '<f8', 'fortran_order': False, 'shape': (1000000000,), }"),
		"garbage":          hdr("{'descr': '<f4', 'fortran_order': Fals, 'shape': (1,), }"),
		"unterminated":     hdr("{'descr': '<f4"),
		"multi-byte pipe":  hdr("{'descr': '|f4', 'fortran_order': False, 'shape': (1,), }"),
	}
	dir := t.TempDir()
	for name, b := range cases {
		p := filepath.Join(dir, strings.ReplaceAll(name, " ", "_")+".npy")
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		_, err1 := ReadNpy(p)
		_, err2 := OpenNpy(p)
		for _, err := range []error{err1, err2} {
			if err == nil || !strings.Contains(err.Error(), filepath.Base(p)) {
				t.Errorf("%s: want an error naming the file, got %v", name, err)
			}
		}
	}
	if _, err := OpenNpy(filepath.Join(dir, "missing.npy")); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("missing file: %v", err)
	}
}

// A batch given back with Reuse is read into again, overwritten in full:
// the stream is the file's values in order whatever storage carries them.
func TestNpyReuse(t *testing.T) {
	dir := t.TempDir()
	const n, f = 11, 5
	d := make([]float32, n*f)
	for i := range d {
		d[i] = float32(i)*0.5 - 3
	}
	p := writeNpyFile(t, dir, "x.npy", tensor.From(d, n, f))
	src, err := OpenNpy(p)
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	r, ok := src.(Reuser)
	if !ok {
		t.Fatal("the .npy source does not take buffers back")
	}
	var got []float32
	var prev *tensor.Tensor
	reused := 0
	for {
		x, err := src.Next(3)
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		if prev != nil && len(prev.F32()) == len(x.F32()) && &prev.F32()[0] == &x.F32()[0] {
			reused++
		}
		got = append(got, x.F32()...)
		for i := range x.F32() {
			x.F32()[i] = -999 // the caller may scribble on a batch it gives back
		}
		r.Reuse(x)
		prev = x
	}
	if !reflect.DeepEqual(got, d) {
		t.Fatalf("values differ: %v", got)
	}
	if reused == 0 {
		t.Fatal("no batch storage was reused")
	}
}
