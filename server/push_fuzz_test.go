package server_test

import (
	"bytes"
	"context"
	"fmt"
	"log/slog"
	"math"
	"regexp"
	"slices"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"
	"unicode/utf8"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// FuzzPush pushes random forecasts and actuals through the gRPC API — times
// in and out of range and grid, any float64, any lead, any key, dense,
// sparse and quantile vectors, unary calls and streams — into a fresh
// series per input, and holds the server to the protos' contract: a call
// fails only for the documented reasons (never Internal), each summary
// counts every point or actual exactly once as a model of method.md §3
// predicts, every rejection names a field that has a problem, and the
// read-back RPCs return exactly what was acknowledged, bit for bit.
//
// Every input costs a handful of PostgreSQL transactions (about 300
// inputs a second on two cores), so CI runs a bounded count:
// go test -run '^$' -fuzz '^FuzzPush$' -fuzztime 20000x ./server.
//
// Strings that are not UTF-8 are kept: gRPC's proto codec refuses them on
// the client, so such a call must fail there (Internal, "error while
// marshaling") and store nothing; the server never sees it.
func FuzzPush(f *testing.F) {
	env := newFuzzEnv(f)
	for _, s := range fuzzSeeds() {
		f.Add(s.shape, s.key, s.model, s.script)
	}
	f.Fuzz(env.run)
}

// The fuzz server's limits are small so that random inputs reach them:
// a push of more than fuzzMaxBatch items, or a message of more than
// fuzzMaxMessageBytes, must fail whole with the documented code.
const (
	fuzzMaxBatch        = 6
	fuzzMaxMessageBytes = 2048
	fuzzMaxSteps        = 4       // pushes per input
	fuzzSeriesPrefix    = "fuzz/" // keys of the series the inputs create
	fuzzModel           = "m"     // the model of vectors that do not take the fuzzed one
	receiveSlack        = time.Millisecond
)

// modelPattern is the Forecast.model rule of forecast.proto, written out
// from the comment: 1 to 200 characters of [A-Za-z0-9_.:/-].
var modelPattern = regexp.MustCompile(`^[A-Za-z0-9_.:/-]{1,200}$`)

// fuzzEnv is one server, started once per fuzz process (the coordinator
// and each worker) on its own database; every input gets a series of its
// own, so inputs never see each other's data.
type fuzzEnv struct {
	series    aftercastv1.SeriesServiceClient
	forecasts aftercastv1.ForecastServiceClient
	actuals   aftercastv1.ActualServiceClient
	info      *aftercastv1.GetServerInfoResponse
	shapes    []*gridShape
	logs      *lockedBuffer
	next      atomic.Int64
}

func newFuzzEnv(f *testing.F) *fuzzEnv {
	f.Helper()
	e := &fuzzEnv{logs: &lockedBuffer{}}
	// Warnings and errors only, kept per input: the call log of hundreds of
	// thousands of inputs must not pile up in f's output.
	logger := slog.New(slog.NewTextHandler(e.logs, &slog.HandlerOptions{Level: slog.LevelWarn}))
	srv, err := server.New(server.Config{Listen: "127.0.0.1:0", MetricsListen: "-", DatabaseURL: storetest.URL(f), Logger: logger,
		Limits: store.Limits{MaxBatch: fuzzMaxBatch}, MaxMessageBytes: fuzzMaxMessageBytes})
	if err != nil {
		f.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	if err := srv.Start(ctx); err != nil {
		f.Fatal(err)
	}
	f.Cleanup(func() { _ = srv.Stop(context.Background()) })
	conn, err := grpc.NewClient(srv.GRPCAddr(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		f.Fatal(err)
	}
	f.Cleanup(func() { conn.Close() })
	e.series, e.forecasts, e.actuals = aftercastv1.NewSeriesServiceClient(conn), aftercastv1.NewForecastServiceClient(conn),
		aftercastv1.NewActualServiceClient(conn)
	// The limits and the time range come from the API, as a client gets them.
	if e.info, err = aftercastv1.NewInfoServiceClient(conn).GetServerInfo(ctx, &aftercastv1.GetServerInfoRequest{}); err != nil {
		f.Fatal(err)
	}
	if e.info.GetMaxBatch() != fuzzMaxBatch || e.info.GetMaxMessageBytes() != fuzzMaxMessageBytes {
		f.Fatalf("server info %v, want the configured limits", e.info)
	}
	e.shapes = fuzzShapes(e.info.GetEarliestTime().AsTime(), e.info.GetLatestTime().AsTime())
	return e
}

// run is one input: a new series of the chosen shape, up to fuzzMaxSteps
// pushes read from script, each checked as it is acknowledged, then the
// whole series read back.
func (e *fuzzEnv) run(t *testing.T, shape uint8, key, model string, script []byte) {
	e.logs.take() // what earlier inputs left behind
	defer func() {
		if log := e.logs.take(); t.Failed() && log != "" {
			t.Logf("server log (warnings and errors):\n%s", log)
		}
	}()
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	st := e.newSeries(ctx, t, e.shapes[int(shape)%len(e.shapes)], key, model)
	s := &fuzzScript{b: script}
	for range fuzzMaxSteps {
		if len(s.b) == 0 {
			break
		}
		e.step(ctx, t, st, s)
	}
	e.checkReadBack(ctx, t, st)
}

func (e *fuzzEnv) newSeries(ctx context.Context, t *testing.T, sh *gridShape, key, model string) *fuzzState {
	t.Helper()
	se := proto.Clone(sh.series).(*aftercastv1.Series)
	se.Key = fmt.Sprintf("%s%d", fuzzSeriesPrefix, e.next.Add(1))
	r, err := e.series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: se})
	if err != nil || !r.GetCreated() {
		t.Fatalf("creating %v: %v %v", se, r, err)
	}
	if a := r.GetSeries().GetGridAnchorTime().AsTime(); !a.Equal(sh.anchor) {
		t.Fatalf("series %s anchored at %s; the test's grid assumes %s", sh.series.GetStep(), a, sh.anchor)
	}
	// The fuzzed key must never name another input's series: it is either
	// this series' key (chosen per item) or a key that does not exist.
	if strings.HasPrefix(key, fuzzSeriesPrefix) {
		key = "x" + key
	}
	return &fuzzState{sh: sh, key: se.Key, otherKey: key, model: model, horizon: se.GetHorizon(),
		min: e.info.GetEarliestTime().AsTime(), max: e.info.GetLatestTime().AsTime(),
		vecs: map[string]map[int64]*wantVector{}, acts: map[int64]*wantActual{}}
}

// step reads one push from the script and sends it.
func (e *fuzzEnv) step(ctx context.Context, t *testing.T, st *fuzzState, s *fuzzScript) {
	t.Helper()
	op := s.byte()
	n, stream, chunk := 1+int(op>>2&7), op&2 != 0, 1+int(op>>5&3)
	if op&1 == 0 {
		fs := make([]*aftercastv1.Forecast, n)
		for i := range fs {
			fs[i] = st.readForecast(s)
		}
		e.pushForecasts(ctx, t, st, fs, stream, chunk)
		return
	}
	as := make([]*aftercastv1.Actual, n)
	for i := range as {
		as[i] = st.readActual(s)
	}
	e.pushActuals(ctx, t, st, as, stream, chunk)
}

// ---- The script: how the fuzzer's bytes become requests ----
//
// A script is a sequence of pushes; reading past its end yields zeros.
//
//	push:     op byte — bit 0: 0 forecasts, 1 actuals; bit 1: a stream
//	          (else one unary call); bits 2–4: items − 1 (1..8); bits 5–6:
//	          items per stream message − 1; then the items.
//	forecast: flags — bit 0: the fuzzed series key (else the input's
//	          series); bit 1: the fuzzed model (else "m"); bit 2: an issue
//	          time; bits 3–4: 0 dense, 1–2 sparse, 3 no values (bit 5: an
//	          empty dense list instead); bit 7: quantiles. Then the origin
//	          time, the issue time, a count (see count) and that many
//	          values (dense) or lead, value pairs (sparse), then the
//	          quantiles: their number − 1, and per quantile a level, a
//	          length − count + 1 and the values.
//	actual:   flags (bit 0: the fuzzed series key), time, value.
type fuzzScript struct{ b []byte }

func (s *fuzzScript) byte() byte {
	if len(s.b) == 0 {
		return 0
	}
	x := s.b[0]
	s.b = s.b[1:]
	return x
}

func (s *fuzzScript) uint(n int) uint64 {
	var x uint64
	for range n {
		x = x<<8 | uint64(s.byte())
	}
	return x
}

// time is a timestamp: mostly points of the series' grid near each other,
// so that forecasts' targets meet actuals (late values, revisions); else
// the grid's first and last points in range (targets past the end), a grid
// point moved by nanoseconds, microseconds or seconds, raw seconds and
// nanos (in range or anywhere, nanos out of [0, 1e9) too), or none.
func (s *fuzzScript) time(sh *gridShape) *timestamppb.Timestamp {
	b := s.byte()
	switch b % 8 {
	case 4:
		j := s.byte()
		if j&1 == 1 {
			return timestamppb.New(sh.at(sh.first + int64(j>>1%8)))
		}
		return timestamppb.New(sh.at(sh.last - int64(j>>1%8)))
	case 5:
		t := sh.at(int64(s.byte()%16) - 4)
		unit := []time.Duration{time.Nanosecond, time.Microsecond, time.Second}[b>>3%3]
		return timestamppb.New(t.Add(time.Duration(int8(s.byte())) * unit))
	case 6:
		sec, nanos := int64(s.uint(8)), int32(s.uint(4))
		if b&8 != 0 { // within two days of the accepted range
			lo, hi := sh.min.Unix()-2*86400, sh.max.Unix()+2*86400
			sec = lo + int64(uint64(sec)%uint64(hi-lo))
		}
		return &timestamppb.Timestamp{Seconds: sec, Nanos: nanos}
	case 7:
		return nil
	default:
		return timestamppb.New(sh.at(int64(s.byte()%16) - 4))
	}
}

// specialValues are the float64s a producer should never get wrong.
var specialValues = []float64{math.NaN(), math.Inf(1), math.Inf(-1), 0, math.Copysign(0, -1), math.MaxFloat64, -math.MaxFloat64,
	math.SmallestNonzeroFloat64, 0x1p-1022, 0.1, -1e300, math.Float64frombits(0x7ff8000000000123), math.Float64frombits(0x7ff0000000000001)}

// value is mostly a small integer (repeats: duplicates and revisions), else
// a special value or any 64 bits.
func (s *fuzzScript) value() float64 {
	switch s.byte() % 4 {
	case 2:
		return specialValues[int(s.byte())%len(specialValues)]
	case 3:
		return math.Float64frombits(s.uint(8))
	default:
		return float64(int8(s.byte()) % 4)
	}
}

// lead is mostly 0..7 (the horizons are 3..8), else any int32.
func (s *fuzzScript) lead() int32 {
	if s.byte()%4 == 3 {
		return int32(s.uint(4))
	}
	return int32(s.byte() % 8)
}

// count is the number of points of a vector: mostly 0..5, and from the
// bytes 0xf0..0xff 100..250, enough for a message over the size limit.
func (s *fuzzScript) count() int {
	c := s.byte()
	if c >= 0xf0 {
		return 100 + 10*int(c&0x0f)
	}
	return int(c % 6)
}

var quantileLevels = []float64{0.1, 0.5, 0.9, 0, 1, -0.5, 1.5, math.NaN(), math.SmallestNonzeroFloat64, math.Nextafter(1, 0)}

func (st *fuzzState) readForecast(s *fuzzScript) *aftercastv1.Forecast {
	flags := s.byte()
	f := &aftercastv1.Forecast{Series: st.key, Model: fuzzModel}
	if flags&1 != 0 {
		f.Series = st.otherKey
	}
	if flags&2 != 0 {
		f.Model = st.model
	}
	f.OriginTime = s.time(st.sh)
	if flags&4 != 0 {
		f.IssueTime = s.time(st.sh)
	}
	n := s.count()
	// Long vectors take their values from their position, not the script.
	val := func(i int) float64 {
		if n > 8 {
			return float64(i)
		}
		return s.value()
	}
	switch flags >> 3 & 3 {
	case 0:
		d := &aftercastv1.DenseValues{}
		for i := range n {
			d.Values = append(d.Values, val(i))
		}
		f.Values = &aftercastv1.Forecast_Dense{Dense: d}
	case 1, 2:
		sp := &aftercastv1.SparseValues{}
		for i := range n {
			lead := int32(i + 1)
			if n <= 8 {
				lead = s.lead()
			}
			sp.Points = append(sp.Points, &aftercastv1.LeadValue{Lead: lead, Value: val(i)})
		}
		f.Values = &aftercastv1.Forecast_Sparse{Sparse: sp}
	default:
		if flags&0x20 != 0 {
			f.Values = &aftercastv1.Forecast_Dense{Dense: &aftercastv1.DenseValues{}}
		}
		n = 0
	}
	if flags&0x80 != 0 {
		for range 1 + s.byte()%2 {
			q := &aftercastv1.QuantileValues{Level: quantileLevels[int(s.byte())%len(quantileLevels)]}
			for i := range max(0, n+int(s.byte()%3)-1) {
				q.Values = append(q.Values, val(i))
			}
			f.Quantiles = append(f.Quantiles, q)
		}
	}
	return f
}

func (st *fuzzState) readActual(s *fuzzScript) *aftercastv1.Actual {
	a := &aftercastv1.Actual{Series: st.key}
	if s.byte()&1 != 0 {
		a.Series = st.otherKey
	}
	a.Time, a.Value = s.time(st.sh), s.value()
	return a
}

// ---- The series shapes and their grids, written from series.proto ----

// gridShape is a kind of series with its grid computed independently of
// the server's scoring.Step: at(k) is the grid point k steps from a recent
// one, add(t, h) the target of lead h from origin t, onGrid whether a time
// is a grid point; first and last index the grid's points nearest the ends
// of the accepted range.
type gridShape struct {
	series      *aftercastv1.Series
	anchor      time.Time
	at          func(k int64) time.Time
	add         func(t time.Time, h int) time.Time
	onGrid      func(t time.Time) bool
	min, max    time.Time
	first, last int64
}

func fuzzShapes(minT, maxT time.Time) []*gridShape {
	cph, err1 := time.LoadLocation("Europe/Copenhagen")
	ny, err2 := time.LoadLocation("America/New_York")
	if err1 != nil || err2 != nil {
		panic(fmt.Sprint(err1, err2))
	}
	utc := time.UTC
	shapes := []*gridShape{
		fixedShape("1h", 6, time.Date(2000, 1, 1, 0, 0, 0, 0, utc), nil),
		// A 15-minute grid anchored at :05, so that whole quarter hours are off it.
		fixedShape("15m", 8, time.Date(2000, 1, 1, 0, 5, 0, 0, utc), timestamppb.New(time.Date(2000, 1, 1, 0, 5, 0, 0, utc))),
		// Daily at 05:00 Copenhagen time, from just before a DST change.
		daysShape("1d", 1, 5, cph, 5, time.Date(2026, 3, 27, 5, 0, 0, 0, cph)),
		// Weekly on Mondays at midnight New York time (the default anchor).
		daysShape("1w", 7, 4, ny, 0, time.Date(2026, 3, 2, 0, 0, 0, 0, ny)),
		monthShape(),
	}
	for _, sh := range shapes {
		sh.min, sh.max = minT, maxT
		sh.first = searchK(func(k int64) bool { return !sh.at(k).Before(minT) })
		sh.last = searchK(func(k int64) bool { return !sh.at(k).Before(maxT) }) - 1
	}
	return shapes
}

// fixedShape: the grid is anchor + k·step in elapsed time, counted in
// microseconds so that 300 years of it cannot overflow.
func fixedShape(step string, horizon int32, anchor time.Time, setAnchor *timestamppb.Timestamp) *gridShape {
	d, _ := time.ParseDuration(step)
	us := d.Microseconds()
	base := time.Date(2026, 1, 1, anchor.Hour(), anchor.Minute(), 0, 0, time.UTC)
	return &gridShape{
		series: &aftercastv1.Series{Step: step, Horizon: horizon, GridAnchorTime: setAnchor},
		anchor: anchor,
		at:     func(k int64) time.Time { return time.UnixMicro(base.UnixMicro() + k*us).UTC() },
		add:    func(t time.Time, h int) time.Time { return t.Add(time.Duration(h) * d) },
		onGrid: func(t time.Time) bool { return (t.UnixMicro()-anchor.UnixMicro())%us == 0 },
	}
}

// daysShape: calendar steps of n days in loc, at the local clock hour
// hour; the default anchor (midnight of 1 January 2000, Monday 3 January
// for weeks) unless hour is not 0.
func daysShape(step string, n int, horizon int32, loc *time.Location, hour int, base time.Time) *gridShape {
	anchor := time.Date(2000, 1, 1+2*(n/7), hour, 0, 0, 0, loc)
	var set *timestamppb.Timestamp
	if hour != 0 {
		set = timestamppb.New(anchor)
	}
	return &gridShape{
		series: &aftercastv1.Series{Step: step, Horizon: horizon, TimeZone: loc.String(), GridAnchorTime: set},
		anchor: anchor,
		at:     func(k int64) time.Time { return base.AddDate(0, 0, int(k)*n) },
		add: func(t time.Time, h int) time.Time {
			l := t.In(loc)
			return time.Date(l.Year(), l.Month(), l.Day()+h*n, l.Hour(), l.Minute(), l.Second(), l.Nanosecond(), loc)
		},
		onGrid: func(t time.Time) bool {
			l := t.In(loc)
			days := (civil(l) - civil(anchor.In(loc))) % int64(n)
			return days == 0 && t.Equal(time.Date(l.Year(), l.Month(), l.Day(), hour, 0, 0, 0, loc))
		},
	}
}

// monthShape: monthly in UTC anchored on 31 January 2000, so that the grid
// is every month's last day ("clamped to the month's last day").
func monthShape() *gridShape {
	anchor := time.Date(2000, 1, 31, 0, 0, 0, 0, time.UTC)
	return &gridShape{
		series: &aftercastv1.Series{Step: "1mo", Horizon: 3, GridAnchorTime: timestamppb.New(anchor)},
		anchor: anchor,
		at:     func(k int64) time.Time { return monthDay(2026, time.Month(1+k), 31) },
		add:    func(t time.Time, h int) time.Time { return monthDay(t.Year(), t.Month()+time.Month(h), t.Day()) },
		onGrid: func(t time.Time) bool { return t.Equal(monthDay(t.UTC().Year(), t.UTC().Month(), 31)) },
	}
}

// monthDay is day d of month m of year y (months beyond 12 roll over),
// clamped to the month's last day, at midnight UTC.
func monthDay(y int, m time.Month, d int) time.Time {
	first := time.Date(y, m, 1, 0, 0, 0, 0, time.UTC)
	return first.AddDate(0, 0, min(d, first.AddDate(0, 1, -1).Day())-1)
}

func civil(t time.Time) int64 {
	return time.Date(t.Year(), t.Month(), t.Day(), 0, 0, 0, 0, time.UTC).Unix() / 86400
}

// searchK is the least k in ±2²⁴ for which ok holds (ok is monotone).
func searchK(ok func(int64) bool) int64 {
	lo, hi := int64(-1<<24), int64(1<<24)
	for lo < hi {
		mid := lo + (hi-lo)/2
		if ok(mid) {
			hi = mid
		} else {
			lo = mid + 1
		}
	}
	return lo
}

// ---- The model of what the server stores (method.md §3) ----

// fuzzState is one input's series: what the server should hold after the
// pushes acknowledged so far.
type fuzzState struct {
	sh                   *gridShape
	key, otherKey, model string
	horizon              int32
	min, max             time.Time
	vecs                 map[string]map[int64]*wantVector // by model, then origin in µs
	acts                 map[int64]*wantActual            // by time in µs
}

// window is when a push ran by the client's clock: the server stamps what
// it commits within it.
type window struct{ from, to time.Time }

func (w window) String() string {
	return "[" + w.from.UTC().Format(time.RFC3339Nano) + ", " + w.to.UTC().Format(time.RFC3339Nano) + "]"
}

func (w window) holds(ts *timestamppb.Timestamp) bool {
	t := ts.AsTime()
	return ts != nil && !t.Before(w.from.Add(-receiveSlack)) && !t.After(w.to.Add(receiveSlack))
}

type wantVector struct {
	origin      time.Time
	points      map[int32]*wantPoint
	issue       *time.Time // as sent; nil: the receive time of the push in issueAt
	issueAt     window
	first, last window // the first and the last push that changed it
}

type wantPoint struct {
	value   float64
	late    bool
	reissue *float64
}

type wantActual struct {
	time        time.Time
	value       float64
	revisions   int32
	first, last window
}

// counts are a summary's counts.
type counts struct{ accepted, duplicate, late, revised, rejected int64 }

// vecIn is a pushed vector as the model judges it: the fields that reject
// it whole, and its points as sent.
type vecIn struct {
	model  string
	origin time.Time
	issue  *timestamppb.Timestamp
	whole  []string
	points []pointIn
}

// pointIn is one point as sent, with the field paths that reject it (none
// when it is fine).
type pointIn struct {
	lead  int32
	value float64
	bad   []string
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// validTime: set, nanos in [0, 1e9), whole microseconds, in the range.
func (st *fuzzState) validTime(ts *timestamppb.Timestamp) bool {
	if ts == nil || ts.GetNanos() < 0 || ts.GetNanos() >= 1e9 || ts.GetNanos()%1000 != 0 {
		return false
	}
	t := ts.AsTime()
	return !t.Before(st.min) && t.Before(st.max)
}

func (st *fuzzState) gridTime(ts *timestamppb.Timestamp) (time.Time, bool) {
	if !st.validTime(ts) || !st.sh.onGrid(ts.AsTime()) {
		return time.Time{}, false
	}
	return ts.AsTime(), true
}

// classify judges a vector by the rules of forecast.proto.
func (st *fuzzState) classify(f *aftercastv1.Forecast) vecIn {
	v := vecIn{model: f.GetModel(), issue: f.GetIssueTime()}
	origin, originOK := st.gridTime(f.GetOriginTime())
	v.origin = origin
	for _, w := range []struct {
		bad   bool
		field string
	}{
		{f.GetSeries() != st.key, "series"},
		{!modelPattern.MatchString(f.GetModel()), "model"},
		{!originOK, "origin_time"},
		{f.GetIssueTime() != nil && !st.validTime(f.GetIssueTime()), "issue_time"},
	} {
		if w.bad {
			v.whole = append(v.whole, w.field)
		}
	}
	v.points = st.points(f, origin, originOK)
	if len(v.points) == 0 {
		v.whole = append(v.whole, "values")
	}
	v.whole = append(v.whole, quantileProblems(f, len(v.points))...)
	return v
}

// points lists a vector's points as sent with their problems: a value
// that is not finite, a lead outside 1..horizon or repeated, a target at
// or after the end of the range.
func (st *fuzzState) points(f *aftercastv1.Forecast, origin time.Time, originOK bool) []pointIn {
	var out []pointIn
	tooLate := func(h int32) bool { return originOK && !st.sh.add(origin, int(h)).Before(st.max) }
	for k, x := range f.GetDense().GetValues() {
		p := pointIn{lead: int32(k + 1), value: x}
		if !finite(x) || p.lead > st.horizon || tooLate(p.lead) {
			p.bad = []string{fmt.Sprintf("dense.values[%d]", k)}
		}
		out = append(out, p)
	}
	seen := map[int32]bool{}
	for k, lv := range f.GetSparse().GetPoints() {
		p := pointIn{lead: lv.GetLead(), value: lv.GetValue()}
		lead, value := fmt.Sprintf("sparse.points[%d].lead", k), fmt.Sprintf("sparse.points[%d].value", k)
		inRange := p.lead >= 1 && p.lead <= st.horizon
		if !inRange || seen[p.lead] { // "a lead may appear only once per vector"
			p.bad = append(p.bad, lead)
		}
		if !finite(p.value) {
			p.bad = append(p.bad, value)
		}
		if inRange && tooLate(p.lead) { // the lead and the value are equally to blame
			p.bad = append(p.bad, lead, value)
		}
		seen[p.lead] = true
		out = append(out, p)
	}
	return out
}

// quantileProblems: a level not strictly between 0 and 1 or repeated, or
// a number of values other than the vector's points as sent.
func quantileProblems(f *aftercastv1.Forecast, points int) []string {
	var out []string
	seen := map[float64]bool{}
	for k, q := range f.GetQuantiles() {
		if !(q.GetLevel() > 0 && q.GetLevel() < 1) || seen[q.GetLevel()] {
			out = append(out, fmt.Sprintf("quantiles[%d].level", k))
		}
		if len(q.GetValues()) != points {
			out = append(out, fmt.Sprintf("quantiles[%d].values", k))
		}
		seen[q.GetLevel()] = true
	}
	return out
}

// applyForecast counts a judged vector and merges its good points.
func (st *fuzzState) applyForecast(v vecIn, w window, c *counts) {
	if len(v.whole) > 0 {
		c.rejected += int64(max(len(v.points), 1)) // "a vector rejected whole that carried no point counts as one"
		return
	}
	var good []pointIn
	for _, p := range v.points {
		if len(p.bad) > 0 {
			c.rejected++
		} else {
			good = append(good, p)
		}
	}
	if len(good) > 0 {
		st.merge(v, good, w, c)
	}
}

// merge applies method.md §3: the same value again is a duplicate (also
// when it equals the late re-issue kept beside a value); a value for a
// target whose actual is known is late — the lead's value when it had
// none, else a late re-issue beside it; anything else is accepted and
// replaces the value. A vector's issue time follows the last push that
// changed a value in use.
func (st *fuzzState) merge(v vecIn, good []pointIn, w window, c *counts) {
	if st.vecs[v.model] == nil {
		st.vecs[v.model] = map[int64]*wantVector{}
	}
	vec := st.vecs[v.model][v.origin.UnixMicro()]
	if vec == nil {
		vec = &wantVector{origin: v.origin, points: map[int32]*wantPoint{}, first: w}
		st.vecs[v.model][v.origin.UnixMicro()] = vec
	}
	inUse, changed := false, false
	for _, p := range good {
		old := vec.points[p.lead]
		known := st.acts[st.sh.add(v.origin, int(p.lead)).UnixMicro()] != nil
		switch {
		case old != nil && (old.value == p.value || known && old.reissue != nil && *old.reissue == p.value):
			c.duplicate++
		case known && old == nil:
			c.late++
			vec.points[p.lead] = &wantPoint{value: p.value, late: true}
			inUse, changed = true, true
		case known:
			c.late++
			x := p.value
			old.reissue = &x
			changed = true
		default:
			c.accepted++
			vec.points[p.lead] = &wantPoint{value: p.value, reissue: pointReissue(old)}
			inUse, changed = true, true
		}
	}
	if inUse {
		vec.issue, vec.issueAt = nil, w
		if v.issue != nil {
			t := v.issue.AsTime()
			vec.issue = &t
		}
	}
	if changed {
		vec.last = w
	}
}

func pointReissue(p *wantPoint) *float64 {
	if p == nil {
		return nil
	}
	return p.reissue
}

// applyActual judges and applies one actual, returning the fields that
// reject it: a new time is accepted, the same value again a duplicate
// (nothing changes), another value a revision.
func (st *fuzzState) applyActual(a *aftercastv1.Actual, w window, c *counts) []string {
	var bad []string
	t, ok := st.gridTime(a.GetTime())
	for _, p := range []struct {
		bad   bool
		field string
	}{{a.GetSeries() != st.key, "series"}, {!ok, "time"}, {!finite(a.GetValue()), "value"}} {
		if p.bad {
			bad = append(bad, p.field)
		}
	}
	if len(bad) > 0 {
		c.rejected++
		return bad
	}
	switch cur := st.acts[t.UnixMicro()]; {
	case cur == nil:
		c.accepted++
		st.acts[t.UnixMicro()] = &wantActual{time: t, value: a.GetValue(), first: w, last: w}
	case cur.value == a.GetValue():
		c.duplicate++
	default:
		c.revised++
		cur.value, cur.last = a.GetValue(), w
		cur.revisions++
	}
	return bad
}

// ---- Pushing and checking acknowledgements ----

// refusal is how a message must fail as a whole: on the client when a
// string is not UTF-8 (marshal), else ResourceExhausted over the size
// limit, InvalidArgument over the batch limit, OK otherwise.
func (e *fuzzEnv) refusal(msg proto.Message, items int, keys []string) (code codes.Code, marshal bool) {
	for _, k := range keys {
		if !utf8.ValidString(k) {
			return codes.Internal, true
		}
	}
	switch {
	case int64(proto.Size(msg)) > e.info.GetMaxMessageBytes():
		return codes.ResourceExhausted, false
	case items > int(e.info.GetMaxBatch()):
		return codes.InvalidArgument, false
	}
	return codes.OK, false
}

// checkCall compares a call's error with the expected refusal.
func checkCall(t *testing.T, what string, err error, want codes.Code, marshal bool) {
	t.Helper()
	switch got := status.Code(err); {
	case marshal && (got != codes.Internal || !strings.Contains(err.Error(), "marshal")):
		t.Errorf("%s with a string that is not UTF-8: %v, want the client's marshalling error", what, err)
	case !marshal && got != want:
		t.Errorf("%s: %v (code %v), want code %v", what, err, got, want)
	}
}

func forecastKeys(fs []*aftercastv1.Forecast) []string {
	var out []string
	for _, f := range fs {
		out = append(out, f.GetSeries(), f.GetModel())
	}
	return out
}

func (e *fuzzEnv) pushForecasts(ctx context.Context, t *testing.T, st *fuzzState, fs []*aftercastv1.Forecast, stream bool, chunk int) {
	t.Helper()
	batches := [][]*aftercastv1.Forecast{fs}
	// A stream whose message fails to marshal is cancelled midway, racing
	// the batches before it: those go unary instead.
	if stream && !slices.ContainsFunc(forecastKeys(fs), func(k string) bool { return !utf8.ValidString(k) }) {
		batches = slices.Collect(slices.Chunk(fs, chunk))
	} else {
		stream = false
	}
	w := window{from: time.Now()}
	var sum *aftercastv1.ForecastPushSummary
	var err error
	if stream {
		sum, err = e.streamForecasts(ctx, batches)
	} else {
		var r *aftercastv1.PushForecastsResponse
		r, err = e.forecasts.PushForecasts(ctx, &aftercastv1.PushForecastsRequest{Forecasts: fs})
		sum = r.GetSummary()
	}
	w.to = time.Now()
	// The server takes the messages in order and stops at the first it
	// refuses; those before it are committed.
	var want counts
	var judged []vecIn
	code, marshal := codes.OK, false
	for _, b := range batches {
		if code, marshal = e.refusal(&aftercastv1.PushForecastsRequest{Forecasts: b}, len(b), forecastKeys(b)); code != codes.OK {
			break
		}
		for _, f := range b {
			v := st.classify(f)
			st.applyForecast(v, w, &want)
			judged = append(judged, v)
		}
	}
	checkCall(t, fmt.Sprintf("pushing %d forecast vectors (stream %v)", len(fs), stream), err, code, marshal)
	if err == nil && code == codes.OK {
		checkForecastSummary(t, sum, judged, want)
	}
}

// streamForecasts sends the batches and returns the stream's status. A
// send fails with io.EOF once the server has ended the stream; the status
// then comes with CloseAndRecv.
func (e *fuzzEnv) streamForecasts(ctx context.Context, batches [][]*aftercastv1.Forecast) (*aftercastv1.ForecastPushSummary, error) {
	s, err := e.forecasts.StreamForecasts(ctx)
	if err != nil {
		return nil, err
	}
	for _, b := range batches {
		if s.Send(&aftercastv1.StreamForecastsRequest{Forecasts: b}) != nil {
			break
		}
	}
	r, err := s.CloseAndRecv()
	return r.GetSummary(), err
}

func (e *fuzzEnv) pushActuals(ctx context.Context, t *testing.T, st *fuzzState, as []*aftercastv1.Actual, stream bool, chunk int) {
	t.Helper()
	keys := func(as []*aftercastv1.Actual) []string {
		var out []string
		for _, a := range as {
			out = append(out, a.GetSeries())
		}
		return out
	}
	batches := [][]*aftercastv1.Actual{as}
	if stream && !slices.ContainsFunc(keys(as), func(k string) bool { return !utf8.ValidString(k) }) {
		batches = slices.Collect(slices.Chunk(as, chunk))
	} else {
		stream = false
	}
	w := window{from: time.Now()}
	var sum *aftercastv1.ActualPushSummary
	var err error
	if stream {
		sum, err = e.streamActuals(ctx, batches)
	} else {
		var r *aftercastv1.PushActualsResponse
		r, err = e.actuals.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: as})
		sum = r.GetSummary()
	}
	w.to = time.Now()
	var want counts
	var bad [][]string
	code, marshal := codes.OK, false
	for _, b := range batches {
		if code, marshal = e.refusal(&aftercastv1.PushActualsRequest{Actuals: b}, len(b), keys(b)); code != codes.OK {
			break
		}
		for _, a := range b {
			bad = append(bad, st.applyActual(a, w, &want))
		}
	}
	checkCall(t, fmt.Sprintf("pushing %d actuals (stream %v)", len(as), stream), err, code, marshal)
	if err == nil && code == codes.OK {
		checkActualSummary(t, sum, bad, want)
	}
}

