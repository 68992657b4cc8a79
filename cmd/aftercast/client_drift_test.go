package main

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"maps"
	"reflect"
	"slices"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/watch"
	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// fakeDrift keeps a log of events with tokens "1".."n", of which the first
// stored are listed by ListDriftEvents (one per page); WatchDriftEvents
// replays the log after the resume token, then waits as if for new events.
// Its first stream breaks with UNAVAILABLE after breakAfter events. States
// are listed one (series, model) per page, each page reporting the next of
// pending (the last one repeated) as its pending evaluations. It keeps
// the event listings and history requests it was sent.
type fakeDrift struct {
	aftercastv1.UnimplementedDriftServiceServer
	n, stored, breakAfter int
	states                []*aftercastv1.SeriesModelDrift
	pending               []int64
	history               *aftercastv1.GetDriftHistoryResponse

	mu         sync.Mutex
	resumed    []string
	listed     []*aftercastv1.ListDriftEventsRequest
	statesAsks int
	histories  []*aftercastv1.GetDriftHistoryRequest
}

// event i: onset origin i hours after 2026-02-28T00:00Z, the series level
// for odd i, lead i for even ones; cause revision for multiples of 3.
func (f *fakeDrift) event(i int) *aftercastv1.DriftEvent {
	ev := &aftercastv1.DriftEvent{Token: strconv.Itoa(i), EventTime: timestamppb.New(time.Date(2026, 3, 1, 0, i, 0, 0, time.UTC)),
		Series: "h", Model: "m1", OriginTime: timestamppb.New(time.Date(2026, 2, 28, i, 0, 0, 0, time.UTC)),
		Metric: aftercastv1.DriftMetric_DRIFT_METRIC_MAE, PreviousState: aftercastv1.DriftState_DRIFT_STATE_WITHIN,
		NewState: aftercastv1.DriftState_DRIFT_STATE_DEGRADED, Value: new(2.5), Limit: new(2.25), WindowN: 30,
		Cause: aftercastv1.DriftCause_DRIFT_CAUSE_DATA}
	if i%2 == 0 {
		ev.Lead = new(int32(i))
	}
	if i%3 == 0 {
		ev.Cause = aftercastv1.DriftCause_DRIFT_CAUSE_REVISION
	}
	return ev
}

func (f *fakeDrift) ListDriftEvents(_ context.Context, r *aftercastv1.ListDriftEventsRequest) (*aftercastv1.ListDriftEventsResponse, error) {
	f.mu.Lock()
	f.listed = append(f.listed, r)
	f.mu.Unlock()
	i := 1
	if r.GetPageToken() != "" {
		i, _ = strconv.Atoi(r.GetPageToken())
	}
	resp := &aftercastv1.ListDriftEventsResponse{}
	if i <= f.stored {
		resp.Events = append(resp.Events, f.event(i))
	}
	if i < f.stored {
		resp.NextPageToken = strconv.Itoa(i + 1)
	}
	return resp, nil
}

func (f *fakeDrift) WatchDriftEvents(r *aftercastv1.WatchDriftEventsRequest, s grpc.ServerStreamingServer[aftercastv1.WatchDriftEventsResponse]) error {
	f.mu.Lock()
	first := len(f.resumed) == 0
	f.resumed = append(f.resumed, r.GetResumeToken())
	f.mu.Unlock()
	after, _ := strconv.Atoi(r.GetResumeToken())
	for i, sent := after+1, 0; i <= f.n; i, sent = i+1, sent+1 {
		if first && sent == f.breakAfter {
			return status.Error(codes.Unavailable, "service restarting")
		}
		if err := s.Send(&aftercastv1.WatchDriftEventsResponse{Event: f.event(i)}); err != nil {
			return err
		}
	}
	<-s.Context().Done()
	return nil
}

func (f *fakeDrift) ListDriftStates(_ context.Context, r *aftercastv1.ListDriftStatesRequest) (*aftercastv1.ListDriftStatesResponse, error) {
	f.mu.Lock()
	ask := f.statesAsks
	f.statesAsks++
	f.mu.Unlock()
	i := 0
	if r.GetPageToken() != "" {
		i, _ = strconv.Atoi(r.GetPageToken())
	}
	resp := &aftercastv1.ListDriftStatesResponse{ExpectedChancePagesPerWeek: 0.125}
	if len(f.pending) > 0 {
		resp.PendingEvaluations = f.pending[min(ask, len(f.pending)-1)]
	}
	if i < len(f.states) {
		resp.States = append(resp.States, f.states[i])
	}
	if i+1 < len(f.states) {
		resp.NextPageToken = strconv.Itoa(i + 1)
	}
	return resp, nil
}

