package server

import (
	"encoding/base64"
	"encoding/binary"
	"hash/fnv"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/reflect/protoreflect"
)

// A page token is opaque to clients: the position where the page ended and
// a fingerprint of the request it continues, so that a token passed with
// another request (another series, filter or range) is refused with a
// message instead of silently skipping items.

// fingerprint hashes a listing request without its paging fields.
func fingerprint(req proto.Message) uint32 {
	m := proto.Clone(req).ProtoReflect()
	fields := m.Descriptor().Fields()
	for _, name := range []protoreflect.Name{"page_token", "page_size"} {
		if fd := fields.ByName(name); fd != nil {
			m.Clear(fd)
		}
	}
	b, _ := proto.MarshalOptions{Deterministic: true}.Marshal(m.Interface())
	h := fnv.New32a()
	h.Write(b)
	return h.Sum32()
}

// encodePage makes the token of a page of req ending at pos.
func encodePage(pos []byte, req proto.Message) string {
	b := binary.AppendUvarint(nil, uint64(len(pos)))
	b = append(b, pos...)
	b = binary.LittleEndian.AppendUint32(b, fingerprint(req))
	return base64.RawURLEncoding.EncodeToString(b)
}

// decodePage returns the position of req's page token; nil for none.
func decodePage(req interface {
	proto.Message
	GetPageToken() string
}) ([]byte, error) {
	tok := req.GetPageToken()
	if tok == "" {
		return nil, nil
	}
	b, err := base64.RawURLEncoding.DecodeString(tok)
	if err == nil {
		n, k := binary.Uvarint(b)
		if k > 0 && uint64(len(b)) == uint64(k)+n+4 {
			if binary.LittleEndian.Uint32(b[uint64(k)+n:]) != fingerprint(req) {
				return nil, invalidArg("page_token", "this token continues another request (other filters, series or range): "+
					"repeat that request, or start this one without a page token")
			}
			return b[k : uint64(k)+n], nil
		}
	}
	return nil, invalidArg("page_token", "not a token this service issued: start without a page token and pass on next_page_token")
}

// badToken is the refusal of a position that does not decode.
func badToken() error {
	return invalidArg("page_token", "not a token this service issued: start without a page token and pass on next_page_token")
}
