package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"slices"
	"strconv"
	"syscall"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/driftreport"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/watch"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"
)

func runDrift(args []string, stdout, stderr io.Writer) error {
	if len(args) > 0 && args[0] == "history" {
		return driftHistory(args[1:], stdout, stderr)
	}
	fs := newFlags("drift", "", stderr)
	fs.Usage = func() {
		fmt.Fprintf(stderr, "usage: aftercast drift [flags]\n"+
			"       aftercast drift history --series S --model M [--lead L] [flags]\n\n"+
			"Current drift states, the series level (the state that pages) first. A state's onset is the origin\n"+
			"(data time) at which it was entered; \"noticed\" is when the service announced it (wall clock).\n"+
			"'aftercast drift history -h' for the replayed transition history.\n\nflags:\n")
		fs.PrintDefaults()
	}
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
	ctx := context.Background()
	all, err := listDriftStates(ctx, cf, aftercastv1.NewDriftServiceClient(conn), *series, *model)
	if err != nil {
		return err
	}
	if *format == "json" {
		return driftreport.WriteJSON(stdout, driftreport.ToStates(all))
	}
	zones := newSeriesZones(ctx, cf, aftercastv1.NewSeriesServiceClient(conn))
	keys := make([]string, 0, len(all.States))
	for _, d := range all.States {
		keys = append(keys, d.GetSeries())
	}
	zones.prefetch(keys)
	return driftreport.WriteStates(stdout, all, zones.zone)
}

// listDriftStates reads every page of drift states ("" selects all).
func listDriftStates(ctx context.Context, cf *clientFlags, client aftercastv1.DriftServiceClient, series, model string) (driftreport.Listing, error) {
	var all driftreport.Listing
	for token := ""; ; {
		cctx, cancel := cf.within(ctx)
		resp, err := client.ListDriftStates(cctx, &aftercastv1.ListDriftStatesRequest{Series: series, Model: model, PageSize: 1000, PageToken: token})
		cancel()
		if err != nil {
			return all, cf.rpcError(err, "")
		}
		all.Add(resp)
		if token = resp.GetNextPageToken(); token == "" {
			return all, nil
		}
	}
}