func (e *fuzzEnv) streamActuals(ctx context.Context, batches [][]*aftercastv1.Actual) (*aftercastv1.ActualPushSummary, error) {
	s, err := e.actuals.StreamActuals(ctx)
	if err != nil {
		return nil, err
	}
	for _, b := range batches {
		if s.Send(&aftercastv1.StreamActualsRequest{Actuals: b}) != nil {
			break
		}
	}
	r, err := s.CloseAndRecv()
	return r.GetSummary(), err
}

// checkForecastSummary: the counts are the model's, and the rejections are
// listed in index order, each naming a field with a problem — a whole
// vector's, or one point's with that point's lead as sent.
func checkForecastSummary(t *testing.T, sum *aftercastv1.ForecastPushSummary, judged []vecIn, want counts) {
	t.Helper()
	got := counts{accepted: sum.GetAccepted(), duplicate: sum.GetDuplicate(), late: sum.GetLate(), rejected: sum.GetRejected()}
	if got != want {
		t.Errorf("forecast summary counts %+v, want %+v (accepted+duplicate+late+rejected = points received)", got, want)
	}
	if sum.GetRejectionsTruncated() {
		t.Errorf("rejections truncated with %d listed", len(sum.GetRejections()))
	}
	byVector := map[int64][]*aftercastv1.ForecastRejection{}
	for i, r := range sum.GetRejections() {
		if i > 0 && r.GetIndex() < sum.GetRejections()[i-1].GetIndex() {
			t.Errorf("rejections not in index order: %v", sum.GetRejections())
		}
		if r.GetIndex() < 0 || r.GetIndex() >= int64(len(judged)) || r.GetReason() == "" {
			t.Errorf("rejection %v: index out of range or no reason", r)
			continue
		}
		byVector[r.GetIndex()] = append(byVector[r.GetIndex()], r)
	}
	for i, v := range judged {
		checkVectorRejections(t, i, v, byVector[int64(i)])
	}
}

