package loader

import (
	"archive/zip"
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"
	"unsafe"

	"github.com/vitals-health/vitals/tensor"
)

// MaxFortranBytes is the largest Fortran-order (column-major) array a Source
// accepts: such an array cannot be streamed row by row, so it is read whole
// and transposed into C order in memory (twice its size at the peak).
var MaxFortranBytes int64 = 256 << 20

// npyChunk is the raw read size per step of Next: batches are decoded in
// pieces so the raw bytes never need a second batch-sized buffer.
const npyChunk = 1 << 20

// OpenNpy opens a .npy file (format 1.0, 2.0 or 3.0) as a Source along its
// leading axis. Only the header is read here; Next reads the requested rows
// from the file. Fortran-order arrays up to MaxFortranBytes are read whole and
// transposed into C order; larger ones are refused.
func OpenNpy(path string) (Source, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("reading %q: %w", path, err)
	}
	src, err := openNpyFile(path, f)
	if err != nil {
		f.Close()
		return nil, err
	}
	return src, nil
}

func openNpyFile(path string, f *os.File) (Source, error) {
	st, err := f.Stat()
	if err != nil {
		return nil, fmt.Errorf("reading %q: %w", path, err)
	}
	if st.IsDir() {
		return nil, fmt.Errorf("reading %q: is a folder, not a .npy file", path)
	}
	return openNpyStream(path, f, st.Size(), f)
}

// openNpyStream reads the header of a .npy stream of size bytes in total and
// checks that the data its shape implies is present before serving it.
func openNpyStream(name string, r io.Reader, size int64, c io.Closer) (Source, error) {
	h, err := readNpyHeader(r)
	if err != nil {
		return nil, fmt.Errorf("reading %q: %w", name, err)
	}
	if have := size - h.hdrLen; have < h.dataLen {
		return nil, fmt.Errorf("reading %q: truncated: shape %v of %s needs %d data bytes, file has %d", name, h.shape, h.dtype.descr, h.dataLen, max(have, 0))
	}
	return newNpySource(name, r, c, h, false)
}

// ReadNpy reads a whole .npy file into a tensor in C order (for small arrays
// such as labels). Any rank is accepted, including 0.
func ReadNpy(path string) (*tensor.Tensor, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("reading %q: %w", path, err)
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return nil, fmt.Errorf("reading %q: %w", path, err)
	}
	t, err := readNpyAll(bufio.NewReader(f), st.Size())
	if err != nil {
		return nil, fmt.Errorf("reading %q: %w", path, err)
	}
	return t, nil
}

// readNpyAll reads a whole .npy stream of avail bytes in total; the data size
// implied by the header is checked against avail before any allocation.
func readNpyAll(r io.Reader, avail int64) (*tensor.Tensor, error) {
	h, err := readNpyHeader(r)
	if err != nil {
		return nil, err
	}
	if have := avail - h.hdrLen; have < h.dataLen {
		return nil, fmt.Errorf("truncated: shape %v of %s needs %d data bytes, found %d", h.shape, h.dtype.descr, h.dataLen, max(have, 0))
	}
	return readNpyData(r, h)
}

// readNpyData reads the whole array described by h (C order result).
func readNpyData(r io.Reader, h *npyHeader) (*tensor.Tensor, error) {
	data := tensor.MakeSlice(h.dtype.store, h.size)
	if err := readElems(r, data, 0, h.size, h.dtype); err != nil {
		return nil, err
	}
	if h.fortran && len(h.shape) > 1 {
		data = fortranToC(data, h.shape)
	}
	return &tensor.Tensor{DType: h.dtype.store, Shape: append([]int{}, h.shape...), Data: data}, nil
}

// readElems reads n elements of type d from r into dst starting at element off.
func readElems(r io.Reader, dst any, off, n int, d npyDType) error {
	if f, ok := dst.([]float32); ok && d.size == 4 && d.order == binary.LittleEndian && littleEndianHost && n > 0 {
		// the file's bytes are the host's float32s: read them in place
		b := unsafe.Slice((*byte)(unsafe.Pointer(&f[off])), 4*n)
		if _, err := io.ReadFull(r, b); err != nil {
			return fmt.Errorf("reading array data: %w", noEOF(err))
		}
		return nil
	}
	per := max(npyChunk/d.size, 1)
	buf := make([]byte, min(n, per)*d.size)
	for n > 0 {
		k := min(n, per)
		b := buf[:k*d.size]
		if _, err := io.ReadFull(r, b); err != nil {
			return fmt.Errorf("reading array data: %w", noEOF(err))
		}
		npyDecodeInto(dst, off, b, d)
		off += k
		n -= k
	}
	return nil
}