func (f *fakeDrift) GetDriftHistory(_ context.Context, r *aftercastv1.GetDriftHistoryRequest) (*aftercastv1.GetDriftHistoryResponse, error) {
	f.mu.Lock()
	f.histories = append(f.histories, r)
	f.mu.Unlock()
	if r.GetSeries() != "h" || r.GetModel() != "m1" || f.history == nil {
		return nil, status.Error(codes.NotFound, "no baseline")
	}
	return f.history, nil
}

// fakeZones knows series "h" in Copenhagen and "ny" in New York; it counts
// the calls that look series up.
type fakeZones struct {
	aftercastv1.UnimplementedSeriesServiceServer
	mu         sync.Mutex
	gets, list int
}

var fakeZoneOf = map[string]string{"h": "Europe/Copenhagen", "ny": "America/New_York"}

func (z *fakeZones) GetSeries(_ context.Context, r *aftercastv1.GetSeriesRequest) (*aftercastv1.GetSeriesResponse, error) {
	z.mu.Lock()
	z.gets++
	z.mu.Unlock()
	tz, ok := fakeZoneOf[r.GetKey()]
	if !ok {
		return nil, status.Errorf(codes.NotFound, "series %q does not exist", r.GetKey())
	}
	return &aftercastv1.GetSeriesResponse{Series: &aftercastv1.Series{Key: r.GetKey(), Step: "1h", Horizon: 24, TimeZone: tz}}, nil
}

func (z *fakeZones) ListSeries(context.Context, *aftercastv1.ListSeriesRequest) (*aftercastv1.ListSeriesResponse, error) {
	z.mu.Lock()
	z.list++
	z.mu.Unlock()
	resp := &aftercastv1.ListSeriesResponse{}
	for _, k := range slices.Sorted(maps.Keys(fakeZoneOf)) {
		resp.Series = append(resp.Series, &aftercastv1.Series{Key: k, Step: "1h", Horizon: 24, TimeZone: fakeZoneOf[k]})
	}
	return resp, nil
}

// fakeBaseline fails its first import stream with UNAVAILABLE after the
// first message; later streams are answered with reply, or refused with
// violations.
type fakeBaseline struct {
	aftercastv1.UnimplementedBaselineServiceServer
	violations []*errdetails.BadRequest_FieldViolation
	reply      *aftercastv1.ImportBaselineResponse

	mu       sync.Mutex
	streams  int
	messages []*aftercastv1.ImportBaselineRequest // of the last stream
}

func (f *fakeBaseline) ImportBaseline(s grpc.ClientStreamingServer[aftercastv1.ImportBaselineRequest, aftercastv1.ImportBaselineResponse]) error {
	f.mu.Lock()
	f.streams++
	first := f.streams == 1
	f.mu.Unlock()
	var got []*aftercastv1.ImportBaselineRequest
	for {
		req, err := s.Recv()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return err
		}
		if first {
			return status.Error(codes.Unavailable, "database is down")
		}
		got = append(got, req)
	}
	f.mu.Lock()
	f.messages = got
	f.mu.Unlock()
	if len(f.violations) > 0 {
		st, err := status.New(codes.InvalidArgument, "invalid request").WithDetails(&errdetails.BadRequest{FieldViolations: f.violations})
		if err != nil {
			return err
		}
		return st.Err()
	}
	return s.SendAndClose(f.reply)
}

func (f *fakeBaseline) GetBaseline(_ context.Context, r *aftercastv1.GetBaselineRequest) (*aftercastv1.GetBaselineResponse, error) {
	if r.GetSeries() != "h" || r.GetModel() != "m1" {
		return nil, status.Error(codes.NotFound, "not found")
	}
	return &aftercastv1.GetBaselineResponse{Version: &aftercastv1.BaselineVersion{Series: "h", Model: "m1", Version: 1, Active: true},
		WindowN: r.GetWindowN(), Leads: []*aftercastv1.BaselineLead{{Lead: 1, K: 200, KEff: 150, Usable: true,
			Expected: &aftercastv1.AccuracyMetrics{N: 200, Mae: new(1.25)},
			Mae:      &aftercastv1.MetricBand{Expected: 1.25, BandLower: 1, BandUpper: 1.5, AlarmUpper: 1.625, KEff: 150}}},
		Pooled: &aftercastv1.BaselineLead{K: 200, KEff: 150, Usable: true}}, nil
}

func serveDriftFake(t *testing.T, d *fakeDrift, b *fakeBaseline) string {
	t.Helper()
	return serveDriftFakeZones(t, d, b, &fakeZones{})
}