// checkVectorRejections: a vector with a whole-vector problem is listed
// whole once (unless every point it carried is listed one by one); a
// vector without one is never listed whole, and each bad point is listed
// once.
func checkVectorRejections(t *testing.T, i int, v vecIn, rs []*aftercastv1.ForecastRejection) {
	t.Helper()
	listed := make([]bool, len(v.points))
	wholes := 0
	for _, r := range rs {
		if r.GetWholeVector() {
			wholes++
			if r.GetLead() != 0 || !slices.Contains(v.whole, r.GetField()) {
				t.Errorf("vector %d: whole rejection %v, but its whole-vector problems are %q", i, r, v.whole)
			}
			continue
		}
		k := slices.IndexFunc(v.points, func(p pointIn) bool { return slices.Contains(p.bad, r.GetField()) })
		switch {
		case k < 0:
			t.Errorf("vector %d: rejection %v names no point with a problem (points %+v)", i, r, v.points)
		case listed[k] || r.GetLead() != v.points[k].lead:
			t.Errorf("vector %d: rejection %v: listed twice, or the lead is not %d as sent", i, r, v.points[k].lead)
		default:
			listed[k] = true
		}
	}
	if wholes > 1 || len(v.whole) > 0 && len(v.points) == 0 && wholes == 0 {
		t.Errorf("vector %d: %d whole rejections (problems %q)", i, wholes, v.whole)
	}
	for k, p := range v.points {
		if !listed[k] && (len(p.bad) > 0 || len(v.whole) > 0) && wholes == 0 {
			t.Errorf("vector %d: point %d (lead %d) is rejected but not listed: problems %q, vector %q, rejections %v",
				i, k, p.lead, p.bad, v.whole, rs)
		}
	}
}

