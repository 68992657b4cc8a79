package watch

import (
	"context"
	"errors"
	"net"
	"reflect"
	"strconv"
	"sync"
	"testing"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/status"
)

// fakeDrift plays the WatchDriftEvents contract over a fixed log of
// events with tokens "1".."n": a stream replays every event after its
// resume token ("" = from the start), then waits as if for new ones. The
// first breaks streams fail with UNAVAILABLE after sending breakAfter
// events each, as when the service restarts.
type fakeDrift struct {
	aftercastv1.UnimplementedDriftServiceServer
	n          int
	breakAfter int
	breaks     int
	fail       error // every stream fails with this at once

	mu      sync.Mutex
	streams int
	resumed []string // the resume token of each stream
}

func (f *fakeDrift) WatchDriftEvents(req *aftercastv1.WatchDriftEventsRequest, s grpc.ServerStreamingServer[aftercastv1.WatchDriftEventsResponse]) error {
	f.mu.Lock()
	f.streams++
	broken := f.streams <= f.breaks
	f.resumed = append(f.resumed, req.GetResumeToken())
	f.mu.Unlock()
	if f.fail != nil {
		return f.fail
	}
	after := 0
	if tok := req.GetResumeToken(); tok != "" {
		var err error
		if after, err = strconv.Atoi(tok); err != nil {
			return status.Error(codes.InvalidArgument, "malformed token")
		}
	}
	sent := 0
	for i := after + 1; i <= f.n; i++ {
		if broken && sent == f.breakAfter {
			return status.Error(codes.Unavailable, "service restarting")
		}
		l := int32(i % 3)
		ev := &aftercastv1.DriftEvent{Token: strconv.Itoa(i), Series: "s", Model: "m", Lead: &l, NewState: aftercastv1.DriftState_DRIFT_STATE_DEGRADED}
		if err := s.Send(&aftercastv1.WatchDriftEventsResponse{Event: ev}); err != nil {
			return err
		}
		sent++
	}
	<-s.Context().Done()
	return nil
}

func serve(t *testing.T, f *fakeDrift) aftercastv1.DriftServiceClient {
	t.Helper()
	var lc net.ListenConfig
	lis, err := lc.Listen(t.Context(), "tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	s := grpc.NewServer()
	aftercastv1.RegisterDriftServiceServer(s, f)
	served := make(chan error, 1)
	go func() { served <- s.Serve(lis) }()
	t.Cleanup(func() {
		s.Stop()
		if err := <-served; err != nil {
			t.Errorf("serving: %v", err)
		}
	})
	conn, err := grpc.NewClient(lis.Addr().String(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close() })
	return aftercastv1.NewDriftServiceClient(conn)
}

// follow runs Events until it has handled want events or fails, and
// returns the tokens handled and the reconnections reported.
func follow(t *testing.T, c aftercastv1.DriftServiceClient, resume string, want int) ([]string, []string, error) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	var got, retried []string
	err := Events(ctx, c, &aftercastv1.WatchDriftEventsRequest{Series: "s", ResumeToken: resume},
		func(e *aftercastv1.DriftEvent) error {
			got = append(got, e.GetToken())
			if len(got) == want {
				cancel()
			}
			return nil
		},
		Options{MinBackoff: time.Millisecond, MaxBackoff: 4 * time.Millisecond, Retrying: func(err error, token string, wait time.Duration) {
			if status.Code(err) != codes.Unavailable || wait <= 0 || wait > 5*time.Millisecond {
				t.Errorf("retrying after %v in %v", err, wait)
			}
			retried = append(retried, token)
		}})
	if errors.Is(ctx.Err(), context.DeadlineExceeded) {
		t.Fatalf("timed out with %v", got)
	}
	return got, retried, err
}

func tokens(from, to int) []string {
	var out []string
	for i := from; i <= to; i++ {
		out = append(out, strconv.Itoa(i))
	}
	return out
}