func serveDriftFakeZones(t *testing.T, d *fakeDrift, b *fakeBaseline, z *fakeZones) string {
	t.Helper()
	s := grpc.NewServer()
	aftercastv1.RegisterSeriesServiceServer(s, z)
	aftercastv1.RegisterDriftServiceServer(s, d)
	aftercastv1.RegisterBaselineServiceServer(s, b)
	return serveGRPC(t, s)
}

// linesUntil collects output and cancels when it holds n lines.
type linesUntil struct {
	bytes.Buffer
	n      int
	cancel func()
}

func (w *linesUntil) Write(p []byte) (int, error) {
	n, err := w.Buffer.Write(p)
	if bytes.Count(w.Bytes(), []byte("\n")) >= w.n {
		w.cancel()
	}
	return n, err
}

func TestEventsFollowReconnectsWithoutGapsOrRepeats(t *testing.T) {
	t.Parallel()
	// Events 1-2 are stored; the watch resumes after 2, its stream breaks
	// after events 3 and 4, and the client resumes after 4 for 5 and 6.
	d := &fakeDrift{n: 6, stored: 2, breakAfter: 2}
	addr := serveDriftFake(t, d, &fakeBaseline{})
	cf := &clientFlags{addr: addr, timeout: 5 * time.Second}
	conn, err := cf.dial()
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	out := &linesUntil{n: 6, cancel: cancel}
	var errb bytes.Buffer
	err = followEvents(ctx, cf, aftercastv1.NewDriftServiceClient(conn), eventFilter{series: "h"}, "json", out, &errb, nil,
		watch.Options{MinBackoff: time.Millisecond})
	if err != nil {
		t.Fatalf("follow ended with %v, want nil when interrupted", err)
	}
	var got []string
	for i, line := range strings.Split(strings.TrimSuffix(out.String(), "\n"), "\n") {
		var ev map[string]any
		if err := json.Unmarshal([]byte(line), &ev); err != nil {
			t.Fatalf("line %d %q is not a JSON object: %v", i+1, line, err)
		}
		got = append(got, ev["token"].(string))
		if i == 0 && (ev["lead"] != nil || ev["metric"] != "mae" || ev["state"] != "degraded") {
			t.Errorf("event %v", ev)
		}
	}
	if want := []string{"1", "2", "3", "4", "5", "6"}; !reflect.DeepEqual(got, want) {
		t.Errorf("printed events %v, want %v", got, want)
	}
	d.mu.Lock()
	resumed := d.resumed
	d.mu.Unlock()
	if !reflect.DeepEqual(resumed, []string{"2", "4"}) {
		t.Errorf("watch streams resumed after %q, want [2 4]", resumed)
	}
	if !strings.Contains(errb.String(), "stream broken (Unavailable: service restarting); reconnecting in") ||
		!strings.Contains(errb.String(), "after event 4") {
		t.Errorf("stderr %q", errb.String())
	}
}

func TestEventsFollowTable(t *testing.T) {
	t.Parallel()
	d := &fakeDrift{n: 2, stored: 1}
	cf := &clientFlags{addr: serveDriftFake(t, d, &fakeBaseline{}), timeout: 5 * time.Second}
	conn, err := cf.dial()
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	out := &linesUntil{n: 3, cancel: cancel}
	cph, err := time.LoadLocation("Europe/Copenhagen")
	if err != nil {
		t.Fatal(err)
	}
	zones := func(string) *time.Location { return cph }
	if err := followEvents(ctx, cf, aftercastv1.NewDriftServiceClient(conn), eventFilter{}, "table", out, io.Discard, zones, watch.Options{}); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(out.String(), "\n")
	if len(lines) < 3 || !strings.HasPrefix(lines[0], "RECORDED") || !strings.Contains(lines[1], "series") ||
		!strings.Contains(lines[1], "2026-02-28T02:00+01:00") || !strings.Contains(lines[1], "data") ||
		!strings.Contains(lines[2], "within -> degraded") {
		t.Errorf("output:\n%s", out.String())
	}
}