// checkActualSummary: the counts are the model's; every rejected actual is
// listed once, in index order, naming a field with a problem.
func checkActualSummary(t *testing.T, sum *aftercastv1.ActualPushSummary, bad [][]string, want counts) {
	t.Helper()
	got := counts{accepted: sum.GetAccepted(), duplicate: sum.GetDuplicate(), revised: sum.GetRevised(), rejected: sum.GetRejected()}
	if got != want {
		t.Errorf("actual summary counts %+v, want %+v (accepted+duplicate+revised+rejected = actuals received)", got, want)
	}
	listed := map[int64]bool{}
	for i, r := range sum.GetRejections() {
		j := r.GetIndex()
		switch {
		case i > 0 && j <= sum.GetRejections()[i-1].GetIndex():
			t.Errorf("actual rejections not in index order, or repeated: %v", sum.GetRejections())
		case j < 0 || j >= int64(len(bad)):
			t.Errorf("actual rejection %v: index out of range", r)
		case !slices.Contains(bad[j], r.GetField()) || r.GetReason() == "":
			t.Errorf("actual rejection %v: want one of the fields %q and a reason", r, bad[j])
		}
		listed[j] = true
	}
	for j, b := range bad {
		if len(b) > 0 && !listed[int64(j)] {
			t.Errorf("actual %d is rejected (%q) but not listed: %v", j, b, sum.GetRejections())
		}
	}
}