func TestEventsResumesAfterTheLastEventHandled(t *testing.T) {
	t.Parallel()
	f := &fakeDrift{n: 7, breakAfter: 2, breaks: 1}
	got, retried, err := follow(t, serve(t, f), "", 7)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got, tokens(1, 7)) {
		t.Errorf("handled %v, want 1..7 without gaps or repeats", got)
	}
	f.mu.Lock()
	defer f.mu.Unlock()
	if !reflect.DeepEqual(f.resumed, []string{"", "2"}) || !reflect.DeepEqual(retried, []string{"2"}) {
		t.Errorf("streams resumed after %q, reconnections reported after %q; want [\"\" \"2\"] and [\"2\"]", f.resumed, retried)
	}
}

func TestEventsSurvivesRepeatedBreaks(t *testing.T) {
	t.Parallel()
	// Resuming after event 1, three streams break after two events each.
	f := &fakeDrift{n: 6, breakAfter: 2, breaks: 3}
	got, _, err := follow(t, serve(t, f), "1", 5)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got, tokens(2, 6)) {
		t.Errorf("handled %v, want 2..6", got)
	}
	f.mu.Lock()
	defer f.mu.Unlock()
	if !reflect.DeepEqual(f.resumed, []string{"1", "3", "5"}) {
		t.Errorf("streams resumed after %q, want [1 3 5]", f.resumed)
	}
}

func TestEventsStopsOnAStatusReconnectingCannotFix(t *testing.T) {
	t.Parallel()
	f := &fakeDrift{n: 3}
	_, _, err := follow(t, serve(t, f), "not-a-number", 3)
	if status.Code(err) != codes.InvalidArgument {
		t.Errorf("error %v, want INVALID_ARGUMENT", err)
	}
	f.mu.Lock()
	defer f.mu.Unlock()
	if f.streams != 1 {
		t.Errorf("%d streams, want 1 (no retry)", f.streams)
	}
}

func TestEventsReturnsTheHandlersError(t *testing.T) {
	t.Parallel()
	f := &fakeDrift{n: 3}
	stop := errors.New("stdout closed")
	err := Events(context.Background(), serve(t, f), &aftercastv1.WatchDriftEventsRequest{},
		func(e *aftercastv1.DriftEvent) error { return stop }, Options{})
	if !errors.Is(err, stop) {
		t.Errorf("error %v, want the handler's", err)
	}
}

func TestEventsEndsWithTheContext(t *testing.T) {
	t.Parallel()
	// A service that is down: the follower waits between attempts until
	// it is told to stop, then returns no error.
	f := &fakeDrift{fail: status.Error(codes.Unavailable, "down")}
	ctx, cancel := context.WithTimeout(context.Background(), 200*time.Millisecond)
	defer cancel()
	err := Events(ctx, serve(t, f), &aftercastv1.WatchDriftEventsRequest{},
		func(e *aftercastv1.DriftEvent) error { return nil }, Options{MinBackoff: 10 * time.Millisecond, MaxBackoff: 40 * time.Millisecond})
	if err != nil {
		t.Errorf("error %v, want nil once the context is done", err)
	}
	f.mu.Lock()
	defer f.mu.Unlock()
	if f.streams < 2 || f.streams > 12 {
		t.Errorf("%d attempts in 200ms with 10-40ms waits", f.streams)
	}
}

func TestTransient(t *testing.T) {
	t.Parallel()
	for _, c := range []struct {
		err  error
		want bool
	}{
		{ErrEnded, true},
		{status.Error(codes.Unavailable, ""), true},
		{status.Error(codes.Internal, "stream reset"), true},
		{status.Error(codes.InvalidArgument, ""), false},
		{status.Error(codes.Unimplemented, ""), false},
		{status.Error(codes.PermissionDenied, ""), false},
	} {
		if got := Transient(c.err); got != c.want {
			t.Errorf("Transient(%v) = %v", c.err, got)
		}
	}
}
