package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/driftreport"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/watch"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"
)

func runDrift(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("drift", "", stderr)
	cf := addClientFlags(fs)
	series := fs.String("series", "", "only this series (default all)")
	model := fs.String("model", "", "only this model (default all)")
	format := fs.String("format", "table", "output: table or json")
	_, err := parseExactly(fs, args, 0)
	if err != nil {
		return err
	}
	if err := tableOrJSON(*format); err != nil {
		return err
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	all, err := listDriftStates(context.Background(), cf, aftercastv1.NewDriftServiceClient(conn), *series, *model)
	if err != nil {
		return err
	}
	if *format == "json" {
		return driftreport.WriteJSON(stdout, driftreport.ToStates(all))
	}
	return driftreport.WriteStates(stdout, all)
}

// listDriftStates reads every page of drift states ("" selects all).
func listDriftStates(ctx context.Context, cf *clientFlags, client aftercastv1.DriftServiceClient, series, model string) ([]*aftercastv1.SeriesModelDrift, error) {
	var all []*aftercastv1.SeriesModelDrift
	for token := ""; ; {
		cctx, cancel := context.WithTimeout(ctx, cf.timeout)
		resp, err := client.ListDriftStates(cctx, &aftercastv1.ListDriftStatesRequest{Series: series, Model: model, PageSize: 1000, PageToken: token})
		cancel()
		if err != nil {
			return nil, cf.rpcError(err, "")
		}
		all = append(all, resp.GetStates()...)
		if token = resp.GetNextPageToken(); token == "" {
			return all, nil
		}
	}
}

// eventFilter chooses the events of `aftercast events`.
type eventFilter struct {
	series, model string
	since         time.Time // zero: all
}

func runEvents(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("events", "", stderr)
	cf := addClientFlags(fs)
	var q eventFilter
	fs.StringVar(&q.series, "series", "", "only this series (default all)")
	fs.StringVar(&q.model, "model", "", "only this model (default all)")
	fs.Func("since", "only events at or after this RFC 3339 time, or this long ago (such as 24h)", func(v string) error {
		if d, err := time.ParseDuration(v); err == nil && d >= 0 {
			q.since = time.Now().Add(-d)
			return nil
		}
		t, err := time.Parse(time.RFC3339Nano, v)
		if err != nil {
			return fmt.Errorf("want an RFC 3339 time such as 2026-01-31T05:00:00Z, or a duration such as 24h")
		}
		q.since = t
		return nil
	})
	format := fs.String("format", "table", "output: table or json (with --follow, one JSON object per line)")
	follow := fs.Bool("follow", false, "after the stored events, print new ones as they happen, until interrupted")
	_, err := parseExactly(fs, args, 0)
	if err != nil {
		return err
	}
	if err := tableOrJSON(*format); err != nil {
		return err
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	client := aftercastv1.NewDriftServiceClient(conn)
	if *follow {
		ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
		defer stop()
		return followEvents(ctx, cf, client, q, *format, stdout, stderr, watch.Options{})
	}

	var all []*aftercastv1.DriftEvent
	err = listEvents(context.Background(), cf, client, q, func(e *aftercastv1.DriftEvent) error {
		all = append(all, e)
		return nil
	})
	if err != nil {
		return cf.rpcError(err, "")
	}
	if *format == "json" {
		return driftreport.WriteJSON(stdout, driftreport.ToEvents(all))
	}
	return driftreport.WriteEvents(stdout, all)
}

// listEvents hands every stored event that q selects to each, oldest
// first, page by page.
func listEvents(ctx context.Context, cf *clientFlags, client aftercastv1.DriftServiceClient, q eventFilter,
	each func(*aftercastv1.DriftEvent) error) error {
	req := &aftercastv1.ListDriftEventsRequest{Series: q.series, Model: q.model, PageSize: 1000}
	if !q.since.IsZero() {
		req.SinceTime = timestamppb.New(q.since)
	}
	for {
		cctx, cancel := context.WithTimeout(ctx, cf.timeout)
		resp, err := client.ListDriftEvents(cctx, req)
		cancel()
		if err != nil {
			return err
		}
		for _, e := range resp.GetEvents() {
			if err := each(e); err != nil {
				return err
			}
		}
		if req.PageToken = resp.GetNextPageToken(); req.PageToken == "" {
			return nil
		}
	}
}

// followEvents prints the stored events q selects, then new ones as the
// service commits them, until ctx is done; then it returns nil. Each is
// printed as it arrives: a table line, or with format json one JSON object
// per line. A broken stream is opened again with the token of the last
// event printed, so that none is missed or printed twice.
func followEvents(ctx context.Context, cf *clientFlags, client aftercastv1.DriftServiceClient, q eventFilter,
	format string, stdout, stderr io.Writer, opts watch.Options) error {
	emit := func(e *aftercastv1.DriftEvent) error {
		if format == "json" {
			return driftreport.WriteJSONLine(stdout, driftreport.ToEvent(e))
		}
		return driftreport.WriteEventLine(stdout, e)
	}
	if format != "json" {
		if err := driftreport.WriteEventHeader(stdout); err != nil {
			return err
		}
	}
	token := ""
	err := listEvents(ctx, cf, client, q, func(e *aftercastv1.DriftEvent) error {
		if err := emit(e); err != nil {
			return err
		}
		token = e.GetToken()
		return nil
	})
	if ctx.Err() != nil {
		return nil
	}
	if err != nil {
		return cf.rpcError(err, "")
	}

	opts.Retrying = func(err error, token string, wait time.Duration) {
		after := "(no event received yet)"
		if token != "" {
			after = "after event " + token
		}
		fmt.Fprintf(stderr, "aftercast events: stream broken (%s); reconnecting in %v %s\n",
			streamError(err), wait.Round(time.Millisecond), after)
	}
	err = watch.Events(ctx, client, &aftercastv1.WatchDriftEventsRequest{Series: q.series, Model: q.model, ResumeToken: token},
		func(e *aftercastv1.DriftEvent) error {
			// Without a token to resume after (no event stored since
			// --since), the stream may start before --since.
			if !q.since.IsZero() && e.GetEventTime() != nil && e.GetEventTime().AsTime().Before(q.since) {
				return nil
			}
			return emit(e)
		}, opts)
	if err != nil {
		return cf.rpcError(err, "")
	}
	return nil
}

// streamError says briefly why a stream broke.
func streamError(err error) string {
	if s, ok := status.FromError(err); ok {
		return fmt.Sprintf("%s: %s", s.Code(), s.Message())
	}
	return err.Error()
}