// ---- Reading back ----

// checkReadBack: the series' models, each model's vectors and the actuals
// are exactly the model's — values bit for bit, times to the microsecond,
// receive times within the pushes that committed them.
func (e *fuzzEnv) checkReadBack(ctx context.Context, t *testing.T, st *fuzzState) {
	t.Helper()
	mr, err := e.series.ListModels(ctx, &aftercastv1.ListModelsRequest{Series: st.key})
	if err != nil {
		t.Fatalf("ListModels: %v", err)
	}
	var got, want []string
	for _, m := range mr.GetModels() {
		got = append(got, m.GetModel())
		var last time.Time
		for _, v := range st.vecs[m.GetModel()] {
			if v.origin.After(last) {
				last = v.origin
			}
		}
		if !m.GetLastOriginTime().AsTime().Equal(last) {
			t.Errorf("model %q: last origin %v, want %v", m.GetModel(), m.GetLastOriginTime().AsTime(), last)
		}
	}
	for m := range st.vecs {
		want = append(want, m)
	}
	slices.Sort(got)
	slices.Sort(want)
	if !slices.Equal(got, want) {
		t.Errorf("models %q, want %q", got, want)
	}
	for m, vecs := range st.vecs {
		e.checkForecasts(ctx, t, st.key, m, vecs)
	}
	e.checkActuals(ctx, t, st)
}

