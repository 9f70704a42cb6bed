package loader

import (
	"bufio"
	"encoding/binary"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"

	"github.com/vitals-health/vitals/tensor"
)

// WriteNpy writes t as a .npy file in C order, little-endian, in the layout
// NumPy's np.save produces: version 1.0 (2.0 when the header exceeds 65535
// bytes), the header dict "{'descr': '<f4', 'fortran_order': False, 'shape': (2, 3), }"
// padded with spaces and a final '\n' so that the data starts at a multiple of
// 64 bytes. String tensors are refused.
func WriteNpy(w io.Writer, t *tensor.Tensor) error {
	descr, ok := npyDescrOf(t.DType)
	if !ok {
		return fmt.Errorf("writing .npy: unsupported dtype %v", t.DType)
	}
	if tensor.DTypeOf(t.Data) != t.DType {
		return fmt.Errorf("writing .npy: dtype %v does not match data %T", t.DType, t.Data)
	}
	if n, err := tensor.NumElements(t.Shape); err != nil || n != sliceLen(t.Data) {
		return fmt.Errorf("writing .npy: shape %v does not match %d elements", t.Shape, sliceLen(t.Data))
	}
	dims := make([]string, len(t.Shape))
	for i, d := range t.Shape {
		dims[i] = strconv.Itoa(d)
	}
	shape := "(" + strings.Join(dims, ", ") + ")"
	if len(dims) == 1 {
		shape = "(" + dims[0] + ",)"
	}
	dict := fmt.Sprintf("{'descr': '%s', 'fortran_order': False, 'shape': %s, }", descr, shape)
	pre := []byte(npyMagic + "\x01\x00\x00\x00")
	if total := len(pre) + len(dict) + 1; (total+63)/64*64-len(pre) > math.MaxUint16 {
		pre = []byte(npyMagic + "\x02\x00\x00\x00\x00\x00")
	}
	hlen := (len(pre)+len(dict)+1+63)/64*64 - len(pre)
	if pre[6] == 1 {
		binary.LittleEndian.PutUint16(pre[8:], uint16(hlen))
	} else {
		binary.LittleEndian.PutUint32(pre[8:], uint32(hlen))
	}
	bw := bufio.NewWriter(w)
	bw.Write(pre)
	bw.WriteString(dict)
	bw.WriteString(strings.Repeat(" ", hlen-len(dict)-1))
	bw.WriteByte('\n')
	var b [8]byte
	le := binary.LittleEndian
	switch s := t.Data.(type) {
	case []float32:
		for _, v := range s {
			le.PutUint32(b[:], math.Float32bits(v))
			bw.Write(b[:4])
		}
	case []float64:
		for _, v := range s {
			le.PutUint64(b[:], math.Float64bits(v))
			bw.Write(b[:8])
		}
	case []int8:
		for _, v := range s {
			bw.WriteByte(byte(v))
		}
	case []uint8:
		bw.Write(s)
	case []bool:
		for _, v := range s {
			if v {
				bw.WriteByte(1)
			} else {
				bw.WriteByte(0)
			}
		}
	case []int16:
		for _, v := range s {
			le.PutUint16(b[:], uint16(v))
			bw.Write(b[:2])
		}
	case []uint16:
		for _, v := range s {
			le.PutUint16(b[:], v)
			bw.Write(b[:2])
		}
	case []int32:
		for _, v := range s {
			le.PutUint32(b[:], uint32(v))
			bw.Write(b[:4])
		}
	case []uint32:
		for _, v := range s {
			le.PutUint32(b[:], v)
			bw.Write(b[:4])
		}
	case []int64:
		for _, v := range s {
			le.PutUint64(b[:], uint64(v))
			bw.Write(b[:8])
		}
	case []uint64:
		for _, v := range s {
			le.PutUint64(b[:], v)
			bw.Write(b[:8])
		}
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("writing .npy: %w", err)
	}
	return nil
}