// newNpySource serves the array whose header h has just been read from r.
// strictEnd makes the source read r to its end after the last row and fail on
// extra bytes (this also lets a zip member verify its CRC-32).
func newNpySource(name string, r io.Reader, c io.Closer, h *npyHeader, strictEnd bool) (Source, error) {
	if len(h.shape) == 0 {
		return nil, fmt.Errorf("reading %q: a scalar array has no sample axis; want shape (N, ...)", name)
	}
	if h.fortran && len(h.shape) > 1 {
		if h.dataLen > MaxFortranBytes {
			return nil, fmt.Errorf("reading %q: Fortran-order array of %d bytes exceeds the %d-byte limit for transposing in memory; save it in C order (np.ascontiguousarray)", name, h.dataLen, MaxFortranBytes)
		}
		t, err := readNpyData(r, h)
		if err == nil && strictEnd {
			err = expectEnd(r)
		}
		if err != nil {
			return nil, fmt.Errorf("reading %q: %w", name, err)
		}
		c.Close()
		return NewTensorSource(name, t)
	}
	row, err := tensor.NumElements(h.shape[1:])
	if err != nil {
		return nil, fmt.Errorf("reading %q: sample shape: %w", name, err)
	}
	return &npySource{name: name, r: r, c: c, h: h, row: row, strict: strictEnd}, nil
}

// expectEnd fails unless r is exhausted.
func expectEnd(r io.Reader) error {
	var b [1]byte
	n, err := io.ReadFull(r, b[:])
	if n > 0 {
		return errors.New("unexpected bytes after the array data")
	}
	switch {
	case err == io.EOF:
		return nil
	case errors.Is(err, zip.ErrFormat):
		return errors.New("member decompresses to more bytes than declared (zip bomb or corruption)")
	case errors.Is(err, zip.ErrChecksum):
		return errors.New("member fails its CRC-32 checksum")
	}
	return err
}

// npySource streams a C-order .npy array row block by row block.
type npySource struct {
	name   string
	r      io.Reader
	c      io.Closer
	h      *npyHeader
	row    int // elements per sample
	pos    int // samples served
	strict bool
	done   bool
	spare  spares
}

func (s *npySource) Name() string        { return s.name }
func (s *npySource) SampleShape() []int  { return append([]int{}, s.h.shape[1:]...) }
func (s *npySource) DType() tensor.DType { return s.h.dtype.store }
func (s *npySource) Len() int            { return s.h.shape[0] }

func (s *npySource) Close() error {
	if s.c == nil {
		return nil
	}
	err := s.c.Close()
	s.c, s.r = nil, nil
	return err
}

// Reuse lets a later Next read into t's storage (see Reuser).
func (s *npySource) Reuse(t *tensor.Tensor) { s.spare.give(t) }

func (s *npySource) Next(n int) (*tensor.Tensor, error) {
	if n <= 0 {
		return nil, fmt.Errorf("reading %q: batch size %d", s.name, n)
	}
	if s.r == nil {
		return nil, fmt.Errorf("reading %q: %w", s.name, errClosed)
	}
	total := s.h.shape[0]
	if s.pos >= total {
		if s.strict && !s.done {
			s.done = true
			if err := expectEnd(s.r); err != nil {
				return nil, fmt.Errorf("reading %q: %w", s.name, err)
			}
		}
		return nil, io.EOF
	}
	k := min(n, total-s.pos)
	out := &tensor.Tensor{DType: s.h.dtype.store, Shape: append([]int{k}, s.h.shape[1:]...)}
	out.Data = s.spare.take(out.DType, k*s.row) // every element is read into below
	if out.Data == nil {
		out.Data = tensor.MakeSlice(out.DType, k*s.row)
	}
	if err := readElems(s.r, out.Data, 0, k*s.row, s.h.dtype); err != nil {
		return nil, fmt.Errorf("reading %q: samples %d–%d: %w", s.name, s.pos, s.pos+k-1, err)
	}
	s.pos += k
	return out, nil
}
