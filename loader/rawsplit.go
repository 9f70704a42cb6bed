package loader

import (
	"runtime"
	"unsafe"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	"github.com/vitals-health/vitals/internal/pages"
	"github.com/vitals-health/vitals/internal/par"
	"github.com/vitals-health/vitals/loader/onnxpb"
)

// Field numbers of onnx.proto walked by splitRawData.
const (
	modelGraphField       = 7 // ModelProto.graph
	graphInitializerField = 5 // GraphProto.initializer
	tensorRawDataField    = 9 // TensorProto.raw_data
)

// splitRawData returns a copy of a serialized ModelProto without the
// raw_data of the main graph's initializers, and those raw_data, one per
// initializer in order (nil where an initializer has none). Weights are
// almost all of a model's bytes; decoding the rest alone and placing the
// weights with placeRawData saves the protobuf decoder's copy of them into
// fresh memory, page fault by page fault. ok is false when b does not
// parse as protobuf wire format (the decoder then reports the error).
func splitRawData(b []byte) (stripped []byte, raws [][]byte, ok bool) {
	stripped = make([]byte, 0, 4096)
	err := walkFields(b, func(num protowire.Number, typ protowire.Type, field, value []byte) bool {
		if num != modelGraphField || typ != protowire.BytesType {
			stripped = append(stripped, field...)
			return true
		}
		graph := make([]byte, 0, 1024)
		inner := walkFields(value, func(num protowire.Number, typ protowire.Type, field, value []byte) bool {
			if num != graphInitializerField || typ != protowire.BytesType {
				graph = append(graph, field...)
				return true
			}
			var tensor []byte
			var raw []byte
			if walkFields(value, func(num protowire.Number, typ protowire.Type, field, value []byte) bool {
				if num == tensorRawDataField && typ == protowire.BytesType {
					raw = value[:len(value):len(value)] // the last occurrence wins, as in the decoder
					return true
				}
				tensor = append(tensor, field...)
				return true
			}) != nil {
				return false
			}
			graph = protowire.AppendTag(graph, graphInitializerField, protowire.BytesType)
			graph = protowire.AppendBytes(graph, tensor)
			raws = append(raws, raw)
			return true
		})
		if inner != nil {
			return false
		}
		stripped = protowire.AppendTag(stripped, modelGraphField, protowire.BytesType)
		stripped = protowire.AppendBytes(stripped, graph)
		return true
	})
	return stripped, raws, err == nil
}

// errWire stops walkFields on malformed input or on request.
type errWire struct{}

func (errWire) Error() string { return "malformed protobuf" }

// walkFields calls f for each field of the message b: its number, wire
// type, whole encoding (tag and value) and, for length-delimited fields,
// the value's bytes. It stops with an error when b is malformed or f
// returns false.
func walkFields(b []byte, f func(num protowire.Number, typ protowire.Type, field, value []byte) bool) error {
	for len(b) > 0 {
		num, typ, n := protowire.ConsumeTag(b)
		if n < 0 {
			return errWire{}
		}
		m := protowire.ConsumeFieldValue(num, typ, b[n:])
		if m < 0 {
			return errWire{}
		}
		var value []byte
		if typ == protowire.BytesType {
			v, k := protowire.ConsumeBytes(b[n:])
			if k < 0 {
				return errWire{}
			}
			value = v
		}
		if !f(num, typ, b[:n+m], value) {
			return errWire{}
		}
		b = b[n+m:]
	}
	return nil
}

// placeRawData copies raws (from splitRawData) into one buffer, each at a
// 64-byte boundary so float data is used in place, with its pages mapped
// in one system call (internal/pages), and hands them to the initializers.
// It reports false, placing nothing, when raws does not match the decoded
// initializers one for one.
func placeRawData(g *onnxpb.GraphProto, raws [][]byte) bool {
	if len(raws) != len(g.GetInitializer()) {
		return false
	}
	total := 0
	for _, r := range raws {
		total += (len(r) + 63) &^ 63
	}
	var arena []byte
	if total > 0 {
		f := pages.Float32s(total / 4)
		arena = unsafe.Slice((*byte)(unsafe.Pointer(&f[0])), total)
	}
	var dsts, srcs [][]byte
	for i, r := range raws {
		if r == nil {
			continue
		}
		n := len(r)
		if n == 0 {
			g.Initializer[i].RawData = []byte{} // present but empty, as the decoder gives it
			continue
		}
		g.Initializer[i].RawData = arena[:n:n]
		dsts, srcs = append(dsts, arena[:n:n]), append(srcs, r)
		arena = arena[(n+63)&^63:]
	}
	parallelCopy(dsts, srcs, total)
	return true
}

// unmarshalModel decodes a serialized ModelProto, its weights split off and
// placed by splitRawData and placeRawData; anything those do not handle is
// decoded whole by the protobuf decoder, whose error is then the one
// returned.
func unmarshalModel(b []byte) (*onnxpb.ModelProto, error) {
	mp := new(onnxpb.ModelProto)
	if stripped, raws, ok := splitRawData(b); ok {
		if proto.Unmarshal(stripped, mp) == nil && placeRawData(mp.Graph, raws) {
			return mp, nil
		}
		mp.Reset()
	}
	return mp, proto.Unmarshal(b, mp)
}

// parallelCopy copies srcs[i] into dsts[i] (total bytes in all), split into
// one contiguous share per core when there are megabytes: the first write
// to each fresh page traps on the virtual machines measured, and the cores
// take their traps side by side.
func parallelCopy(dsts, srcs [][]byte, total int) {
	w := 1
	if total >= 4<<20 {
		w = runtime.GOMAXPROCS(0)
	}
	par.Do(w, func(part int) {
		lo, hi := total*part/w, total*(part+1)/w // this share's bytes, counted over the pieces
		at := 0
		for i, d := range dsts {
			a, b := max(lo-at, 0), min(hi-at, len(d))
			if a < b {
				copy(d[a:b], srcs[i][a:b])
				releaseRead(srcs[i][a:b]) // copied: a mapped file's pages may go
			}
			at += len(d)
		}
	})
}
