package api

import (
	"google.golang.org/grpc/encoding"
	"google.golang.org/grpc/encoding/proto"
	"google.golang.org/grpc/mem"
	"google.golang.org/protobuf/encoding/protowire"
	protov2 "google.golang.org/protobuf/proto"

	pb "github.com/residua/residua/proto/residua/v1"
)

// Field numbers of the repeated vector references of a SolveRequest (see
// the .proto), which requestCodec counts before decoding.
const (
	solveRHSField protowire.Number = 2
	solveX0Field  protowire.Number = 3
)

// requestCodec is the server's codec: the standard protobuf one, except that
// a SolveRequest's right-hand sides and starting guesses are counted in the
// encoded bytes before any is decoded. An empty VectorRef takes 2 bytes on
// the wire and about 70 once decoded (the message, its oneof and the
// slice's pointer), so a 2 MB request of a million empty references would
// cost some 70 MB before the handler could refuse it. Past maxRHS, only the
// first maxRHS+1 references of each list are decoded, and the handler
// refuses the request for having more than maxRHS (RESOURCE_EXHAUSTED).
type requestCodec struct {
	base   encoding.CodecV2
	maxRHS int
}

func newRequestCodec(maxRHS int) requestCodec {
	return requestCodec{base: encoding.GetCodecV2(proto.Name), maxRHS: maxRHS}
}

func (c requestCodec) Name() string { return proto.Name }

func (c requestCodec) Marshal(v any) (mem.BufferSlice, error) { return c.base.Marshal(v) }

func (c requestCodec) Unmarshal(data mem.BufferSlice, v any) error {
	req, ok := v.(*pb.SolveRequest)
	if !ok {
		return c.base.Unmarshal(data, v)
	}
	var b []byte
	if len(data) == 1 {
		b = data[0].ReadOnlyData() // no copy of a message that came in one piece
	} else {
		buf := data.MaterializeToBuffer(mem.DefaultBufferPool())
		defer buf.Free()
		b = buf.ReadOnlyData()
	}
	if trimmed, cut := keepRefs(b, c.maxRHS+1); cut {
		b = trimmed
	}
	return protov2.Unmarshal(b, req)
}

// keepRefs returns b without the right-hand-side and starting-guess fields
// past the first keep of each, and whether any was cut. Malformed bytes are
// returned as they are, for the decoder to refuse.
func keepRefs(b []byte, keep int) ([]byte, bool) {
	var rhs, x0 int
	for rest := b; len(rest) > 0; {
		num, typ, n := protowire.ConsumeTag(rest)
		if n < 0 {
			return b, false
		}
		m := protowire.ConsumeFieldValue(num, typ, rest[n:])
		if m < 0 {
			return b, false
		}
		rest = rest[n+m:]
		switch num {
		case solveRHSField:
			rhs++
		case solveX0Field:
			x0++
		}
	}
	if rhs <= keep && x0 <= keep {
		return b, false
	}
	out := make([]byte, 0, min(len(b), 1<<20))
	rhs, x0 = 0, 0
	for rest := b; len(rest) > 0; {
		num, typ, n := protowire.ConsumeTag(rest)
		m := protowire.ConsumeFieldValue(num, typ, rest[n:])
		field := rest[:n+m]
		rest = rest[n+m:]
		switch num {
		case solveRHSField:
			if rhs++; rhs > keep {
				continue
			}
		case solveX0Field:
			if x0++; x0 > keep {
				continue
			}
		}
		out = append(out, field...)
	}
	return out, true
}
