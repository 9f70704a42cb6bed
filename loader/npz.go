package loader

import (
	"archive/zip"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
	"sync"
)

// maxDeflateRatio bounds a deflated member's declared uncompressed size by its
// compressed size: DEFLATE cannot expand by more than about 1032:1 (a 258-byte
// match costs at least two bits), so a larger claim is a zip bomb or corruption.
const maxDeflateRatio = 1032

// OpenNpz opens a NumPy .npz archive (a zip of .npy members, stored or
// deflated, as written by np.savez and np.savez_compressed) and returns one
// streaming Source per .npy member, keyed by the member name without ".npy".
// Members that are not .npy files are ignored.
//
// Safety checks, per member: a name that is absolute or contains ".." is
// refused; the declared uncompressed size must equal the npy header's length
// plus the data size its dtype and shape imply, and (deflated) must be at most
// 1032 times the compressed size; reading stops at the implied size and any
// extra decompressed byte, as well as a CRC-32 mismatch, is an error.
//
// Each Source reads its member sequentially; the archive file is closed once
// every Source has been closed.
func OpenNpz(path string) (map[string]Source, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("reading %q: %w", path, err)
	}
	st, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, fmt.Errorf("reading %q: %w", path, err)
	}
	return openNpz(path, f, st.Size(), f)
}

// openNpz reads an archive of size bytes from ra; c is closed when the last
// Source is closed or on error.
func openNpz(name string, ra io.ReaderAt, size int64, c io.Closer) (map[string]Source, error) {
	zr, err := zip.NewReader(ra, size)
	if err != nil && !errors.Is(err, zip.ErrInsecurePath) {
		c.Close()
		return nil, fmt.Errorf("reading %q: not a valid .npz (zip) archive: %w", name, err)
	}
	shared := &refCloser{c: c}
	out := map[string]Source{}
	fail := func(err error) (map[string]Source, error) {
		for _, s := range out {
			s.Close()
		}
		shared.release()
		return nil, err
	}
	shared.count = 1 // held by openNpz until the loop ends
	for _, zf := range zr.File {
		member := zf.Name
		if err := checkMemberName(member); err != nil {
			return fail(fmt.Errorf("reading %q: member %q: %w", name, member, err))
		}
		if strings.HasSuffix(member, "/") || !strings.HasSuffix(member, ".npy") {
			continue
		}
		key := strings.TrimSuffix(member, ".npy")
		if _, dup := out[key]; dup {
			return fail(fmt.Errorf("reading %q: member %q appears twice", name, member))
		}
		label := fmt.Sprintf("%s[%s]", name, member)
		src, err := openNpzMember(label, zf, size, shared)
		if err != nil {
			return fail(err)
		}
		out[key] = src
	}
	if len(out) == 0 {
		return fail(fmt.Errorf("reading %q: no .npy arrays in the archive", name))
	}
	shared.release()
	return out, nil
}

// openNpzMember checks one member's sizes and reads its npy header.
func openNpzMember(label string, zf *zip.File, archiveSize int64, shared *refCloser) (Source, error) {
	comp, unc := zf.CompressedSize64, zf.UncompressedSize64
	if comp > uint64(archiveSize) {
		return nil, fmt.Errorf("reading %q: declares %d compressed bytes in a %d-byte archive", label, comp, archiveSize)
	}
	switch zf.Method {
	case zip.Store:
		if unc != comp {
			return nil, fmt.Errorf("reading %q: stored member declares %d bytes but occupies %d", label, unc, comp)
		}
	case zip.Deflate:
		if unc > comp*maxDeflateRatio+64 {
			return nil, fmt.Errorf("reading %q: declares %d uncompressed bytes from %d compressed (ratio above %d:1; zip bomb?)", label, unc, comp, maxDeflateRatio)
		}
	default:
		return nil, fmt.Errorf("reading %q: unsupported zip compression method %d (want stored or deflated)", label, zf.Method)
	}
	rc, err := zf.Open()
	if err != nil {
		return nil, fmt.Errorf("reading %q: %w", label, err)
	}
	h, err := readNpyHeader(rc)
	if err != nil {
		rc.Close()
		return nil, fmt.Errorf("reading %q: %w", label, err)
	}
	if implied := uint64(h.hdrLen) + uint64(h.dataLen); implied != unc {
		rc.Close()
		return nil, fmt.Errorf("reading %q: declares %d uncompressed bytes, but its header and shape %v of %s imply %d", label, unc, h.shape, h.dtype.descr, implied)
	}
	mc := shared.ref(rc)
	src, err := newNpySource(label, rc, mc, h, true)
	if err != nil {
		mc.Close()
		return nil, err
	}
	return src, nil
}

// checkMemberName refuses names that would leave an extraction folder:
// absolute paths (leading '/' or '\', a drive letter) and ".." components.
func checkMemberName(name string) error {
	if name == "" {
		return errors.New("empty member name")
	}
	if name[0] == '/' || name[0] == '\\' || (len(name) > 1 && name[1] == ':') {
		return errors.New("absolute member path refused")
	}
	for _, part := range strings.FieldsFunc(name, func(r rune) bool { return r == '/' || r == '\\' }) {
		if part == ".." {
			return errors.New("member path with \"..\" refused")
		}
	}
	return nil
}

// refCloser closes c when the last reference is released.
type refCloser struct {
	mu    sync.Mutex
	c     io.Closer
	count int
}

func (r *refCloser) release() error {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.count--
	if r.count == 0 && r.c != nil {
		err := r.c.Close()
		r.c = nil
		return err
	}
	return nil
}

// ref returns a closer for one member: it closes the member reader and
// releases one reference to the archive.
func (r *refCloser) ref(member io.Closer) io.Closer {
	r.mu.Lock()
	r.count++
	r.mu.Unlock()
	return &memberCloser{member: member, shared: r}
}

type memberCloser struct {
	member io.Closer
	shared *refCloser
	once   sync.Once
}

func (m *memberCloser) Close() error {
	var err error
	m.once.Do(func() {
		err = m.member.Close()
		if e := m.shared.release(); err == nil {
			err = e
		}
	})
	return err
}
