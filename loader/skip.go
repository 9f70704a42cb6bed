package loader

import (
	"fmt"
	"io"
)

// Skipper is a Source that can pass over samples without decoding them
// (a shard of a sample starts after the samples of the shards before it).
// Skip(n) moves past the next n samples, or fewer at the end (then io.EOF).
type Skipper interface {
	Skip(n int) error
}

// Skip moves past n files without decoding them.
func (s *imageSource) Skip(n int) error {
	if s.closed {
		return fmt.Errorf("reading images in %q: %w", s.dir, errClosed)
	}
	s.pos += min(n, len(s.files)-s.pos)
	if s.pos == len(s.files) && n > 0 {
		return io.EOF
	}
	return nil
}

// Skip moves past n samples of the array's bytes (seeking when the file
// allows it, otherwise reading and dropping them: an .npz member).
func (s *npySource) Skip(n int) error {
	if s.r == nil {
		return fmt.Errorf("reading %q: %w", s.name, errClosed)
	}
	k := min(n, s.h.shape[0]-s.pos)
	bytes := int64(k) * int64(s.row) * int64(s.h.dtype.size)
	if sk, ok := s.r.(io.Seeker); ok {
		if _, err := sk.Seek(bytes, io.SeekCurrent); err != nil {
			return fmt.Errorf("reading %q: skipping samples %d–%d: %w", s.name, s.pos, s.pos+k-1, err)
		}
	} else if _, err := io.CopyN(io.Discard, s.r, bytes); err != nil {
		return fmt.Errorf("reading %q: skipping samples %d–%d: %w", s.name, s.pos, s.pos+k-1, noEOF(err))
	}
	s.pos += k
	if k < n {
		return io.EOF
	}
	return nil
}

// Skip moves past n rows of the in-memory array.
func (s *tensorSource) Skip(n int) error {
	k := min(n, s.t.Shape[0]-s.pos)
	s.pos += k
	if k < n {
		return io.EOF
	}
	return nil
}