// driftHistory is `aftercast drift history`: the transitions the service
// finds when it replays the stored production period of a (series, model).
func driftHistory(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("drift history", "", stderr)
	fs.Usage = func() {
		fmt.Fprintf(stderr, "usage: aftercast drift history --series S --model M [--lead L] [flags]\n\n"+
			"Every drift state transition of a series and model, replayed by the service over the data stored now\n"+
			"against the active baseline, in origin order (data time). Nothing is stored or announced: events are\n"+
			"what was announced as data arrived ('aftercast events'); this is what the stored data gives.\n\nflags:\n")
		fs.PrintDefaults()
	}
	cf := addClientFlags(fs)
	series := fs.String("series", "", "the series (required)")
	model := fs.String("model", "", "the model (required)")
	format := fs.String("format", "table", "output: table or json")
	var lead *int32
	fs.Func("lead", "only this lead's transitions; 0 for the series level (default all)", func(v string) error {
		n, err := strconv.ParseInt(v, 10, 32)
		if err != nil || n < 0 {
			return fmt.Errorf("want 0 (the series level) or a lead")
		}
		l := int32(n)
		lead = &l
		return nil
	})
	pos, err := parseArgs(fs, args)
	if err != nil {
		return err
	}
	if len(pos) != 0 || *series == "" || *model == "" {
		if len(pos) == 0 {
			fmt.Fprintln(stderr, "aftercast drift history: --series and --model are required")
		}
		fs.Usage()
		return errUsage
	}
	if err := tableOrJSON(*format); err != nil {
		return err
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	ctx, cancel := cf.call()
	defer cancel()
	resp, err := aftercastv1.NewDriftServiceClient(conn).GetDriftHistory(ctx,
		&aftercastv1.GetDriftHistoryRequest{Series: *series, Model: *model, Lead: lead})
	if err != nil {
		return baselineNotFound(cf, conn, &aftercastv1.GetBaselineRequest{Series: *series, Model: *model}, err)
	}
	if *format == "json" {
		return driftreport.WriteJSON(stdout, driftreport.ToHistory(*series, *model, resp))
	}
	zones := newSeriesZones(context.Background(), cf, aftercastv1.NewSeriesServiceClient(conn))
	return driftreport.WriteHistory(stdout, *series, *model, resp, zones.zone(*series))
}

// seriesZones finds the time zones of series, each once, so that tables
// show origins in local time. A series it cannot look up is shown in UTC.
type seriesZones struct {
	ctx    context.Context
	cf     *clientFlags
	client aftercastv1.SeriesServiceClient
	known  map[string]*time.Location // nil: looked up, unknown
}

func newSeriesZones(ctx context.Context, cf *clientFlags, client aftercastv1.SeriesServiceClient) *seriesZones {
	return &seriesZones{ctx: ctx, cf: cf, client: client, known: map[string]*time.Location{}}
}

func (z *seriesZones) learn(s *aftercastv1.Series) {
	loc, err := time.LoadLocation(s.GetTimeZone())
	if err != nil || s.GetTimeZone() == "" {
		loc = nil
	}
	z.known[s.GetKey()] = loc
}

// prefetchAbove is how many series make prefetch list them all rather
// than ask for each.
const prefetchAbove = 20

// prefetch learns the zones of keys: with many, by listing every series
// once.
func (z *seriesZones) prefetch(keys []string) {
	var unknown int
	for _, k := range keys {
		if _, ok := z.known[k]; !ok {
			unknown++
		}
	}
	if unknown <= prefetchAbove {
		return
	}
	for token := ""; ; {
		ctx, cancel := z.cf.within(z.ctx)
		resp, err := z.client.ListSeries(ctx, &aftercastv1.ListSeriesRequest{PageSize: 1000, PageToken: token})
		cancel()
		if err != nil {
			return
		}
		for _, s := range resp.GetSeries() {
			z.learn(s)
		}
		if token = resp.GetNextPageToken(); token == "" {
			return
		}
	}
}

// zone is the time zone of series key, nil when unknown.
func (z *seriesZones) zone(key string) *time.Location {
	if loc, ok := z.known[key]; ok {
		return loc
	}
	ctx, cancel := z.cf.within(z.ctx)
	resp, err := z.client.GetSeries(ctx, &aftercastv1.GetSeriesRequest{Key: key})
	cancel()
	if err != nil {
		z.known[key] = nil
		return nil
	}
	z.learn(resp.GetSeries())
	return z.known[key]
}

// eventFilter chooses the events of `aftercast events`.
type eventFilter struct {
	series, model        string
	since                time.Time // recorded at or after; zero: all
	originFrom, originTo time.Time // onset origin in [from, to); zero: open
}

// matches reports whether e passes the time filters, for events that come
// from a stream, which knows none of them.
func (q eventFilter) matches(e *aftercastv1.DriftEvent) bool {
	if !q.since.IsZero() && e.GetEventTime() != nil && e.GetEventTime().AsTime().Before(q.since) {
		return false
	}
	if q.originFrom.IsZero() && q.originTo.IsZero() {
		return true
	}
	if e.GetOriginTime() == nil {
		return false // no onset: no origin in any range
	}
	o := e.GetOriginTime().AsTime()
	return (q.originFrom.IsZero() || !o.Before(q.originFrom)) && (q.originTo.IsZero() || o.Before(q.originTo))
}

// timeFlag parses an RFC 3339 time into *t.
func timeFlag(t *time.Time) func(string) error {
	return func(v string) error {
		p, err := time.Parse(time.RFC3339Nano, v)
		if err != nil {
			return fmt.Errorf("want an RFC 3339 time such as 2026-01-31T05:00:00Z")
		}
		*t = p
		return nil
	}
}

func runEvents(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("events", "", stderr)
	fs.Usage = func() {
		fmt.Fprintf(stderr, "usage: aftercast events [flags]\n\n"+
			"Drift events: every announced change of a current state, oldest first. ONSET ORIGIN (origin_time in JSON)\n"+
			"is the origin at which the new state was entered (data time); RECORDED (time) is when the service\n"+
			"announced it (wall clock). CAUSE: data (new origins judged), revision (origins judged before, re-judged\n"+
			"on revised or filled-in data) or baseline (a new baseline).\n\nflags:\n")
		fs.PrintDefaults()
	}
	cf := addClientFlags(fs)
	var q eventFilter
	fs.StringVar(&q.series, "series", "", "only this series (default all)")
	fs.StringVar(&q.model, "model", "", "only this model (default all)")
	fs.Func("since", "only events recorded at or after this RFC 3339 time, or this long ago (such as 24h): wall clock", func(v string) error {
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
	fs.Func("origin-from", "only events whose onset origin is at or after this RFC 3339 time (data time)", timeFlag(&q.originFrom))
	fs.Func("origin-to", "only events whose onset origin is before this RFC 3339 time (data time)", timeFlag(&q.originTo))
	format := fs.String("format", "table", "output: table or json (with --follow, one JSON object per line)")
	follow := fs.Bool("follow", false, "after the stored events, print new ones as they happen, until interrupted")
	_, err := parseExactly(fs, args, 0)
	if err != nil {
		return err
	}
	if err := tableOrJSON(*format); err != nil {
		return err
	}
	if !q.originFrom.IsZero() && !q.originTo.IsZero() && !q.originFrom.Before(q.originTo) {
		return fmt.Errorf("--origin-to %s: must be after --origin-from %s", q.originTo.Format(time.RFC3339Nano), q.originFrom.Format(time.RFC3339Nano))
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	client := aftercastv1.NewDriftServiceClient(conn)
	zones := newSeriesZones(context.Background(), cf, aftercastv1.NewSeriesServiceClient(conn))
	if *follow {
		ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
		defer stop()
		zones.ctx = ctx
		return followEvents(ctx, cf, client, q, *format, stdout, stderr, zones.zone, watch.Options{})
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
	keys := make([]string, 0, len(all))
	for _, e := range all {
		keys = append(keys, e.GetSeries())
	}
	slices.Sort(keys)
	zones.prefetch(slices.Compact(keys))
	return driftreport.WriteEvents(stdout, all, zones.zone)
}

// listEvents hands every stored event that q selects to each, oldest
// first, page by page.
func listEvents(ctx context.Context, cf *clientFlags, client aftercastv1.DriftServiceClient, q eventFilter,
	each func(*aftercastv1.DriftEvent) error) error {
	req := &aftercastv1.ListDriftEventsRequest{Series: q.series, Model: q.model, PageSize: 1000}
	if !q.since.IsZero() {
		req.SinceTime = timestamppb.New(q.since)
	}
	if !q.originFrom.IsZero() {
		req.OriginFromTime = timestamppb.New(q.originFrom)
	}
	if !q.originTo.IsZero() {
		req.OriginToTime = timestamppb.New(q.originTo)
	}
	for {
		cctx, cancel := cf.within(ctx)
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
// service commits them (those q selects), until ctx is done; then it
// returns nil. Each is
// printed as it arrives: a table line, or with format json one JSON object
// per line. A broken stream is opened again with the token of the last
// event printed, so that none is missed or printed twice.
func followEvents(ctx context.Context, cf *clientFlags, client aftercastv1.DriftServiceClient, q eventFilter,
	format string, stdout, stderr io.Writer, zones driftreport.Zones, opts watch.Options) error {
	emit := func(e *aftercastv1.DriftEvent) error {
		if format == "json" {
			return driftreport.WriteJSONLine(stdout, driftreport.ToEvent(e))
		}
		var loc *time.Location
		if zones != nil {
			loc = zones(e.GetSeries())
		}
		return driftreport.WriteEventLine(stdout, e, loc)
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
		// Interrupted (Ctrl-C, SIGTERM) while listing the stored events: the
		// end the user asked for, not a failure of the listing.
		return nil //nolint:nilerr // a done ctx ends following with success (see the doc comment)
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
			// The stream knows no time filters, and without a token to
			// resume after (no event stored since --since) it may start
			// before --since.
			if !q.matches(e) {
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
