package server

import (
	"context"
	"errors"
	"io"
	"log/slog"
	"net"
	"strings"
	"syscall"

	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/puddle/v2"
	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/aftercast/aftercast/server/store"
)

// toStatus maps an error from the store to a gRPC status. It is the only
// place the service chooses status codes for store errors.
func toStatus(ctx context.Context, log *slog.Logger, err error) error {
	var (
		inv *store.InvalidError
		ce  *pgconn.ConnectError
	)
	switch {
	case err == nil:
		return nil
	case errors.As(err, &inv):
		return badRequest(inv.Violations)
	case errors.Is(err, store.ErrNotFound):
		return status.Error(codes.NotFound, err.Error())
	case errors.Is(err, store.ErrConflict):
		return status.Error(codes.AlreadyExists, err.Error())
	case errors.Is(err, context.Canceled):
		return status.Error(codes.Canceled, "request cancelled")
	case errors.Is(err, context.DeadlineExceeded):
		return status.Error(codes.DeadlineExceeded, "deadline exceeded")
	case errors.As(err, &ce), dbUnavailable(err):
		log.ErrorContext(ctx, "database unreachable", "err", err)
		return status.Error(codes.Unavailable, "database unavailable, retry later")
	}
	log.ErrorContext(ctx, "internal error", "err", err)
	return status.Error(codes.Internal, "internal error")
}

// dbUnavailable reports whether err says the database went away or is not
// accepting work yet — connection lost mid-statement, administrator or
// crash shutdown, recovery, too many connections, the pool closed at
// shutdown — rather than that the request was wrong: a client should retry
// (Unavailable), and an acknowledged write was either committed or not
// acknowledged.
func dbUnavailable(err error) bool {
	var pe *pgconn.PgError
	if errors.As(err, &pe) {
		switch {
		case strings.HasPrefix(pe.Code, "08"), // connection exception
			pe.Code == "57P01", pe.Code == "57P02", pe.Code == "57P03", // admin, crash shutdown; cannot connect now
			pe.Code == "53300": // too many connections
			return true
		}
		return false
	}
	var ne net.Error
	return errors.As(err, &ne) || errors.Is(err, io.ErrUnexpectedEOF) || errors.Is(err, io.EOF) ||
		errors.Is(err, syscall.ECONNRESET) || errors.Is(err, syscall.ECONNREFUSED) || errors.Is(err, puddle.ErrClosedPool) ||
		pgconn.SafeToRetry(err)
}

// badRequest is InvalidArgument with google.rpc.BadRequest field
// violations, falling back to the bare status if details cannot attach.
func badRequest(vs []store.FieldViolation) error {
	msg := "invalid request"
	if len(vs) > 0 {
		msg += ": " + vs[0].Field + ": " + vs[0].Reason
	}
	st := status.New(codes.InvalidArgument, msg)
	br := &errdetails.BadRequest{}
	for _, v := range vs {
		br.FieldViolations = append(br.FieldViolations, &errdetails.BadRequest_FieldViolation{Field: v.Field, Description: v.Reason})
	}
	if d, err := st.WithDetails(br); err == nil {
		return d.Err()
	}
	return st.Err()
}

func invalidArg(field, reason string) error {
	return badRequest([]store.FieldViolation{{Field: field, Reason: reason}})
}