func (e *fuzzEnv) checkForecasts(ctx context.Context, t *testing.T, key, model string, vecs map[int64]*wantVector) {
	t.Helper()
	r, err := e.forecasts.ListForecasts(ctx, &aftercastv1.ListForecastsRequest{Series: key, Model: model, PageSize: 1000})
	if err != nil || r.GetNextPageToken() != "" {
		t.Fatalf("ListForecasts %q: %v %v", model, r, err)
	}
	want := sortedByKey(vecs)
	if len(r.GetForecasts()) != len(want) {
		t.Errorf("model %q: %d vectors read back, want %d: %v", model, len(r.GetForecasts()), len(want), r.GetForecasts())
		return
	}
	for i, got := range r.GetForecasts() {
		w := want[i]
		issueOK := w.issue == nil && w.issueAt.holds(got.GetIssueTime()) || w.issue != nil && got.GetIssueTime().AsTime().Equal(*w.issue)
		if !got.GetOriginTime().AsTime().Equal(w.origin) || !issueOK || !w.first.holds(got.GetFirstReceiveTime()) || !w.last.holds(got.GetReceiveTime()) {
			t.Errorf("model %q: vector %v read back; want origin %v, issue %v (else within %v), first received within %v, last within %v",
				model, got, w.origin, w.issue, w.issueAt, w.first, w.last)
		}
		if msg := diffPoints(got.GetPoints(), w.points); msg != "" {
			t.Errorf("model %q, origin %v: %s", model, w.origin, msg)
		}
	}
}

