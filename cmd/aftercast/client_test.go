package main

import (
	"bytes"
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"net"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/report"
	"github.com/aftercast/aftercast/scoring"
	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// The tests here check the client against a stand-in gRPC server that
// plays back chosen answers, including failures the real service cannot
// be made to produce on demand (UNAVAILABLE mid-push). The contract check
// runs the commands against the real service.

func TestAccuracyJSONIsEvaluateJSONWithLateCounts(t *testing.T) {
	t.Parallel()
	// The worked example of method.md §2 at lead 1, and a lead whose
	// actuals are all zero (MAPE undefined); no MASE scale.
	table := scoring.Tabulate([]scoring.Pair{
		{Lead: 1, Actual: 10, Forecast: 8}, {Lead: 1, Actual: 0, Forecast: 1}, {Lead: 1, Actual: 5, Forecast: 5},
		{Lead: 3, Actual: 0, Forecast: 2},
	}, scoring.NoScale)
	// Two late pairs at lead 3: counted beside the metrics, not in n.
	late := &report.Late{ByLead: map[int]int64{1: 0, 3: 2}, Overall: 2}
	resp := &aftercastv1.GetAccuracyResponse{Series: "plant-7/heat", Model: "m1", Step: "1h", Overall: metricsProto(table.Overall),
		OverallLateCount: late.Overall}
	for _, l := range table.Leads {
		resp.Leads = append(resp.Leads, &aftercastv1.LeadAccuracy{Lead: int32(l.Lead), Metrics: metricsProto(l.Metrics),
			LateCount: late.ByLead[l.Lead]})
	}
	var want, got bytes.Buffer
	if err := report.WriteJSON(&want, []report.Result{{Series: "plant-7/heat", Model: "m1", Step: "1h", Table: table, Late: late}}); err != nil {
		t.Fatal(err)
	}
	if err := report.WriteJSON(&got, []report.Result{accuracyResult(resp)}); err != nil {
		t.Fatal(err)
	}
	if got.String() != want.String() {
		t.Errorf("accuracy JSON\n%s\nwant (evaluate's)\n%s", got.String(), want.String())
	}
	if !strings.Contains(got.String(), `"lead": 3,`) || !strings.Contains(got.String(), `"late": 2`) {
		t.Errorf("no late count of lead 3 in:\n%s", got.String())
	}
	var evaluateJSON bytes.Buffer
	if err := report.WriteJSON(&evaluateJSON, []report.Result{{Series: "plant-7/heat", Model: "m1", Step: "1h", Table: table}}); err != nil {
		t.Fatal(err)
	}
	if strings.Contains(evaluateJSON.String(), `"late"`) {
		t.Errorf("offline evaluation has no late pairs, yet its JSON has a late count:\n%s", evaluateJSON.String())
	}
	if !strings.Contains(got.String(), `"mape": null`) || !strings.Contains(got.String(), `"mase": null`) {
		t.Errorf("undefined metrics are not null:\n%s", got.String())
	}
}

// metricsProto is what the server sends for m: undefined metrics absent.
func metricsProto(m scoring.Metrics) *aftercastv1.AccuracyMetrics {
	opt := func(x float64) *float64 {
		if !scoring.Defined(x) {
			return nil
		}
		return &x
	}
	return &aftercastv1.AccuracyMetrics{N: m.N, Me: opt(m.ME), Mae: opt(m.MAE), Rmse: opt(m.RMSE), Mape: opt(m.MAPE),
		MapeExcluded: m.MAPEExcluded, Smape: opt(m.SMAPE), SmapeExcluded: m.SMAPEExcluded, Wape: opt(m.WAPE), Mase: opt(m.MASE)}
}

func TestRPCErrorMessages(t *testing.T) {
	t.Parallel()
	cf := &clientFlags{addr: "127.0.0.1:7410", timeout: 30e9}
	bad, err := status.New(codes.InvalidArgument, "invalid series").WithDetails(&errdetails.BadRequest{
		FieldViolations: []*errdetails.BadRequest_FieldViolation{
			{Field: "series.step", Description: `"7x" is not a step`},
			{Field: "series.horizon", Description: "want at least 1"},
		}})
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		err      error
		notFound string
		want     string
	}{
		{status.Error(codes.NotFound, `series "x" does not exist`), "series x", "series x not found"},
		{status.Error(codes.InvalidArgument, "page_size is negative"), "", "invalid request: page_size is negative"},
		{bad.Err(), "", "invalid request:\n  series.step: \"7x\" is not a step\n  series.horizon: want at least 1"},
		{status.Error(codes.Unavailable, "connection refused"), "", "cannot reach aftercast at 127.0.0.1:7410: is `aftercast serve` running? (connection refused)"},
		{status.Error(codes.DeadlineExceeded, "context deadline exceeded"), "", "aftercast at 127.0.0.1:7410 did not answer within 30s (--timeout)"},
		{status.Error(codes.Internal, "internal error"), "", "aftercast at 127.0.0.1:7410: Internal: internal error"},
		{errors.New("f.csv:3: bad"), "", "f.csv:3: bad"},
	} {
		if got := cf.rpcError(c.err, c.notFound).Error(); got != c.want {
			t.Errorf("%v:\n got %q\nwant %q", c.err, got, c.want)
		}
	}
}

