package server_test

import (
	"context"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// pushDays writes days of daily forecasts (leads 1..leads, hourly step) and
// their actuals, with errors scaled by scale, then drains the drift
// evaluator.
func pushDays(t *testing.T, ctx context.Context, srv *server.Server, key string, from, days, leads int, scale float64, r *rand.Rand) {
	t.Helper()
	st := srv.Store()
	for k := from; k < from+days; k++ {
		o := t0.Add(time.Duration(k) * 24 * time.Hour)
		vals := make([]float64, leads)
		var as []store.Actual
		for h := 1; h <= leads; h++ {
			vals[h-1] = 100 - scale*r.NormFloat64()
			as = append(as, store.Actual{Series: key, Time: o.Add(time.Duration(h) * time.Hour), Value: 100})
		}
		if _, err := st.WriteForecasts(ctx, []store.ForecastVector{{Series: key, Model: "m", Origin: o, Values: vals}}, 0); err != nil {
			t.Fatal(err)
		}
		if _, err := st.WriteActuals(ctx, as, 0); err != nil {
			t.Fatal(err)
		}
	}
	if err := srv.Drift().Drain(ctx); err != nil {
		t.Fatal(err)
	}
}

// A watch without a token starts with new events; a watch resumed with a
// token delivers exactly the events after it, as listed.
func TestWatchDriftEventsResumes(t *testing.T) {
	t.Parallel()
	srv, _ := start(t, storetest.URL(t))
	ctx := ctxT(t)
	st := srv.Store()
	const leads = 4
	if _, _, err := st.CreateSeries(ctx, store.Series{Key: "w", Step: "1h", Horizon: leads}); err != nil {
		t.Fatal(err)
	}
	r := rand.New(rand.NewPCG(5, 6))
	var rows []store.BacktestRow
	for k := -365; k < 0; k++ {
		o := t0.Add(time.Duration(k) * 24 * time.Hour)
		for h := 1; h <= leads; h++ {
			rows = append(rows, store.BacktestRow{Series: "w", Origin: o, Target: o.Add(time.Duration(h) * time.Hour), Actual: 100, Forecast: 100 - r.NormFloat64()})
		}
	}
	if _, err := st.ImportBaseline(ctx, "m", rows, nil); err != nil {
		t.Fatal(err)
	}
	pushDays(t, ctx, srv, "w", 0, 20, leads, 1, r) // events so far: leaving insufficient_data
	conn := dialT(t, srv.GRPCAddr())
	drift := aftercastv1.NewDriftServiceClient(conn)
	before, err := drift.ListDriftEvents(ctx, &aftercastv1.ListDriftEventsRequest{PageSize: 1000})
	if err != nil || len(before.GetEvents()) == 0 {
		t.Fatalf("events before: %d, %v", len(before.GetEvents()), err)
	}

	wctx, cancel := context.WithCancel(ctx)
	watch, err := drift.WatchDriftEvents(wctx, &aftercastv1.WatchDriftEventsRequest{})
	if err != nil {
		t.Fatal(err)
	}
	time.Sleep(700 * time.Millisecond)              // let the watch take its starting point
	pushDays(t, ctx, srv, "w", 20, 30, leads, 3, r) // errors ×3: degraded events follow
	first, err := watch.Recv()
	if err != nil {
		t.Fatal(err)
	}
	for _, ev := range before.GetEvents() {
		if ev.GetToken() == first.GetEvent().GetToken() {
			t.Fatalf("a watch without a token replayed old event %s", ev.GetToken())
		}
	}
	cancel()

	// Resume after the first event received: the rest, no gap, no repeat.
	all, err := drift.ListDriftEvents(ctx, &aftercastv1.ListDriftEventsRequest{PageSize: 1000})
	if err != nil {
		t.Fatal(err)
	}
	var want []*aftercastv1.DriftEvent
	for i, ev := range all.GetEvents() {
		if ev.GetToken() == first.GetEvent().GetToken() {
			want = all.GetEvents()[i+1:]
		}
	}
	if len(want) == 0 {
		t.Fatalf("no events listed after the first one watched (%d listed)", len(all.GetEvents()))
	}
	rctx, rcancel := context.WithTimeout(ctx, 20*time.Second)
	defer rcancel()
	resumed, err := drift.WatchDriftEvents(rctx, &aftercastv1.WatchDriftEventsRequest{ResumeToken: first.GetEvent().GetToken()})
	if err != nil {
		t.Fatal(err)
	}
	for i, w := range want {
		got, err := resumed.Recv()
		if err != nil {
			t.Fatalf("event %d: %v", i, err)
		}
		if got.GetEvent().GetToken() != w.GetToken() {
			t.Fatalf("event %d: token %s, want %s", i, got.GetEvent().GetToken(), w.GetToken())
		}
	}
}

func dialT(t *testing.T, addr string) *grpc.ClientConn {
	t.Helper()
	conn, err := grpc.NewClient(addr, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close() })
	return conn
}

