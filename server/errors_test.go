package server

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"syscall"
	"testing"

	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/puddle/v2"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/aftercast/aftercast/server/store"
)

// Faults of the database reach clients as Unavailable, which they retry;
// a wrong request stays InvalidArgument and anything else Internal.
func TestDatabaseFaultsAreUnavailable(t *testing.T) {
	t.Parallel()
	log := slog.New(slog.DiscardHandler)
	wrap := func(err error) error { return fmt.Errorf("storing actuals: %w", err) }
	for _, c := range []struct {
		name string
		err  error
		want codes.Code
	}{
		{"admin shutdown", &pgconn.PgError{Code: "57P01", Message: "terminating connection due to administrator command"}, codes.Unavailable},
		{"crash shutdown", &pgconn.PgError{Code: "57P02"}, codes.Unavailable},
		{"recovering", &pgconn.PgError{Code: "57P03", Message: "the database system is in recovery mode"}, codes.Unavailable},
		{"connection failure", &pgconn.PgError{Code: "08006"}, codes.Unavailable},
		{"too many connections", &pgconn.PgError{Code: "53300"}, codes.Unavailable},
		{"connection lost mid-statement", io.ErrUnexpectedEOF, codes.Unavailable},
		{"reset", &net.OpError{Op: "read", Net: "tcp", Err: syscall.ECONNRESET}, codes.Unavailable},
		{"refused", syscall.ECONNREFUSED, codes.Unavailable},
		{"pool closed at shutdown", puddle.ErrClosedPool, codes.Unavailable},
		{"a constraint", &pgconn.PgError{Code: "23505"}, codes.Internal},
		{"a bug", errors.New("index out of range"), codes.Internal},
		{"invalid", &store.InvalidError{Violations: []store.FieldViolation{{Field: "x", Reason: "y"}}}, codes.InvalidArgument},
		{"not found", store.ErrNotFound, codes.NotFound},
	} {
		if got := status.Code(toStatus(context.Background(), log, wrap(c.err))); got != c.want {
			t.Errorf("%s: %v, want %v", c.name, got, c.want)
		}
	}
}
