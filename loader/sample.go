package loader

import (
	"errors"
	"fmt"
	"io"
	"path/filepath"
	"reflect"
	"sort"
	"strings"
	"sync"

	"github.com/vitals-health/vitals/tensor"
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

// Reuser is a Source that can read later batches into the storage of
// batches the caller is done with (no fresh memory, hence no page faults,
// per batch of a long sample). Reuse(t) promises that nothing reads or
// writes t's data any more.
type Reuser interface {
	Reuse(t *tensor.Tensor)
}

// spares keeps up to two dead batch buffers for a Source's next batches; it
// is safe for one reading goroutine and another giving buffers back.
type spares struct {
	mu   sync.Mutex
	bufs []any
}

// give keeps t's storage (float32 only: the element type of models' inputs).
func (sp *spares) give(t *tensor.Tensor) {
	if t == nil {
		return
	}
	if _, ok := t.Data.([]float32); !ok {
		return
	}
	sp.mu.Lock()
	if len(sp.bufs) < 2 {
		sp.bufs = append(sp.bufs, t.Data)
	}
	sp.mu.Unlock()
}

// take returns a kept buffer of n elements of dt, or nil.
func (sp *spares) take(dt tensor.DType, n int) any {
	if dt != tensor.Float32 {
		return nil
	}
	sp.mu.Lock()
	defer sp.mu.Unlock()
	for i, b := range sp.bufs {
		if f := b.([]float32); len(f) == n {
			sp.bufs = append(sp.bufs[:i], sp.bufs[i+1:]...)
			return f
		}
	}
	return nil
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
