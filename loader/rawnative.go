package loader

import (
	"bytes"

	"vitals/tensor"
)

// fromRawNative decodes raw_data with one memory copy on little-endian hosts
// (readNative); false where it does not apply (big-endian host, half floats, bool).
func fromRawNative(dt tensor.DType, raw []byte, n int) (any, bool) {
	data, ok, err := readNative(bytes.NewReader(raw), dt, n)
	if !ok || err != nil {
		return nil, false
	}
	return data, true
}
