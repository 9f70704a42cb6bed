package loader

import (
	"bytes"
	"unsafe"

	"github.com/vitals-health/vitals/tensor"
)

// fromRawNative decodes raw_data on little-endian hosts without converting
// element by element: float32/float64/int64/int32 data reuse the decoded
// message's own byte buffer (the protobuf decoder already copied it out of
// the file; when it is suitably aligned no second copy is made), other wide
// types are copied once (readNative). False where it does not apply
// (big-endian host, half floats, bool).
func fromRawNative(dt tensor.DType, raw []byte, n int) (any, bool) {
	if littleEndianHost && n > 0 && len(raw) == n*dt.Size() {
		p := unsafe.Pointer(&raw[0])
		if uintptr(p)%8 == 0 {
			switch dt {
			case tensor.Float32:
				return unsafe.Slice((*float32)(p), n), true
			case tensor.Float64:
				return unsafe.Slice((*float64)(p), n), true
			case tensor.Int64:
				return unsafe.Slice((*int64)(p), n), true
			case tensor.Int32:
				return unsafe.Slice((*int32)(p), n), true
			}
		}
	}
	data, ok, err := readNative(bytes.NewReader(raw), dt, n)
	if !ok || err != nil {
		return nil, false
	}
	return data, true
}
