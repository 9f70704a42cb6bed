package loader

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"strconv"
	"strings"

	"github.com/vitals-health/vitals/tensor"
)

// NumPy .npy format (versions 1.0, 2.0 and 3.0), as documented in NumPy's
// format specification (numpy.lib.format):
//
//	bytes 0–5   magic "\x93NUMPY"
//	byte  6, 7  major, minor version
//	v1.0:       2-byte little-endian header length HLEN
//	v2.0, v3.0: 4-byte little-endian header length HLEN
//	HLEN bytes  a Python dict literal {'descr': '<f4', 'fortran_order': False, 'shape': (N, ...), }
//	            padded with spaces and ended by '\n' (v3.0 allows UTF-8, v1/v2 ASCII);
//	            writers pad so that the data starts at a multiple of 64 bytes
//	data        the array's elements, C (row-major) or Fortran (column-major) order.
const npyMagic = "\x93NUMPY"

// maxNpyHeader bounds the header length we accept (NumPy itself refuses headers
// above 10000 bytes by default; a real header is well under 200 bytes).
const maxNpyHeader = 1 << 16

// npyHeader is a parsed .npy header.
type npyHeader struct {
	dtype   npyDType
	fortran bool
	shape   []int
	size    int   // element count
	hdrLen  int64 // bytes before the data (magic, version, length, dict)
	dataLen int64 // bytes of data implied by dtype and shape
}

// npyDType is one supported NumPy element type.
type npyDType struct {
	descr string           // as written in the file, e.g. "<f4"
	kind  byte             // 'f' float, 'i' signed, 'u' unsigned, 'b' bool
	size  int              // bytes per element in the file
	order binary.ByteOrder // byte order in the file
	store tensor.DType     // tensor type it is loaded as (float16 widens to float32)
}

// parseNpyDescr maps a NumPy type string to its element type. Accepted:
// byte orders '<' (little), '>' (big), '|' (not applicable, one-byte types) and
// '=' (native; NumPy never writes it, read as little-endian); kinds f2 f4 f8,
// i1 i2 i4 i8, u1 u2 u4 u8, b1. float16 is widened to float32.
func parseNpyDescr(s string) (npyDType, error) {
	if len(s) < 3 {
		return npyDType{}, fmt.Errorf("unsupported dtype %q", s)
	}
	d := npyDType{descr: s, kind: s[1]}
	switch s[0] {
	case '<', '=':
		d.order = binary.LittleEndian
	case '>':
		d.order = binary.BigEndian
	case '|':
		d.order = binary.LittleEndian
	default:
		return npyDType{}, fmt.Errorf("unsupported dtype %q (unknown byte order)", s)
	}
	n, err := strconv.Atoi(s[2:])
	if err != nil {
		return npyDType{}, fmt.Errorf("unsupported dtype %q", s)
	}
	d.size = n
	stores := map[string]tensor.DType{
		"f2": tensor.Float32, "f4": tensor.Float32, "f8": tensor.Float64,
		"i1": tensor.Int8, "i2": tensor.Int16, "i4": tensor.Int32, "i8": tensor.Int64,
		"u1": tensor.Uint8, "u2": tensor.Uint16, "u4": tensor.Uint32, "u8": tensor.Uint64,
		"b1": tensor.Bool,
	}
	st, ok := stores[s[1:]]
	if !ok {
		return npyDType{}, fmt.Errorf("unsupported dtype %q (supported: float16/32/64, int8–64, uint8–64, bool)", s)
	}
	if s[0] == '|' && n != 1 {
		return npyDType{}, fmt.Errorf("unsupported dtype %q ('|' byte order on a multi-byte type)", s)
	}
	d.store = st
	return d, nil
}

// readNpyHeader reads the magic, version and header dict from r, leaving r at
// the first data byte. It validates the shape (non-negative, bounded product).
func readNpyHeader(r io.Reader) (*npyHeader, error) {
	var pre [10]byte
	if _, err := io.ReadFull(r, pre[:8]); err != nil {
		return nil, fmt.Errorf("not a .npy file: %w", noEOF(err))
	}
	if string(pre[:6]) != npyMagic {
		return nil, errors.New("not a .npy file (bad magic)")
	}
	major, minor := pre[6], pre[7]
	var hlen int64
	var pos int64
	switch major {
	case 1:
		if _, err := io.ReadFull(r, pre[8:10]); err != nil {
			return nil, fmt.Errorf("truncated .npy header: %w", noEOF(err))
		}
		hlen = int64(binary.LittleEndian.Uint16(pre[8:10]))
		pos = 10
	case 2, 3:
		var l [4]byte
		if _, err := io.ReadFull(r, l[:]); err != nil {
			return nil, fmt.Errorf("truncated .npy header: %w", noEOF(err))
		}
		hlen = int64(binary.LittleEndian.Uint32(l[:]))
		pos = 12
	default:
		return nil, fmt.Errorf("unsupported .npy format version %d.%d", major, minor)
	}
	if hlen > maxNpyHeader {
		return nil, fmt.Errorf(".npy header of %d bytes exceeds the %d-byte limit", hlen, maxNpyHeader)
	}
	buf := make([]byte, hlen)
	if _, err := io.ReadFull(r, buf); err != nil {
		return nil, fmt.Errorf("truncated .npy header: %w", noEOF(err))
	}
	h, err := parseNpyDict(string(buf))
	if err != nil {
		return nil, fmt.Errorf("bad .npy header: %w", err)
	}
	h.hdrLen = pos + hlen
	return h, nil
}

// noEOF turns a premature io.EOF into io.ErrUnexpectedEOF (a truncated file is an error).
func noEOF(err error) error {
	if err == io.EOF {
		return io.ErrUnexpectedEOF
	}
	return err
}