// fakeSeries knows series "h": hourly, horizon 24.
type fakeSeries struct {
	aftercastv1.UnimplementedSeriesServiceServer
}

func (fakeSeries) GetSeries(_ context.Context, r *aftercastv1.GetSeriesRequest) (*aftercastv1.GetSeriesResponse, error) {
	if r.GetKey() != "h" {
		return nil, status.Errorf(codes.NotFound, "series %q does not exist", r.GetKey())
	}
	return &aftercastv1.GetSeriesResponse{Series: &aftercastv1.Series{Key: "h", Step: "1h", Horizon: 24, TimeZone: "UTC"}}, nil
}

// fakeForecasts fails its first stream with UNAVAILABLE after one message,
// then stores and answers with chosen rejections.
type fakeForecasts struct {
	aftercastv1.UnimplementedForecastServiceServer
	reject []*aftercastv1.ForecastRejection
	hang   bool // never answer

	mu      sync.Mutex
	streams int
	got     []*aftercastv1.Forecast
}

func (f *fakeForecasts) StreamForecasts(s grpc.ClientStreamingServer[aftercastv1.StreamForecastsRequest, aftercastv1.StreamForecastsResponse]) error {
	if f.hang {
		<-s.Context().Done()
		return s.Context().Err()
	}
	f.mu.Lock()
	f.streams++
	first := f.streams == 1
	f.mu.Unlock()
	var got []*aftercastv1.Forecast
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
		got = append(got, req.GetForecasts()...)
	}
	f.mu.Lock()
	f.got = got
	f.mu.Unlock()
	sum := &aftercastv1.ForecastPushSummary{Rejections: f.reject}
	for _, fc := range got {
		sum.Accepted += int64(len(fc.GetDense().GetValues()) + len(fc.GetSparse().GetPoints()))
	}
	for _, r := range f.reject {
		n := int64(1)
		if r.GetLead() == 0 {
			n = int64(len(got[r.GetIndex()].GetDense().GetValues()) + len(got[r.GetIndex()].GetSparse().GetPoints()))
		}
		sum.Accepted -= n
		sum.Rejected += n
	}
	return s.SendAndClose(&aftercastv1.StreamForecastsResponse{Summary: sum})
}

// fakeAccuracy lists n pairs of series "h" in pages of two.
type fakeAccuracy struct {
	aftercastv1.UnimplementedAccuracyServiceServer
	n int
}