// With time filters, the stored events are filtered by the service and
// the streamed ones by the client: only those whose onset origin is in
// [--origin-from, --origin-to) are printed.
func TestEventsFollowFiltersTheStream(t *testing.T) {
	t.Parallel()
	d := &fakeDrift{n: 8, stored: 0}
	cf := &clientFlags{addr: serveDriftFake(t, d, &fakeBaseline{}), timeout: 5 * time.Second}
	conn, err := cf.dial()
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	out := &linesUntil{n: 3, cancel: cancel}
	q := eventFilter{originFrom: time.Date(2026, 2, 28, 3, 0, 0, 0, time.UTC), originTo: time.Date(2026, 2, 28, 6, 0, 0, 0, time.UTC)}
	if err := followEvents(ctx, cf, aftercastv1.NewDriftServiceClient(conn), q, "json", out, io.Discard, nil, watch.Options{}); err != nil {
		t.Fatal(err)
	}
	var got []string
	for _, line := range strings.Split(strings.TrimSuffix(out.String(), "\n"), "\n") {
		var ev map[string]any
		if err := json.Unmarshal([]byte(line), &ev); err != nil {
			t.Fatal(err)
		}
		got = append(got, ev["token"].(string)+" "+ev["origin_time"].(string)+" "+ev["cause"].(string))
	}
	want := []string{"3 2026-02-28T03:00:00Z revision", "4 2026-02-28T04:00:00Z data", "5 2026-02-28T05:00:00Z data"}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("followed %q, want %q", got, want)
	}
	d.mu.Lock()
	defer d.mu.Unlock()
	if len(d.listed) != 1 || !d.listed[0].GetOriginFromTime().AsTime().Equal(q.originFrom) || !d.listed[0].GetOriginToTime().AsTime().Equal(q.originTo) {
		t.Errorf("stored events listed with %v, want the origin filters", d.listed)
	}
}

func TestEventsFiltersGoToTheService(t *testing.T) {
	t.Parallel()
	d := &fakeDrift{n: 3, stored: 3}
	addr := serveDriftFake(t, d, &fakeBaseline{})
	var out, errb bytes.Buffer
	before := time.Now()
	code := run([]string{"events", "--addr", addr, "--format", "json", "--since", "24h",
		"--origin-from", "2026-02-28T01:00:00+01:00", "--origin-to", "2026-03-01T00:00:00Z"}, &out, &errb)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	d.mu.Lock()
	req := d.listed[0]
	d.mu.Unlock()
	since := req.GetSinceTime().AsTime()
	if since.Before(before.Add(-24*time.Hour-time.Second)) || since.After(time.Now().Add(-24*time.Hour)) ||
		!req.GetOriginFromTime().AsTime().Equal(time.Date(2026, 2, 28, 0, 0, 0, 0, time.UTC)) ||
		!req.GetOriginToTime().AsTime().Equal(time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)) {
		t.Errorf("request since %v, origins %v .. %v", since, req.GetOriginFromTime().AsTime(), req.GetOriginToTime().AsTime())
	}
	var doc struct {
		Events []map[string]any `json:"events"`
	}
	if err := json.Unmarshal(out.Bytes(), &doc); err != nil {
		t.Fatal(err)
	}
	if len(doc.Events) != 3 || doc.Events[0]["cause"] != "data" || doc.Events[2]["cause"] != "revision" ||
		doc.Events[2]["origin_time"] != "2026-02-28T03:00:00Z" {
		t.Errorf("events %v", doc.Events)
	}

	errb.Reset()
	code = run([]string{"events", "--addr", addr, "--origin-from", "2026-03-01T00:00:00Z", "--origin-to", "2026-03-01T00:00:00Z"}, io.Discard, &errb)
	if code != 1 || !strings.Contains(errb.String(), "--origin-to 2026-03-01T00:00:00Z: must be after --origin-from") {
		t.Errorf("empty origin range: exit %d, stderr %q", code, errb.String())
	}
}

