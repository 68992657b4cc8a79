package server_test

import (
	"fmt"
	"testing"
	"time"

	"github.com/aftercast/aftercast/server/store/storetest"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
)

// A stream that broke after some messages committed, sent again whole
// with the same message ids, ends with the summary of one unbroken stream:
// the committed messages answer with their receipts, the rest is applied.
// A unary push retried with its id answers as the first did; other
// content under that id is refused.
func TestRetriedPushesCountOnce(t *testing.T) {
	t.Parallel()
	_, c := start(t, storetest.URL(t))
	ctx := ctxT(t)
	if _, err := c.series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: "rt", Step: "1h", Horizon: 2}}); err != nil {
		t.Fatal(err)
	}
	batch := func(k int) *aftercastv1.StreamActualsRequest {
		req := &aftercastv1.StreamActualsRequest{RequestId: fmt.Sprintf("run-7/%d", k)}
		for i := range 3 {
			req.Actuals = append(req.Actuals, &aftercastv1.Actual{Series: "rt", Time: ts(time.Duration(3*k+i) * time.Hour), Value: float64(k)})
		}
		if k == 1 {
			req.Actuals = append(req.Actuals, &aftercastv1.Actual{Series: "missing", Time: ts(0), Value: 1})
		}
		return req
	}
	stream := func(msgs ...*aftercastv1.StreamActualsRequest) *aftercastv1.ActualPushSummary {
		t.Helper()
		st, err := c.actual.StreamActuals(ctx)
		if err != nil {
			t.Fatal(err)
		}
		for _, m := range msgs {
			if err := st.Send(m); err != nil {
				t.Fatal(err)
			}
		}
		resp, err := st.CloseAndRecv()
		if err != nil {
			t.Fatal(err)
		}
		return resp.GetSummary()
	}
	// The first attempt got two messages committed, then broke (its
	// response never read).
	stream(batch(0), batch(1))
	got := stream(batch(0), batch(1), batch(2))
	want := &aftercastv1.ActualPushSummary{Accepted: 9, Rejected: 1, Rejections: []*aftercastv1.ActualRejection{
		{Index: 6, Field: "series", Reason: `unknown series "missing": create it first`}}}
	if !proto.Equal(got, want) {
		t.Errorf("retried stream summary %v, want that of one unbroken stream %v", got, want)
	}
	// Without ids, a retry reports what it found stored.
	plain := stream(&aftercastv1.StreamActualsRequest{Actuals: batch(0).GetActuals()})
	if plain.GetDuplicate() != 3 {
		t.Errorf("a re-push without ids: %v", plain)
	}

	req := &aftercastv1.PushForecastsRequest{RequestId: "run-7/f0", Forecasts: []*aftercastv1.Forecast{dense("rt", "m", 20*time.Hour, 1, 2)}}
	first, err := c.forecast.PushForecasts(ctx, req)
	if err != nil || first.GetSummary().GetAccepted() != 2 {
		t.Fatalf("first forecast push: %v %v", first, err)
	}
	again, err := c.forecast.PushForecasts(ctx, req)
	if err != nil || !proto.Equal(again, first) {
		t.Errorf("retried push answered %v %v, want %v", again, err, first)
	}
	req.Forecasts[0] = dense("rt", "m", 20*time.Hour, 1, 3)
	_, err = c.forecast.PushForecasts(ctx, req)
	if status.Code(err) != codes.InvalidArgument || !violations(err)["request_id"] {
		t.Errorf("an id reused for other content: %v", err)
	}
}