func (f fakeAccuracy) ListPairs(_ context.Context, r *aftercastv1.ListPairsRequest) (*aftercastv1.ListPairsResponse, error) {
	if r.GetSeries() != "h" {
		return nil, status.Errorf(codes.NotFound, "series %q does not exist", r.GetSeries())
	}
	from := 0
	if r.GetPageToken() != "" {
		if _, err := fmt.Sscan(r.GetPageToken(), &from); err != nil {
			return nil, status.Errorf(codes.InvalidArgument, "page token %q: %v", r.GetPageToken(), err)
		}
	}
	resp := &aftercastv1.ListPairsResponse{}
	for i := from; i < f.n && i < from+2; i++ {
		o := timestamppb.New(timestamppb.Now().AsTime().Truncate(3600e9))
		resp.Pairs = append(resp.Pairs, &aftercastv1.Pair{OriginTime: o, TargetTime: o, Lead: int32(i + 1), Forecast: 1.5, Actual: 2,
			Error: 0.5, ForecastReceiveTime: o, ActualFirstReceiveTime: o})
	}
	if from+2 < f.n {
		resp.NextPageToken = fmt.Sprint(from + 2)
	}
	return resp, nil
}

// serveFake starts a stand-in server on a free port and returns its
// address.
func serveFake(t *testing.T, fc *fakeForecasts, acc fakeAccuracy) string {
	t.Helper()
	s := grpc.NewServer()
	aftercastv1.RegisterSeriesServiceServer(s, fakeSeries{})
	aftercastv1.RegisterForecastServiceServer(s, fc)
	aftercastv1.RegisterAccuracyServiceServer(s, acc)
	return serveGRPC(t, s)
}

// listenLocal listens on a free port of the loopback interface.
func listenLocal(t *testing.T) net.Listener {
	t.Helper()
	lis, err := (&net.ListenConfig{}).Listen(t.Context(), "tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	return lis
}

// serveGRPC serves s on a free port until the test ends, and returns its
// address. Serving that fails other than by being stopped fails the test.
func serveGRPC(t *testing.T, s *grpc.Server) string {
	t.Helper()
	lis := listenLocal(t)
	served := make(chan error, 1)
	go func() { served <- s.Serve(lis) }()
	t.Cleanup(func() {
		s.Stop()
		if err := <-served; err != nil && !errors.Is(err, grpc.ErrServerStopped) {
			t.Errorf("serving the stand-in: %v", err)
		}
	})
	return lis.Addr().String()
}

func writeTemp(t *testing.T, body string) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), "in.csv")
	if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

func TestPushForecastsRetriesAndReportsLines(t *testing.T) {
	t.Parallel()
	fc := &fakeForecasts{reject: []*aftercastv1.ForecastRejection{
		{Index: 0, Lead: 2, Field: "dense.values[1]", Reason: "stand-in rejection of a point"},
		{Index: 1, Lead: 0, Field: "origin_time", Reason: "stand-in rejection of a vector"},
	}}
	addr := serveFake(t, fc, fakeAccuracy{})
	file := writeTemp(t, "series,origin_time,target_time,forecast\n"+
		"h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1\n"+ // 2: vector 0 lead 1
		"h,2026-01-01T01:00:00Z,2026-01-01T02:00:00Z,5\n"+ // 3: vector 1 lead 1
		"h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,2\n"+ // 4: vector 0 lead 2
		"h,2026-01-01T01:00:00Z,2026-01-01T03:00:00Z,6\n"+ // 5: vector 1 lead 2
		"x,2026-01-01T01:00:00Z,2026-01-01T03:00:00Z,6\n"+ // 6: unknown series
		"h,2026-01-01T01:00:00Z,2026-01-01T03:20:00Z,6\n"+ // 7: off grid
		"h,2026-01-01T02:00:00Z,2026-01-01T03:00:00Z,7\n") // 8: vector 2
	var out, errb bytes.Buffer
	code := run([]string{"push", "forecasts", file, "--addr", addr, "--model", "m1", "--batch", "1"}, &out, &errb)
	if code != 1 {
		t.Errorf("exit %d, want 1 (rows rejected); stdout:\n%s\nstderr:\n%s", code, out.String(), errb.String())
	}
	fc.mu.Lock()
	streams, vectors := fc.streams, len(fc.got)
	fc.mu.Unlock()
	if streams != 2 || !strings.Contains(errb.String(), "database is down; retrying in 500ms") {
		t.Errorf("%d streams, want 2 (one retry); stderr:\n%s", streams, errb.String())
	}
	if vectors != 3 {
		t.Errorf("server got %d vectors, want 3", vectors)
	}
	got := out.String()
	if want := "read 7 rows of " + file + ": sent 5 points in 3 vectors for model m1\n" +
		"accepted 2, duplicate 0, late 0, rejected 5\n"; !strings.HasPrefix(got, want) {
		t.Errorf("summary:\n%s\nwant it to start with\n%s", got, want)
	}
	for _, want := range []string{
		"lines 3,5: stand-in rejection of a vector\n",
		"line 4: stand-in rejection of a point\n",
		"line 6: series \"x\" does not exist\n",
		"line 7: target is not on the origin's step grid",
	} {
		if !strings.Contains(got, want) {
			t.Errorf("output lacks %q:\n%s", want, got)
		}
	}
	if !strings.Contains(errb.String(), "5 of 7 rows rejected") {
		t.Errorf("stderr lacks the failure count:\n%s", errb.String())
	}
}

