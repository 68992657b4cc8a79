// Package watch follows the drift events of DriftService.WatchDriftEvents
// for as long as the caller wants, across broken streams: when a stream
// fails with a status that a new attempt may fix (UNAVAILABLE, as when the
// service restarts or closes an old connection) or ends, it reconnects
// after a growing, jittered wait, passing the token of the last event it
// handed over as the resume token. The service then replays what was
// committed in between, so no event is missed or repeated.
//
// It owns only the reconnecting; what to do with an event, and how to
// report a reconnection, are the caller's.
package watch

import (
	"context"
	"errors"
	"io"
	"math/rand/v2"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
)

// Options tune the reconnecting. The zero value is ready to use.
type Options struct {
	// MinBackoff is the wait before the first reconnection (default
	// 500ms); it doubles after each attempt that delivered no event, up
	// to MaxBackoff (default 30s), and starts over after one that did
	// (or that stayed connected longer than MaxBackoff).
	MinBackoff, MaxBackoff time.Duration
	// Retrying, when not nil, is told why a stream ended, the token it
	// will resume after ("" = none yet) and how long it waits.
	Retrying func(err error, token string, wait time.Duration)
}

// ErrEnded is what Retrying is told when the service ended a stream,
// which it should never do while the client listens.
var ErrEnded = errors.New("the service ended the stream")

// Events hands every event the service streams for req to handle, in
// commit order, starting after req.ResumeToken. It returns nil when ctx
// is done, handle's error when handle fails (the event is not counted as
// handled), and the error of a stream that failed with a status
// reconnecting cannot fix, such as INVALID_ARGUMENT for a malformed token.
func Events(ctx context.Context, c aftercastv1.DriftServiceClient, req *aftercastv1.WatchDriftEventsRequest,
	handle func(*aftercastv1.DriftEvent) error, o Options) error {
	minWait := o.MinBackoff
	if minWait <= 0 {
		minWait = 500 * time.Millisecond
	}
	maxWait := o.MaxBackoff
	if maxWait <= 0 {
		maxWait = 30 * time.Second
	}
	maxWait = max(maxWait, minWait)
	req = proto.CloneOf(req)
	wait := minWait
	for {
		start := time.Now()
		got, err, herr := attempt(ctx, c, req, handle)
		switch {
		case ctx.Err() != nil:
			return nil //nolint:nilerr // documented: following ends without error when ctx is done
		case herr != nil:
			return herr
		case !Transient(err):
			return err
		}
		if got || time.Since(start) > maxWait {
			wait = minWait
		}
		// Jitter by ±20%, so that the clients of a restarted service do
		// not all come back at once.
		d := time.Duration(float64(wait) * (0.8 + 0.4*rand.Float64()))
		if o.Retrying != nil {
			o.Retrying(err, req.GetResumeToken(), d)
		}
		t := time.NewTimer(d)
		select {
		case <-ctx.Done():
			t.Stop()
			return nil
		case <-t.C:
		}
		wait = min(wait*2, maxWait)
	}
}

// attempt runs one stream until it breaks, advancing req.ResumeToken past
// every event handled. got says whether it handled any; err is why the
// stream ended, herr handle's error.
func attempt(ctx context.Context, c aftercastv1.DriftServiceClient, req *aftercastv1.WatchDriftEventsRequest,
	handle func(*aftercastv1.DriftEvent) error) (got bool, err, herr error) {
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	stream, err := c.WatchDriftEvents(ctx, req)
	if err != nil {
		return false, err, nil
	}
	for {
		resp, err := stream.Recv()
		if errors.Is(err, io.EOF) {
			return got, ErrEnded, nil
		}
		if err != nil {
			return got, err, nil
		}
		ev := resp.GetEvent()
		if ev == nil {
			continue
		}
		if err := handle(ev); err != nil {
			return got, nil, err
		}
		got = true
		if ev.GetToken() != "" {
			req.ResumeToken = ev.GetToken()
		}
	}
}

// Transient reports whether a stream that ended with err is worth
// opening again: it ended, or failed with a status that says the service
// or the path to it had trouble, not that the request is wrong.
func Transient(err error) bool {
	if errors.Is(err, ErrEnded) {
		return true
	}
	switch status.Code(err) {
	case codes.Unavailable, codes.Unknown, codes.Internal, codes.Aborted, codes.ResourceExhausted,
		codes.DeadlineExceeded, codes.Canceled:
		return true
	}
	return false
}
