package server

import (
	"context"

	"google.golang.org/grpc"

	"github.com/aftercast/aftercast/server/store"
)

// nameRule is the series key and model rule of the protos.
const nameRule = "want 1–200 characters of A-Z a-z 0-9 _ . : / -"

type (
	seriesNamed interface{ GetSeries() string }
	modelNamed  interface{ GetModel() string }
	keyNamed    interface{ GetKey() string }
)

// checkNames refuses a request whose series key or model (a name, or a
// filter where "" means all) breaks the naming rule, and so names nothing
// that could be stored. It runs for every RPC and every message of a
// stream before the handler sees it: some such names (with a NUL byte)
// are valid UTF-8 that PostgreSQL refuses as text, which would otherwise
// surface as an internal error.
func checkNames(req any) error {
	bad := func(s string) bool { return s != "" && !store.ValidKey(s) }
	if r, ok := req.(seriesNamed); ok && bad(r.GetSeries()) {
		return invalidArg("series", nameRule)
	}
	if r, ok := req.(keyNamed); ok && bad(r.GetKey()) {
		return invalidArg("key", nameRule)
	}
	if r, ok := req.(modelNamed); ok && bad(r.GetModel()) {
		return invalidArg("model", nameRule)
	}
	return nil
}

func unaryNames(ctx context.Context, req any, _ *grpc.UnaryServerInfo, next grpc.UnaryHandler) (any, error) {
	if err := checkNames(req); err != nil {
		return nil, err
	}
	return next(ctx, req)
}

func streamNames(srv any, ss grpc.ServerStream, _ *grpc.StreamServerInfo, next grpc.StreamHandler) error {
	return next(srv, namesStream{ss})
}

// namesStream checks every message a stream receives.
type namesStream struct{ grpc.ServerStream }

func (s namesStream) RecvMsg(m any) error {
	if err := s.ServerStream.RecvMsg(m); err != nil {
		return err
	}
	return checkNames(m)
}