func TestPushGivesUpOnAStalledServer(t *testing.T) {
	t.Parallel()
	addr := serveFake(t, &fakeForecasts{hang: true}, fakeAccuracy{})
	file := writeTemp(t, "series,origin_time,target_time,forecast\nh,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1\n")
	var out, errb bytes.Buffer
	code := run([]string{"push", "forecasts", "--addr", addr, "--model", "m1", "--timeout", "300ms", file}, &out, &errb)
	if want := "did not answer within 300ms (--timeout)"; code != 1 || !strings.Contains(errb.String(), want) {
		t.Errorf("exit %d, stderr %q; want 1 and %q", code, errb.String(), want)
	}
}

func TestPairsPagesToCSV(t *testing.T) {
	t.Parallel()
	addr := serveFake(t, &fakeForecasts{}, fakeAccuracy{n: 5})
	var out, errb bytes.Buffer
	if code := run([]string{"pairs", "--addr", addr, "--series", "h", "--model", "m1", "--leads", "1-5"}, &out, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	rows, err := csv.NewReader(&out).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 6 || strings.Join(rows[0], ",") != "series,model,origin_time,target_time,lead,forecast,actual,error,late,forecast_received_at,actual_first_received_at,late_reissue" {
		t.Fatalf("got %d rows, header %v; want a header and 5 pairs", len(rows), rows[0])
	}
	if r := rows[5]; r[0] != "h" || r[1] != "m1" || r[4] != "5" || r[5] != "1.5" || r[7] != "0.5" || r[8] != "false" {
		t.Errorf("last row %v", r)
	}

	out.Reset()
	errb.Reset()
	if code := run([]string{"pairs", "--addr", addr, "--series", "nope", "--model", "m1"}, &out, &errb); code != 1 ||
		!strings.Contains(errb.String(), "series nope not found") {
		t.Errorf("unknown series: exit %d, stderr %q", code, errb.String())
	}
}

func TestClientCannotReachServer(t *testing.T) {
	t.Parallel()
	lis := listenLocal(t)
	addr := lis.Addr().String()
	lis.Close() // nothing listens there now
	var out, errb bytes.Buffer
	if code := run([]string{"series", "list", "--addr", addr, "--retry-for", "0"}, &out, &errb); code != 1 {
		t.Errorf("exit %d, want 1", code)
	}
	if want := "cannot reach aftercast at " + addr + ": is `aftercast serve` running?"; !strings.Contains(errb.String(), want) {
		t.Errorf("stderr %q lacks %q", errb.String(), want)
	}
}

func TestClientUsage(t *testing.T) {
	t.Parallel()
	for _, args := range [][]string{
		{"series"}, {"series", "nope"}, {"series", "create", "--step", "1h", "k"}, {"push", "forecasts", "f.csv"},
		{"accuracy", "--series", "s"}, {"pairs", "--model", "m"}, {"stored"}, {"stored", "actuals"}, {"series", "models"},
	} {
		var out, errb bytes.Buffer
		if code := run(args, &out, &errb); code != 2 {
			t.Errorf("%q: exit %d, want 2 (usage); stderr %q", args, code, errb.String())
		}
	}
}
