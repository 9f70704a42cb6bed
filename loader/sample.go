package loader

import (
	"errors"
	"fmt"
	"io"
	"path/filepath"
	"reflect"
	"sort"
	"strings"

	"vitals/tensor"
)

// Source yields the samples of one model input, batch by batch, in order.
// Next is called sequentially; a Source is not safe for concurrent use.
type Source interface {
	Name() string                       // file or folder it reads (for messages)
	SampleShape() []int                 // shape of one sample (without the leading sample axis)
	DType() tensor.DType                // element type of the batches
	Len() int                           // number of samples (-1 if unknown)
	Next(n int) (*tensor.Tensor, error) // next up to n samples as [k, SampleShape...]; io.EOF when done
	Close() error
}

// OpenFile opens a sample file chosen by its extension (case-insensitive):
// .npy (streamed), .pb (an ONNX TensorProto, read whole), .csv (see OpenCSV),
// and .npz when it holds exactly one array (use OpenNpz for several inputs).
// The leading axis of the array is the sample axis.
func OpenFile(path string) (Source, error) {
	switch strings.ToLower(filepath.Ext(path)) {
	case ".npy":
		return OpenNpy(path)
	case ".pb":
		return OpenTensorPB(path)
	case ".csv":
		return OpenCSV(path)
	case ".npz":
		m, err := OpenNpz(path)
		if err != nil {
			return nil, err
		}
		if len(m) == 1 {
			for _, s := range m {
				return s, nil
			}
		}
		names := make([]string, 0, len(m))
		for k, s := range m {
			names = append(names, k)
			s.Close()
		}
		sort.Strings(names)
		return nil, fmt.Errorf("reading %q: archive holds %d arrays %v; name one per model input (INPUT=PATH)", path, len(m), names)
	}
	return nil, fmt.Errorf("reading %q: unknown sample format (want .npy, .npz, .pb or .csv, or a folder of images)", path)
}

// OpenTensorPB reads a serialized ONNX TensorProto (the ONNX test-data .pb
// format) whole and serves it along axis 0.
func OpenTensorPB(path string) (Source, error) {
	t, _, err := DecodeTensorFile(path)
	if err != nil {
		return nil, err
	}
	return NewTensorSource(path, t)
}

// NewTensorSource serves an in-memory tensor sample by sample along axis 0.
// Batches are copies; t itself is never handed out. A rank-0 tensor is refused.
func NewTensorSource(name string, t *tensor.Tensor) (Source, error) {
	if t.Rank() == 0 {
		return nil, fmt.Errorf("reading %q: a scalar has no sample axis; want shape [N, ...]", name)
	}
	if tensor.DTypeOf(t.Data) != t.DType || sliceLen(t.Data) != t.Size() {
		return nil, fmt.Errorf("reading %q: tensor %v has inconsistent data %T", name, t, t.Data)
	}
	if _, err := tensor.NumElements(t.Shape[1:]); err != nil {
		return nil, fmt.Errorf("reading %q: sample shape: %w", name, err)
	}
	return &tensorSource{name: name, t: t}, nil
}

type tensorSource struct {
	name string
	t    *tensor.Tensor
	pos  int
}

func (s *tensorSource) Name() string        { return s.name }
func (s *tensorSource) SampleShape() []int  { return append([]int{}, s.t.Shape[1:]...) }
func (s *tensorSource) DType() tensor.DType { return s.t.DType }
func (s *tensorSource) Len() int            { return s.t.Shape[0] }
func (s *tensorSource) Close() error {
	s.t = &tensor.Tensor{DType: s.t.DType, Shape: s.t.Shape}
	return nil
}

func (s *tensorSource) Next(n int) (*tensor.Tensor, error) {
	if n <= 0 {
		return nil, fmt.Errorf("reading %q: batch size %d", s.name, n)
	}
	if s.t.Data == nil {
		return nil, fmt.Errorf("reading %q: %w", s.name, errClosed)
	}
	total := s.t.Shape[0]
	if s.pos >= total {
		return nil, io.EOF
	}
	k := min(n, total-s.pos)
	row := 1
	for _, d := range s.t.Shape[1:] {
		row *= d
	}
	out := &tensor.Tensor{DType: s.t.DType, Shape: append([]int{k}, s.t.Shape[1:]...)}
	out.Data = tensor.MakeSlice(s.t.DType, k*row)
	tensor.CopyData(out.Data, sliceRange(s.t.Data, s.pos*row, (s.pos+k)*row))
	s.pos += k
	return out, nil
}

var errClosed = errors.New("source is closed")

// sliceLen is the length of a typed slice held in an any.
func sliceLen(data any) int {
	v := reflect.ValueOf(data)
	if v.Kind() != reflect.Slice {
		return 0
	}
	return v.Len()
}

// sliceRange is data[lo:hi] for a typed slice held in an any.
func sliceRange(data any, lo, hi int) any {
	return reflect.ValueOf(data).Slice(lo, hi).Interface()
}