// diffPoints compares points bit for bit: -0 is not 0, and a NaN would
// not equal itself.
func diffPoints(got []*aftercastv1.StoredPoint, want map[int32]*wantPoint) string {
	leads := sortedKeys(want)
	if len(got) != len(leads) {
		return fmt.Sprintf("points %v, want leads %v", got, leads)
	}
	for i, p := range got {
		w := want[leads[i]]
		reissueOK := (p.LateReissue == nil) == (w.reissue == nil) && (w.reissue == nil || sameBits(p.GetLateReissue(), *w.reissue))
		if p.GetLead() != leads[i] || !sameBits(p.GetValue(), w.value) || p.GetLate() != w.late || !reissueOK {
			return fmt.Sprintf("point %v (value bits %#x), want lead %d value %v (bits %#x) late %v late re-issue %v",
				p, math.Float64bits(p.GetValue()), leads[i], w.value, math.Float64bits(w.value), w.late, fmtPtr(w.reissue))
		}
	}
	return ""
}

func (e *fuzzEnv) checkActuals(ctx context.Context, t *testing.T, st *fuzzState) {
	t.Helper()
	r, err := e.actuals.ListActuals(ctx, &aftercastv1.ListActualsRequest{Series: st.key, PageSize: 10000})
	if err != nil || r.GetNextPageToken() != "" {
		t.Fatalf("ListActuals: %v %v", r, err)
	}
	want := sortedByKey(st.acts)
	if len(r.GetActuals()) != len(want) {
		t.Errorf("%d actuals read back, want %d: %v", len(r.GetActuals()), len(want), r.GetActuals())
		return
	}
	for i, got := range r.GetActuals() {
		w := want[i]
		if !got.GetTime().AsTime().Equal(w.time) || !sameBits(got.GetValue(), w.value) || got.GetRevisions() != w.revisions ||
			!w.first.holds(got.GetFirstReceiveTime()) || !w.last.holds(got.GetReceiveTime()) {
			t.Errorf("actual %v read back (value bits %#x); want time %v value %v (bits %#x) revisions %d, first received within %v, last within %v",
				got, math.Float64bits(got.GetValue()), w.time, w.value, math.Float64bits(w.value), w.revisions, w.first, w.last)
		}
	}
}

func sameBits(a, b float64) bool { return math.Float64bits(a) == math.Float64bits(b) }

func fmtPtr(p *float64) string {
	if p == nil {
		return "none"
	}
	return fmt.Sprint(*p)
}

func sortedKeys[K int32 | int64, V any](m map[K]V) []K {
	ks := make([]K, 0, len(m))
	for k := range m {
		ks = append(ks, k)
	}
	slices.Sort(ks)
	return ks
}

func sortedByKey[V any](m map[int64]V) []V {
	var out []V
	for _, k := range sortedKeys(m) {
		out = append(out, m[k])
	}
	return out
}

// lockedBuffer collects the server's log between inputs.
type lockedBuffer struct {
	mu  sync.Mutex
	buf bytes.Buffer
}

func (b *lockedBuffer) Write(p []byte) (int, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.Write(p)
}

func (b *lockedBuffer) take() string {
	b.mu.Lock()
	defer b.mu.Unlock()
	s := b.buf.String()
	b.buf.Reset()
	return s
}

// ---- Seeds ----

type fuzzSeed struct {
	shape      uint8
	key, model string
	script     []byte
}