// parseNpyDict interprets the header dict literal.
func parseNpyDict(s string) (*npyHeader, error) {
	p := &pyParser{s: s}
	v, err := p.value(0)
	if err != nil {
		return nil, err
	}
	p.skipSpace()
	if p.i != len(p.s) {
		return nil, fmt.Errorf("unexpected %q after the header dict", p.rest())
	}
	dict, ok := v.(map[string]any)
	if !ok {
		return nil, errors.New("header is not a dict")
	}
	h := &npyHeader{}
	switch d := dict["descr"].(type) {
	case string:
		if h.dtype, err = parseNpyDescr(d); err != nil {
			return nil, err
		}
	case nil:
		return nil, errors.New("header has no 'descr'")
	default:
		return nil, errors.New("structured dtypes (record arrays) are not supported; save a plain numeric array")
	}
	fo, ok := dict["fortran_order"].(bool)
	if !ok {
		return nil, errors.New("header has no boolean 'fortran_order'")
	}
	h.fortran = fo
	shp, ok := dict["shape"].([]any)
	if !ok {
		return nil, errors.New("header has no tuple 'shape'")
	}
	h.shape = make([]int, len(shp))
	for i, d := range shp {
		n, ok := d.(int64)
		if !ok || n < 0 || n > tensor.MaxElements {
			return nil, fmt.Errorf("bad dimension %v in shape", d)
		}
		h.shape[i] = int(n)
	}
	if h.size, err = tensor.NumElements(h.shape); err != nil {
		return nil, err
	}
	h.dataLen = int64(h.size) * int64(h.dtype.size)
	return h, nil
}

// pyParser reads the subset of Python literals a .npy header uses: dicts,
// tuples, lists, single- or double-quoted strings without escapes, integers
// (an old "L" suffix allowed), True, False and None.
type pyParser struct {
	s string
	i int
}

func (p *pyParser) rest() string {
	r := p.s[p.i:]
	if len(r) > 20 {
		r = r[:20] + "…"
	}
	return r
}

func (p *pyParser) skipSpace() {
	for p.i < len(p.s) && strings.IndexByte(" \t\r\n", p.s[p.i]) >= 0 {
		p.i++
	}
}

// value parses one literal; depth bounds nesting.
func (p *pyParser) value(depth int) (any, error) {
	if depth > 8 {
		return nil, errors.New("header nests too deeply")
	}
	p.skipSpace()
	if p.i >= len(p.s) {
		return nil, errors.New("header ends early")
	}
	switch c := p.s[p.i]; {
	case c == '{':
		p.i++
		m := map[string]any{}
		for {
			p.skipSpace()
			if p.i < len(p.s) && p.s[p.i] == '}' {
				p.i++
				return m, nil
			}
			k, err := p.value(depth + 1)
			if err != nil {
				return nil, err
			}
			ks, ok := k.(string)
			if !ok {
				return nil, errors.New("dict key is not a string")
			}
			if err := p.expect(':'); err != nil {
				return nil, err
			}
			v, err := p.value(depth + 1)
			if err != nil {
				return nil, err
			}
			if _, dup := m[ks]; dup {
				return nil, fmt.Errorf("duplicate key %q", ks)
			}
			m[ks] = v
			if done, err := p.sep('}'); err != nil || done {
				return m, err
			}
		}
	case c == '(' || c == '[':
		closer := byte(')')
		if c == '[' {
			closer = ']'
		}
		p.i++
		var list []any
		list = []any{}
		for {
			p.skipSpace()
			if p.i < len(p.s) && p.s[p.i] == closer {
				p.i++
				return list, nil
			}
			v, err := p.value(depth + 1)
			if err != nil {
				return nil, err
			}
			list = append(list, v)
			if done, err := p.sep(closer); err != nil || done {
				return list, err
			}
		}
	case c == '\'' || c == '"':
		end := strings.IndexByte(p.s[p.i+1:], c)
		if end < 0 {
			return nil, errors.New("unterminated string")
		}
		v := p.s[p.i+1 : p.i+1+end]
		if strings.IndexByte(v, '\\') >= 0 {
			return nil, errors.New("escaped strings are not supported")
		}
		p.i += end + 2
		return v, nil
	case c >= '0' && c <= '9' || c == '-':
		j := p.i + 1
		for j < len(p.s) && p.s[j] >= '0' && p.s[j] <= '9' {
			j++
		}
		n, err := strconv.ParseInt(p.s[p.i:j], 10, 64)
		if err != nil {
			return nil, fmt.Errorf("bad integer %q", p.s[p.i:j])
		}
		if j < len(p.s) && (p.s[j] == 'L' || p.s[j] == 'l') {
			j++
		}
		p.i = j
		return n, nil
	default:
		for _, w := range []struct {
			s string
			v any
		}{{"True", true}, {"False", false}, {"None", nil}} {
			if strings.HasPrefix(p.s[p.i:], w.s) {
				p.i += len(w.s)
				return w.v, nil
			}
		}
		return nil, fmt.Errorf("unexpected %q", p.rest())
	}
}

// expect consumes optional space and then byte c.
func (p *pyParser) expect(c byte) error {
	p.skipSpace()
	if p.i >= len(p.s) || p.s[p.i] != c {
		return fmt.Errorf("expected %q at %q", c, p.rest())
	}
	p.i++
	return nil
}

// sep consumes ',' (more may follow) or the closer (done).
func (p *pyParser) sep(closer byte) (bool, error) {
	p.skipSpace()
	if p.i < len(p.s) {
		switch p.s[p.i] {
		case ',':
			p.i++
			return false, nil
		case closer:
			p.i++
			return true, nil
		}
	}
	return false, fmt.Errorf("expected ',' or %q at %q", closer, p.rest())
}