func TestEventsListsEveryPage(t *testing.T) {
	t.Parallel()
	addr := serveDriftFake(t, &fakeDrift{n: 3, stored: 3}, &fakeBaseline{})
	var out, errb bytes.Buffer
	if code := run([]string{"events", "--addr", addr, "--format", "json", "--since", "2026-01-01T00:00:00Z"}, &out, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	var doc struct {
		Events []map[string]any `json:"events"`
	}
	if err := json.Unmarshal(out.Bytes(), &doc); err != nil {
		t.Fatal(err)
	}
	if len(doc.Events) != 3 || doc.Events[1]["lead"] != 2.0 || doc.Events[0]["previous"] != "within" {
		t.Errorf("events %v", doc.Events)
	}
	out.Reset()
	if code := run([]string{"events", "--addr", addr}, &out, &errb); code != 0 || strings.Count(out.String(), "within -> degraded") != 3 ||
		!strings.Contains(out.String(), "2026-02-28T03:00+01:00") || !strings.Contains(out.String(), "revision") {
		t.Errorf("table (exit %d):\n%s", code, out.String())
	}
}

func TestDriftListsEveryPage(t *testing.T) {
	t.Parallel()
	onset := time.Date(2026, 10, 14, 3, 0, 0, 0, time.UTC)
	st := func(series string, s aftercastv1.DriftState) *aftercastv1.SeriesModelDrift {
		return &aftercastv1.SeriesModelDrift{Series: series, Model: "m1", BaselineVersion: 1,
			SeriesStatus: &aftercastv1.DriftStatus{State: s, WindowN: 30, Mae: new(1.0), OnsetOriginTime: timestamppb.New(onset), OriginsSinceOnset: 12,
				NoticedTime: timestamppb.New(time.Date(2026, 10, 16, 8, 1, 2, 0, time.UTC)), OnsetMetric: aftercastv1.DriftMetric_DRIFT_METRIC_ME,
				OnsetValue: new(0.61), OnsetLimit: new(0.5)},
			LeadStatuses: []*aftercastv1.DriftStatus{{Lead: new(int32(2)), State: s}, {Lead: new(int32(1)), State: aftercastv1.DriftState_DRIFT_STATE_WITHIN}}}
	}
	// Two pages: the first reports 2 evaluations pending, the second none.
	d := &fakeDrift{states: []*aftercastv1.SeriesModelDrift{st("h", aftercastv1.DriftState_DRIFT_STATE_DEGRADED), st("ny", aftercastv1.DriftState_DRIFT_STATE_WITHIN)},
		pending: []int64{2, 0}}
	z := &fakeZones{}
	addr := serveDriftFakeZones(t, d, &fakeBaseline{}, z)
	var out, errb bytes.Buffer
	if code := run([]string{"drift", "--addr", addr, "--format", "json"}, &out, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	var doc struct {
		Pending *int64   `json:"pending_evaluations"`
		Chance  *float64 `json:"expected_chance_pages_per_week"`
		Series  []struct {
			Series, State string
			Onset         string `json:"onset_origin_time"`
			Leads         []struct {
				Lead  int
				State string
			}
		}
	}
	if err := json.Unmarshal(out.Bytes(), &doc); err != nil {
		t.Fatal(err)
	}
	if len(doc.Series) != 2 || doc.Series[0].State != "degraded" || doc.Series[1].Series != "ny" || doc.Series[0].Onset != "2026-10-14T03:00:00Z" ||
		len(doc.Series[0].Leads) != 2 || doc.Series[0].Leads[0].Lead != 1 || doc.Series[0].Leads[1].State != "degraded" {
		t.Errorf("drift JSON %+v", doc)
	}
	if doc.Pending == nil || *doc.Pending != 2 || doc.Chance == nil || *doc.Chance != 0.125 {
		t.Errorf("pending %v and chance pages %v, want 2 (the most any page said) and 0.125", doc.Pending, doc.Chance)
	}

	// The table shows onsets in each series' zone.
	d.mu.Lock()
	d.statesAsks = 0
	d.mu.Unlock()
	out.Reset()
	if code := run([]string{"drift", "--addr", addr}, &out, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	for _, want := range []string{
		"note: 2 evaluations pending at the service: some states may not include the newest data yet",
		"h / m1: degraded since origin 2026-10-14T05:00+02:00, 12 origins ago, on ME 0.6100 > alarm bound 0.5000 (noticed 2026-10-16T08:01:02Z)\n" +
			"  1 of 2 leads within; the others:",
		"ny / m1: within since origin 2026-10-13T23:00-04:00, 12 origins ago",
		"  all 2 leads within",
		"expected chance pages per week, if everything selected is healthy: 0.1250",
		"not a verdict",
	} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("table lacks %q:\n%s", want, out.String())
		}
	}
	z.mu.Lock()
	defer z.mu.Unlock()
	if z.gets != 2 || z.list != 0 {
		t.Errorf("%d GetSeries and %d ListSeries calls for 2 series, want 2 and 0", z.gets, z.list)
	}
}

func TestSeriesZonesListWhenMany(t *testing.T) {
	t.Parallel()
	z := &fakeZones{}
	cf := &clientFlags{addr: serveDriftFakeZones(t, &fakeDrift{}, &fakeBaseline{}, z), timeout: 5 * time.Second}
	conn, err := cf.dial()
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	sz := newSeriesZones(context.Background(), cf, aftercastv1.NewSeriesServiceClient(conn))
	keys := []string{"h", "ny"}
	for i := range prefetchAbove {
		keys = append(keys, fmt.Sprintf("gone-%d", i))
	}
	sz.prefetch(keys)
	if loc := sz.zone("h"); loc == nil || loc.String() != "Europe/Copenhagen" {
		t.Errorf("zone of h: %v", loc)
	}
	if loc := sz.zone("ny"); loc == nil || loc.String() != "America/New_York" {
		t.Errorf("zone of ny: %v", loc)
	}
	if loc := sz.zone("gone-1"); loc != nil {
		t.Errorf("zone of an unknown series: %v, want nil (UTC)", loc)
	}
	sz.zone("gone-1")
	z.mu.Lock()
	defer z.mu.Unlock()
	if z.list != 1 || z.gets != 1 {
		t.Errorf("%d ListSeries and %d GetSeries calls, want one list and one look-up of the series it lacked", z.list, z.gets)
	}
}

func TestDriftHistory(t *testing.T) {
	t.Parallel()
	d := &fakeDrift{history: &aftercastv1.GetDriftHistoryResponse{BaselineVersion: 2, Transitions: []*aftercastv1.DriftTransition{
		{OriginTime: timestamppb.New(time.Date(2026, 10, 14, 3, 0, 0, 0, time.UTC)), PreviousState: aftercastv1.DriftState_DRIFT_STATE_WITHIN,
			NewState: aftercastv1.DriftState_DRIFT_STATE_DEGRADED, Metric: aftercastv1.DriftMetric_DRIFT_METRIC_ME, Value: new(0.61), Limit: new(0.5), WindowN: 30},
	}}}
	addr := serveDriftFake(t, d, &fakeBaseline{})
	var out, errb bytes.Buffer
	if code := run([]string{"drift", "history", "--addr", addr, "--series", "h", "--model", "m1"}, &out, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	if !strings.Contains(out.String(), "drift history of h / m1: replayed over the stored data against baseline v2; origins (data time) in Europe/Copenhagen") ||
		!strings.Contains(out.String(), "2026-10-14T05:00+02:00  series  within -> degraded  me") {
		t.Errorf("table:\n%s", out.String())
	}
	out.Reset()
	if code := run([]string{"drift", "history", "--addr", addr, "--series", "h", "--model", "m1", "--lead", "0", "--format", "json"}, &out, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	var doc map[string]any
	if err := json.Unmarshal(out.Bytes(), &doc); err != nil {
		t.Fatal(err)
	}
	tr := doc["transitions"].([]any)[0].(map[string]any)
	if doc["baseline_version"] != 2.0 || tr["origin_time"] != "2026-10-14T03:00:00Z" || tr["lead"] != nil || tr["metric"] != "me" {
		t.Errorf("JSON %v", doc)
	}
	if code := run([]string{"drift", "history", "--addr", addr, "--series", "h", "--model", "m1", "--lead", "7"}, io.Discard, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	d.mu.Lock()
	var leads []string
	for _, r := range d.histories {
		if r.Lead == nil {
			leads = append(leads, "all")
		} else {
			leads = append(leads, strconv.Itoa(int(r.GetLead())))
		}
	}
	d.mu.Unlock()
	if !reflect.DeepEqual(leads, []string{"all", "0", "7"}) {
		t.Errorf("history asked for leads %v, want [all 0 7]", leads)
	}

	errb.Reset()
	if code := run([]string{"drift", "history", "--addr", addr, "--series", "h", "--model", "m2"}, io.Discard, &errb); code != 1 ||
		!strings.Contains(errb.String(), "model m2 has no baseline for series h") {
		t.Errorf("no baseline: exit %d, stderr %q", code, errb.String())
	}
	// Plain `aftercast drift` still works beside the subcommand.
	if code := run([]string{"drift", "--addr", addr}, io.Discard, &errb); code != 0 {
		t.Errorf("drift: exit %d: %s", code, errb.String())
	}
}

func TestWaitSettled(t *testing.T) {
	t.Parallel()
	d := &fakeDrift{pending: []int64{5, 3, 0}}
	cf := &clientFlags{addr: serveDriftFake(t, d, &fakeBaseline{}), timeout: 5 * time.Second}
	conn, err := cf.dial()
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	client := aftercastv1.NewDriftServiceClient(conn)
	if err := waitSettled(context.Background(), cf, client, 5*time.Second, time.Millisecond); err != nil {
		t.Fatal(err)
	}
	d.mu.Lock()
	asks := d.statesAsks
	d.mu.Unlock()
	if asks != 3 {
		t.Errorf("asked %d times, want 3 (until pending was 0)", asks)
	}

	stuck := &fakeDrift{pending: []int64{7}}
	cf = &clientFlags{addr: serveDriftFake(t, stuck, &fakeBaseline{}), timeout: 5 * time.Second}
	conn2, err := cf.dial()
	if err != nil {
		t.Fatal(err)
	}
	defer conn2.Close()
	err = waitSettled(context.Background(), cf, aftercastv1.NewDriftServiceClient(conn2), 50*time.Millisecond, 10*time.Millisecond)
	if err == nil || !strings.Contains(err.Error(), "did not finish within 50ms of the last push: 7 evaluations still pending") {
		t.Errorf("stuck evaluator: %v", err)
	}
}

// backtestFile has a blank line, so that rows[i] is not on line i+2.
const backtestFile = "series,origin_time,target_time,forecast,actual\n" +
	"h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,8,10\n" + // 2: rows[0]
	"\n" +
	"h,2026-01-01T00:00:00Z,2026-01-01T01:20:00Z,1,0\n" + // 4: rows[1]
	"h,2026-01-01T01:00:00Z,2026-01-01T02:00:00Z,5,5\n" // 5: rows[2]

func TestBaselineImportRetriesAndMapsViolationsToLines(t *testing.T) {
	t.Parallel()
	b := &fakeBaseline{violations: []*errdetails.BadRequest_FieldViolation{
		{Field: "rows[1].target_time", Description: "target is not on the origin's step grid"},
		{Field: "training_actuals[0].series", Description: `series "x" has no backtest rows in this import`},
		{Field: "rows[2]", Description: "a second row"},
	}}
	addr := serveDriftFake(t, &fakeDrift{}, b)
	file := writeTemp(t, backtestFile)
	hist := writeTemp(t, "series,time,value\nx,2025-12-31T23:00:00Z,4\n")
	var out, errb bytes.Buffer
	code := run([]string{"baseline", "import", "--addr", addr, "--model", "m1", "--batch", "2", "--history", hist, file}, &out, &errb)
	if code != 1 {
		t.Fatalf("exit %d, want 1; stderr:\n%s", code, errb.String())
	}
	for _, want := range []string{
		"aftercast: baseline import: database is down; retrying in 500ms",
		"import refused, nothing stored:\n" +
			"  " + file + ":4: target_time: target is not on the origin's step grid\n" +
			"  " + hist + ":2: series: series \"x\" has no backtest rows in this import\n" +
			"  " + file + ":5: a second row\n",
	} {
		if !strings.Contains(errb.String(), want) {
			t.Errorf("stderr lacks %q:\n%s", want, errb.String())
		}
	}
	b.mu.Lock()
	defer b.mu.Unlock()
	var models []string
	var rows, training []int
	for _, m := range b.messages {
		models, rows, training = append(models, m.GetModel()), append(rows, len(m.GetRows())), append(training, len(m.GetTrainingActuals()))
	}
	if b.streams != 2 || !reflect.DeepEqual(models, []string{"m1", "", ""}) || !reflect.DeepEqual(rows, []int{2, 1, 0}) ||
		!reflect.DeepEqual(training, []int{0, 0, 1}) {
		t.Errorf("%d streams; last one's models %q, rows %v, training actuals %v", b.streams, models, rows, training)
	}
}

func TestBaselineImportSendsNothingWithBadRows(t *testing.T) {
	t.Parallel()
	b := &fakeBaseline{}
	addr := serveDriftFake(t, &fakeDrift{}, b)
	file := writeTemp(t, backtestFile+"h,2026-01-01T02:00:00Z,2026-01-01T03:00:00Z,NaN,5\n")
	var out, errb bytes.Buffer
	if code := run([]string{"baseline", "import", "--addr", addr, "--model", "m1", file}, &out, &errb); code != 1 {
		t.Fatalf("exit %d, want 1", code)
	}
	if want := "1 of 4 rows of " + file + " cannot be read:\n  " + file + ":6: column forecast"; !strings.Contains(errb.String(), want) ||
		!strings.Contains(errb.String(), "nothing was sent") {
		t.Errorf("stderr lacks %q:\n%s", want, errb.String())
	}
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.streams != 0 {
		t.Errorf("%d import streams, want none", b.streams)
	}
}

func TestBaselineImportReportsEachSeries(t *testing.T) {
	t.Parallel()
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	b := &fakeBaseline{reply: &aftercastv1.ImportBaselineResponse{Model: "m1", Baselines: []*aftercastv1.ImportedBaseline{
		{Created: true, Version: &aftercastv1.BaselineVersion{Series: "a", Version: 4, FirstOriginTime: timestamppb.New(t0),
			LastOriginTime: timestamppb.New(t0.Add(time.Hour)), OriginCadenceSteps: 1, MaxLead: 2, RowCount: 3, TrainingActualCount: 0,
			Warnings: []*aftercastv1.BaselineWarning{
				{Kind: aftercastv1.BaselineWarningKind_BASELINE_WARNING_KIND_NO_TRAINING_ACTUALS, Message: "MASE cannot be computed"},
				{Kind: aftercastv1.BaselineWarningKind_BASELINE_WARNING_KIND_LEAD_NOT_USABLE, Lead: new(int32(2)), Message: "K = 1 < 180"},
			}}},
		{Created: false, Version: &aftercastv1.BaselineVersion{Series: "h", Version: 3, MaseScale: new(0.8125), TrainingActualCount: 4}},
	}}}
	addr := serveDriftFake(t, &fakeDrift{}, b)
	var out, errb bytes.Buffer
	if code := run([]string{"baseline", "import", "--addr", addr, "--model", "m1", writeTemp(t, backtestFile)}, &out, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	for _, want := range []string{
		"a: version 4 created\n",
		"origins                2026-01-01T00:00:00Z .. 2026-01-01T01:00:00Z\n",
		"origin cadence         1 step\n",
		"max lead               2\n",
		"warning                no_training_actuals: MASE cannot be computed\n",
		"warning                lead_not_usable (lead 2): K = 1 < 180\n",
		"h: unchanged (same as active version 3)\n",
		"training actuals used  4\n",
		"MASE scale             0.8125\n",
	} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("output lacks %q:\n%s", want, out.String())
		}
	}
}

func TestBaselineShow(t *testing.T) {
	t.Parallel()
	addr := serveDriftFake(t, &fakeDrift{}, &fakeBaseline{})
	var out, errb bytes.Buffer
	if code := run([]string{"baseline", "show", "--addr", addr, "--series", "h", "--model", "m1", "--window", "10", "--format", "json"}, &out, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	var doc map[string]any
	if err := json.Unmarshal(out.Bytes(), &doc); err != nil {
		t.Fatal(err)
	}
	mae := doc["leads"].([]any)[0].(map[string]any)["mae"].(map[string]any)
	if doc["window_n"] != 10.0 || mae["alarm_upper"] != 1.625 || doc["pooled"].(map[string]any)["lead"] != 0.0 {
		t.Errorf("baseline JSON %v", doc)
	}
	out.Reset()
	if code := run([]string{"baseline", "show", "--addr", addr, "--series", "h", "--model", "m1"}, &out, &errb); code != 0 ||
		!strings.Contains(out.String(), "[1.000, 1.500]") || !strings.Contains(out.String(), "pooled") {
		t.Errorf("table (exit %d):\n%s", code, out.String())
	}
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--series", "h", "--model", "m2"}, "model m2 has no baseline for series h"},
		{[]string{"--series", "h", "--model", "m2", "--version", "7"}, "series h has no baseline version 7 of model m2"},
		{[]string{"--series", "x", "--model", "m1"}, "series x not found"},
	} {
		errb.Reset()
		if code := run(append([]string{"baseline", "show", "--addr", addr}, c.args...), io.Discard, &errb); code != 1 || !strings.Contains(errb.String(), c.want) {
			t.Errorf("%v: exit %d, stderr %q; want %q", c.args, code, errb.String(), c.want)
		}
	}
}

func TestDriftClientUsage(t *testing.T) {
	t.Parallel()
	for _, args := range [][]string{
		{"baseline"}, {"baseline", "nope"}, {"baseline", "import", "f.csv"}, {"baseline", "import", "--model", "m"},
		{"baseline", "show", "--series", "s"}, {"drift", "extra"}, {"events", "--since", "yesterday"},
		{"events", "--origin-from", "yesterday"}, {"events", "--origin-to", "2026-13-01T00:00:00Z"},
		{"drift", "history"}, {"drift", "history", "--series", "s"}, {"drift", "history", "--series", "s", "--model", "m", "extra"},
		{"drift", "history", "--series", "s", "--model", "m", "--lead", "-1"}, {"drift", "history", "--series", "s", "--model", "m", "--lead", "x"},
	} {
		var errb bytes.Buffer
		if code := run(args, io.Discard, &errb); code != 2 {
			t.Errorf("%q: exit %d, want 2 (usage); stderr %q", args, code, errb.String())
		}
	}
	for _, args := range [][]string{{"drift", "--format", "csv"}, {"baseline", "show", "--series", "s", "--model", "m", "--window", "-1"},
		{"drift", "history", "--series", "s", "--model", "m", "--format", "csv"}} {
		var errb bytes.Buffer
		if code := run(args, io.Discard, &errb); code != 1 {
			t.Errorf("%q: exit %d, want 1; stderr %q", args, code, errb.String())
		}
	}
}