// Script pieces for readable seeds (see fuzzScript for the grammar).
const (
	opForecasts = 0 // | items−1 << 2
	opActuals   = 1
	opStream    = 2 // | items per message − 1 << 5
	vDense      = 0 // vector flags
	vOtherKey   = 1
	vModel      = 2
	vIssue      = 4
	vSparse     = 1 << 3
	vNone       = 3 << 3
	vEmptyDense = vNone | 1<<5
	vQuantiles  = 1 << 7
)

func push(op byte, items int) byte { return op | byte(items-1)<<2 }
func grid(k int) []byte            { return []byte{0, byte(k + 4)} } // grid point k, −4..11
func nearEnd(j int) []byte         { return []byte{4, byte(j << 1)} }
func nearStart(j int) []byte       { return []byte{4, byte(j<<1 | 1)} }
func subMicro(k, ns int) []byte    { return []byte{5, byte(k + 4), byte(ns)} }
func noTime() []byte               { return []byte{7} }
func num(v int) []byte             { return []byte{0, byte(v)} } // v in −3..3
func special(i int) []byte         { return []byte{2, byte(i)} } // specialValues[i]
func lead(h int) []byte            { return []byte{0, byte(h)} } // 0..7

func cat(parts ...any) []byte {
	var out []byte
	for _, p := range parts {
		switch p := p.(type) {
		case byte:
			out = append(out, p)
		case int:
			out = append(out, byte(p))
		case []byte:
			out = append(out, p...)
		}
	}
	return out
}

func fuzzSeeds() []fuzzSeed {
	return []fuzzSeed{
		// Hourly: a vector, two actuals on its targets, a re-issue (late
		// for leads 1–2, accepted for 3), a revision and a duplicate.
		{0, "elsewhere", "model-b", cat(
			push(opForecasts, 1), vDense, grid(0), 3, num(1), num(2), num(3),
			push(opActuals, 2), 0, grid(1), num(2), 0, grid(2), num(2),
			push(opForecasts, 1), vDense, grid(0), 3, num(2), num(3), num(-1),
			push(opActuals, 2), 0, grid(1), num(3), 0, grid(1), num(3))},
		// Sparse points: lead 0, a repeat, beyond the horizon (its lead is to
		// blame), NaN, Inf, −0, a subnormal.
		{0, "k", "m2", cat(
			push(opForecasts, 1), vSparse|vModel, grid(1), 5,
			lead(0), num(1), lead(2), num(1), lead(2), num(2), lead(7), num(1), lead(3), special(0),
			push(opForecasts, 1), vSparse, grid(2), 3, lead(1), special(1), lead(2), special(4), lead(3), special(7))},
		// Whole vectors refused: an unknown series, a bad model, no values,
		// an empty dense list, a missing and a sub-microsecond origin.
		{1, "no-such-series", "bad model", cat(
			push(opForecasts, 6), vOtherKey, grid(0), 1, num(1), vModel, grid(0), 1, num(1), vNone, grid(0), 0,
			vEmptyDense, grid(0), 0, vDense, noTime(), 1, num(1), vDense, subMicro(0, 1), 1, num(1))},
		// Quantiles: a good one, a level out of range, a repeated level,
		// a sparse vector of one point (lead 2) with two quantile values.
		{2, "", "", cat(
			push(opForecasts, 3),
			vDense|vQuantiles, grid(0), 2, num(1), num(2), 0, 0, 1, num(0), num(1),
			vDense|vQuantiles, grid(1), 1, num(1), 1, 0, 1, num(0), 4, 1, num(0),
			vSparse|vQuantiles, grid(2), 1, lead(2), num(1), 0, 0, 2, num(0), num(0))},
		// The ends of the range: targets at or after its end, origins at
		// its start; a stream of two messages.
		{3, "", "", cat(
			push(opForecasts|opStream, 2), vDense, nearEnd(0), 4, num(1), num(1), num(1), num(1),
			vDense, nearStart(0), 2, num(1), num(2))},
		{4, "", "", cat(
			push(opActuals, 2), 0, nearEnd(0), num(1), 0, nearStart(0), num(1),
			push(opForecasts, 1), vDense, nearEnd(1), 3, num(0), num(0), num(0))},
		// Daily across a DST change: actuals first, then late forecasts.
		{2, "", "", cat(
			push(opActuals, 3), 0, grid(1), num(1), 0, grid(2), num(1), 0, grid(3), num(0),
			push(opForecasts, 2), vDense, grid(0), 5, num(1), num(2), num(3), num(3), num(3),
			vDense|vIssue, grid(0), grid(-2), 2, num(1), num(3))},
		// Actuals: ±0, a revision back and forth in one batch, off the grid.
		{0, "", "", cat(
			push(opActuals, 5), 0, grid(0), special(3), 0, grid(0), special(4), 0, grid(1), num(1), 0, grid(1), num(2),
			0, grid(1), num(1),
			push(opActuals, 2), 0, subMicro(2, 1), num(1), 0, []byte{5 | 2<<3, 6, 1}, num(1))},
		// Limits: a message over the size limit, more items than max_batch.
		{0, "", "", cat(
			push(opForecasts, 2), vDense, grid(0), 0xff, vDense, grid(1), 0xff,
			push(opActuals, 7))},
		// Keys that are not UTF-8 fail on the client; a model with a NUL is
		// refused by its pattern.
		{0, "bad\xffkey", "m\x00", cat(
			push(opForecasts, 2), vDense, grid(0), 1, num(1), vOtherKey, grid(0), 1, num(1),
			push(opActuals, 1), 0, grid(0), num(1),
			push(opForecasts, 1), vModel, grid(1), 1, num(1))},
		// A series key with a NUL is valid UTF-8: an unknown series, refused.
		{0, "nul\x00key", "", cat(push(opActuals, 1), vOtherKey, grid(0), num(1))},
		// A sparse vector whose only point is refused: one point, one rejection.
		{0, "", "", cat(push(opForecasts, 1), vSparse, grid(0), 1, lead(0), num(1))},
		// Rejections of two vectors: listed in index order.
		{0, "", "", cat(push(opForecasts, 2), vDense, grid(0), 1, special(1), vDense, grid(1), 1, special(0))},
		// A lead repeated after a NaN point: still a repeat.
		{0, "", "", cat(push(opForecasts, 1), vSparse, grid(0), 2, lead(2), special(0), lead(2), num(1))},
		// A stored actual revised and revised back in one batch: two revisions.
		{0, "", "", cat(push(opActuals, 1), 0, grid(1), num(1), push(opActuals, 2), 0, grid(1), num(2), 0, grid(1), num(1))},
	}
}