// A stream of actuals that fails midway keeps the batches it committed, and
// the server's evaluator judges them off the request path without waiting
// for the next push.
func TestFailedActualsStreamStillJudgesWhatItCommitted(t *testing.T) {
	t.Parallel()
	srv, c := start(t, storetest.URL(t))
	ctx := ctxT(t)
	st := srv.Store()
	const leads = 2
	if _, _, err := st.CreateSeries(ctx, store.Series{Key: "f", Step: "1h", Horizon: leads}); err != nil {
		t.Fatal(err)
	}
	r := rand.New(rand.NewPCG(7, 8))
	var rows []store.BacktestRow
	for k := -365; k < 0; k++ {
		o := t0.Add(time.Duration(k) * 24 * time.Hour)
		for h := 1; h <= leads; h++ {
			rows = append(rows, store.BacktestRow{Series: "f", Origin: o, Target: o.Add(time.Duration(h) * time.Hour), Actual: 100, Forecast: 100 - r.NormFloat64()})
		}
	}
	if _, err := st.ImportBaseline(ctx, "m", rows, nil); err != nil {
		t.Fatal(err)
	}
	var as []*aftercastv1.Actual
	for k := range 10 {
		o := t0.Add(time.Duration(k) * 24 * time.Hour)
		if _, err := st.WriteForecasts(ctx, []store.ForecastVector{{Series: "f", Model: "m", Origin: o, Values: []float64{100 - r.NormFloat64(), 100 - r.NormFloat64()}}}, 0); err != nil {
			t.Fatal(err)
		}
		for h := 1; h <= leads; h++ {
			as = append(as, &aftercastv1.Actual{Series: "f", Time: timestamppb.New(o.Add(time.Duration(h) * time.Hour)), Value: 100})
		}
	}
	stream, err := c.actual.StreamActuals(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if err := stream.Send(&aftercastv1.StreamActualsRequest{Actuals: as}); err != nil {
		t.Fatal(err)
	}
	// One more than a batch may hold: the server refuses it and ends the stream.
	tooMany := make([]*aftercastv1.Actual, st.Limits().MaxBatch+1)
	for i := range tooMany {
		tooMany[i] = &aftercastv1.Actual{Series: "f", Time: timestamppb.New(t0.Add(time.Duration(1000+i) * time.Hour)), Value: 1}
	}
	_ = stream.Send(&aftercastv1.StreamActualsRequest{Actuals: tooMany})
	if _, err := stream.CloseAndRecv(); status.Code(err) != codes.InvalidArgument {
		t.Fatalf("oversized batch: %v, want InvalidArgument", err)
	}
	var states []store.DriftStatus
	for deadline := time.Now().Add(20 * time.Second); ; {
		pending, _, err := st.DriftBacklog(ctx)
		if err != nil {
			t.Fatal(err)
		}
		if states, err = st.DriftStates(ctx, "f", ""); err != nil {
			t.Fatal(err)
		}
		if pending == 0 && len(states) > 0 && states[0].LastOrigin.Equal(t0.Add(9*24*time.Hour)) {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("20 s after a failed stream: %d marks pending, %d states: the committed actuals were not judged", pending, len(states))
		}
		time.Sleep(50 * time.Millisecond)
	}
	last := t0.Add(9 * 24 * time.Hour)
	for _, s := range states {
		if !s.LastOrigin.Equal(last) {
			t.Errorf("lead %d judged up to origin %v, want the last committed %v", s.Lead, s.LastOrigin, last)
		}
	}
}

// A resume token this service never issued is refused with a message, not
// answered with an endless silence; so are page tokens passed with another
// request than the one they continue.
func TestUnknownTokensAreRefused(t *testing.T) {
	t.Parallel()
	srv, _ := start(t, storetest.URL(t))
	ctx := ctxT(t)
	conn := dialT(t, srv.GRPCAddr())
	drift := aftercastv1.NewDriftServiceClient(conn)
	w, err := drift.WatchDriftEvents(ctx, &aftercastv1.WatchDriftEventsRequest{ResumeToken: "123456"})
	if err == nil {
		_, err = w.Recv()
	}
	if status.Code(err) != codes.InvalidArgument || !strings.Contains(err.Error(), "no event 123456 was ever issued") {
		t.Errorf("unknown resume token: %v", err)
	}
	series := aftercastv1.NewSeriesServiceClient(conn)
	for _, k := range []string{"a/1", "a/2", "a/3", "b/1"} {
		if _, err := series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: k, Step: "1h", Horizon: 1}}); err != nil {
			t.Fatal(err)
		}
	}
	page, err := series.ListSeries(ctx, &aftercastv1.ListSeriesRequest{KeyPrefix: "a/", PageSize: 1})
	if err != nil || page.GetNextPageToken() == "" {
		t.Fatalf("first page: %v %v", page, err)
	}
	if _, err := series.ListSeries(ctx, &aftercastv1.ListSeriesRequest{KeyPrefix: "b/", PageSize: 1, PageToken: page.GetNextPageToken()}); status.Code(err) != codes.InvalidArgument ||
		!strings.Contains(err.Error(), "continues another request") {
		t.Errorf("a token of another prefix: %v", err)
	}
	// The same request with another page size continues fine.
	if next, err := series.ListSeries(ctx, &aftercastv1.ListSeriesRequest{KeyPrefix: "a/", PageSize: 5, PageToken: page.GetNextPageToken()}); err != nil || len(next.GetSeries()) != 2 {
		t.Errorf("continuing with another page size: %v %v", next, err)
	}
	if _, err := drift.ListDriftStates(ctx, &aftercastv1.ListDriftStatesRequest{Series: "a/1", PageToken: page.GetNextPageToken()}); status.Code(err) != codes.InvalidArgument {
		t.Errorf("a ListSeries token passed to ListDriftStates: %v", err)
	}
}
