package server_test

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"net/http"
	"os/exec"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// metricsServer runs a server with cfg (addresses and database filled in)
// on its own registry, with the Go and process collectors as cmd adds them.
func metricsServer(t *testing.T, dbURL string, cfg server.Config) (*server.Server, *prometheus.Registry) {
	t.Helper()
	reg := prometheus.NewRegistry()
	reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	cfg.Listen, cfg.MetricsListen, cfg.DatabaseURL, cfg.Logger, cfg.Registry = "127.0.0.1:0", "127.0.0.1:0", dbURL, storetest.Logger(t), reg
	srv, err := server.New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	if err := srv.Start(ctx); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = srv.Stop(context.Background()) })
	return srv, reg
}

// The metrics scenario: three series of horizon 6 with different decision
// leads, one model with a usable baseline, 20 production origins scored.
const (
	mModel    = "gbm"
	mHorizon  = 6
	mBacktest = 365
	mProd     = 20
)

var (
	mT0       = time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)
	mDecision = map[string][]int{"fleet/a": {2, 5}, "fleet/b": nil, "fleet/c": {6}} // nil: every lead
	mSeries   = []string{"fleet/a", "fleet/b", "fleet/c"}                           // key order
)

func mOrigin(k int) time.Time { return mT0.Add(time.Duration(k) * 24 * time.Hour) }

func mLevel(t time.Time) float64 { return 100 + 10*math.Sin(float64(t.Unix())/7200) }

// decisionOf is the decision leads of a series as the store resolves them.
func decisionOf(key string) []int {
	se := store.Series{Horizon: mHorizon, DecisionLeads: mDecision[key]}
	return se.Decision()
}

// pushTotals accumulates the acknowledgements of the pushes, to compare with
// the counters.
type pushTotals struct {
	forecast map[string]int64 // by result
	actual   map[string]int64
}

func (p *pushTotals) addForecasts(t *testing.T, r *aftercastv1.PushForecastsResponse, err error) {
	t.Helper()
	if err != nil {
		t.Fatal(err)
	}
	s := r.GetSummary()
	p.forecast["accepted"] += s.GetAccepted()
	p.forecast["duplicate"] += s.GetDuplicate()
	p.forecast["late"] += s.GetLate()
	p.forecast["rejected"] += s.GetRejected()
}

func (p *pushTotals) addActuals(t *testing.T, r *aftercastv1.PushActualsResponse, err error) {
	t.Helper()
	if err != nil {
		t.Fatal(err)
	}
	s := r.GetSummary()
	p.actual["accepted"] += s.GetAccepted()
	p.actual["duplicate"] += s.GetDuplicate()
	p.actual["revised"] += s.GetRevised()
	p.actual["rejected"] += s.GetRejected()
}

// populate creates the scenario through srv and returns what the pushes
// acknowledged.
func populate(t *testing.T, ctx context.Context, srv *server.Server) pushTotals {
	t.Helper()
	conn, err := grpc.NewClient(srv.GRPCAddr(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	series, forecasts, actuals := aftercastv1.NewSeriesServiceClient(conn), aftercastv1.NewForecastServiceClient(conn), aftercastv1.NewActualServiceClient(conn)
	tot := pushTotals{forecast: map[string]int64{}, actual: map[string]int64{}}
	r := rand.New(rand.NewPCG(5, 42))
	var rows []store.BacktestRow
	for _, key := range mSeries {
		var dec []int32
		for _, h := range mDecision[key] {
			dec = append(dec, int32(h))
		}
		if _, err := series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: key, Step: "1h", Horizon: mHorizon, DecisionLeads: dec}}); err != nil {
			t.Fatal(err)
		}
		for k := range mBacktest {
			o := mOrigin(k)
			for h := 1; h <= mHorizon; h++ {
				tg := o.Add(time.Duration(h) * time.Hour)
				y := mLevel(tg)
				rows = append(rows, store.BacktestRow{Series: key, Origin: o, Target: tg, Actual: y, Forecast: y - r.NormFloat64()})
			}
		}
	}
	if _, err := srv.Store().ImportBaseline(ctx, mModel, rows, nil); err != nil {
		t.Fatal(err)
	}
	vector := func(key string, o time.Time, noise func() float64) *aftercastv1.Forecast {
		vals := make([]float64, mHorizon)
		for h := range vals {
			vals[h] = mLevel(o.Add(time.Duration(h+1)*time.Hour)) - noise()
		}
		return &aftercastv1.Forecast{Series: key, Model: mModel, OriginTime: timestamppb.New(o),
			Values: &aftercastv1.Forecast_Dense{Dense: &aftercastv1.DenseValues{Values: vals}}}
	}
	targets := func(key string, o time.Time) []*aftercastv1.Actual {
		var as []*aftercastv1.Actual
		for h := 1; h <= mHorizon; h++ {
			tg := o.Add(time.Duration(h) * time.Hour)
			as = append(as, &aftercastv1.Actual{Series: key, Time: timestamppb.New(tg), Value: mLevel(tg)})
		}
		return as
	}
	for _, key := range mSeries {
		var fs []*aftercastv1.Forecast
		var as []*aftercastv1.Actual
		for k := mBacktest; k < mBacktest+mProd; k++ {
			fs = append(fs, vector(key, mOrigin(k), r.NormFloat64))
			as = append(as, targets(key, mOrigin(k))...)
		}
		f, err := forecasts.PushForecasts(ctx, &aftercastv1.PushForecastsRequest{Forecasts: fs})
		tot.addForecasts(t, f, err)
		a, err := actuals.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: as})
		tot.addActuals(t, a, err)
	}
	// Late: the actuals of an origin before production arrive first.
	early := mOrigin(mBacktest - 1)
	a, err := actuals.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: targets("fleet/a", early)})
	tot.addActuals(t, a, err)
	f, err := forecasts.PushForecasts(ctx, &aftercastv1.PushForecastsRequest{Forecasts: []*aftercastv1.Forecast{vector("fleet/a", early, func() float64 { return 0 })}})
	tot.addForecasts(t, f, err)
	// A NaN is rejected, the rest of its vector (after production) accepted.
	next := vector("fleet/a", mOrigin(mBacktest+mProd), func() float64 { return 0 })
	next.GetDense().Values[0] = math.NaN()
	// Pushed again: duplicates (and the NaN rejected again).
	for range 2 {
		f, err = forecasts.PushForecasts(ctx, &aftercastv1.PushForecastsRequest{Forecasts: []*aftercastv1.Forecast{next}})
		tot.addForecasts(t, f, err)
	}
	// A re-issue after the actuals arrived: late, not applied.
	f, err = forecasts.PushForecasts(ctx, &aftercastv1.PushForecastsRequest{Forecasts: []*aftercastv1.Forecast{vector("fleet/b", mOrigin(mBacktest), func() float64 { return 1e9 })}})
	tot.addForecasts(t, f, err)
	// A revised actual, then the same value again, then one without a time.
	last := mOrigin(mBacktest + 3).Add(2 * time.Hour)
	for _, act := range []*aftercastv1.Actual{
		{Series: "fleet/c", Time: timestamppb.New(last), Value: mLevel(last) + 0.5},
		{Series: "fleet/c", Time: timestamppb.New(last), Value: mLevel(last) + 0.5},
		{Series: "fleet/c", Value: 1},
	} {
		a, err := actuals.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: []*aftercastv1.Actual{act}})
		tot.addActuals(t, a, err)
	}
	for _, want := range []struct {
		got  int64
		name string
	}{{tot.forecast["late"], "late forecasts"}, {tot.forecast["rejected"], "rejected forecasts"}, {tot.forecast["duplicate"], "duplicate forecasts"},
		{tot.actual["revised"], "revised actuals"}, {tot.actual["duplicate"], "duplicate actuals"}, {tot.actual["rejected"], "rejected actuals"}} {
		if want.got == 0 {
			t.Fatalf("the scenario produced no %s", want.name)
		}
	}
	return tot
}

// family returns the samples of one family: label set (sorted name=value
// pairs joined by ",") → value.
func family(t *testing.T, g prometheus.Gatherer, name string) map[string]float64 {
	t.Helper()
	mfs, err := g.Gather()
	if err != nil {
		t.Fatal(err)
	}
	out := map[string]float64{}
	for _, mf := range mfs {
		if mf.GetName() != name {
			continue
		}
		for _, m := range mf.GetMetric() {
			var ls []string
			for _, l := range m.GetLabel() {
				ls = append(ls, l.GetName()+"="+l.GetValue())
			}
			slices.Sort(ls)
			v := m.GetGauge().GetValue() + m.GetCounter().GetValue() + m.GetUntyped().GetValue()
			out[strings.Join(ls, ",")] = v
		}
	}
	return out
}

// sameFamily reports whether the family name is present in a and b and
// equal.
func sameFamily[M interface {
	proto.Message
	GetName() string
}](a, b []M, name string) bool {
	ia := slices.IndexFunc(a, func(mf M) bool { return mf.GetName() == name })
	ib := slices.IndexFunc(b, func(mf M) bool { return mf.GetName() == name })
	return ia >= 0 && ib >= 0 && proto.Equal(a[ia], b[ib])
}

func lint(t *testing.T, g prometheus.Gatherer) {
	t.Helper()
	problems, err := testutil.GatherAndLint(g)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range problems {
		t.Errorf("lint: %s: %s", p.Metric, p.Text)
	}
}

// perLeadSet is the (series, lead) pairs of aftercast_lead_drift_state,
// checking that each has exactly one state at 1.
func perLeadSet(t *testing.T, g prometheus.Gatherer) map[string][]int {
	t.Helper()
	ones := map[string]int{}
	states := map[string]int{}
	for ls, v := range family(t, g, "aftercast_lead_drift_state") {
		var key string
		for _, kv := range strings.Split(ls, ",") {
			if !strings.HasPrefix(kv, "state=") {
				key += kv + ","
			}
		}
		states[key]++
		if v == 1 {
			ones[key]++
		}
	}
	out := map[string][]int{}
	for key, n := range states {
		if n != 5 || ones[key] != 1 {
			t.Errorf("lead state set %s: %d samples, %d at 1; want 5 and 1", key, n, ones[key])
		}
		var series string
		var lead int
		for _, kv := range strings.Split(strings.TrimSuffix(key, ","), ",") {
			k, v, _ := strings.Cut(kv, "=")
			switch k {
			case "series":
				series = v
			case "lead":
				if _, err := fmt.Sscan(v, &lead); err != nil {
					t.Errorf("lead state set %s: lead %q: %v", key, v, err)
				}
			}
		}
		out[series] = append(out[series], lead)
	}
	for k := range out {
		slices.Sort(out[k])
	}
	return out
}

// waitCounted waits until aftercast_drift_state_changes_total sums to at
// least n. An evaluation counts its events right after its commit, so a
// drain may see the marks gone a moment before the count moves.
func waitCounted(t *testing.T, g prometheus.Gatherer, n int) {
	t.Helper()
	deadline := time.Now().Add(10 * time.Second)
	for {
		var sum float64
		for _, v := range family(t, g, "aftercast_drift_state_changes_total") {
			sum += v
		}
		if sum >= float64(n) {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("aftercast_drift_state_changes_total sums to %v after 10s, want %d (the stored events)", sum, n)
		}
		time.Sleep(10 * time.Millisecond)
	}
}

// labelValues returns the sorted distinct values of label in a family.
func labelValues(t *testing.T, g prometheus.Gatherer, name, label string) []string {
	t.Helper()
	var out []string
	for ls := range family(t, g, name) {
		for _, kv := range strings.Split(ls, ",") {
			if k, v, _ := strings.Cut(kv, "="); k == label && !slices.Contains(out, v) {
				out = append(out, v)
			}
		}
	}
	slices.Sort(out)
	return out
}

func TestMetrics(t *testing.T) {
	t.Parallel()
	url := storetest.URL(t)
	ctx, cancel := context.WithTimeout(context.Background(), 3*time.Minute)
	t.Cleanup(cancel)
	srv, reg := metricsServer(t, url, server.Config{})

	// Before any push the counters exist at zero for every label value.
	if got := family(t, reg, "aftercast_forecast_points_received_total"); len(got) != 4 || got["result=accepted"] != 0 {
		t.Fatalf("forecast counter before pushes: %v", got)
	}
	if got := family(t, reg, "aftercast_drift_state_changes_total"); len(got) != 10 {
		t.Fatalf("state change counter before pushes: %d label sets, want 2 levels × 5 states", len(got))
	}
	tot := populate(t, ctx, srv)
	// Drift is judged off the request path: settle it, and wait until the
	// evaluation that committed last has been counted.
	if err := srv.Drift().Drain(ctx); err != nil {
		t.Fatal(err)
	}
	evs, err := srv.Store().DriftEvents(ctx, store.EventFilter{})
	if err != nil {
		t.Fatal(err)
	}
	if len(evs) == 0 {
		t.Fatal("no drift events")
	}
	waitCounted(t, reg, len(evs))
	sts, err := srv.Store().DriftStates(ctx, "", "")
	if err != nil {
		t.Fatal(err)
	}

	t.Run("lint", func(t *testing.T) {
		t.Parallel()
		lint(t, reg)
	})

	t.Run("counters", func(t *testing.T) {
		t.Parallel()
		for name, want := range map[string]map[string]int64{
			"aftercast_forecast_points_received_total": tot.forecast,
			"aftercast_actuals_received_total":         tot.actual,
		} {
			got := family(t, reg, name)
			for result, n := range want {
				if got["result="+result] != float64(n) {
					t.Errorf("%s{result=%q} = %v, want %d (the acknowledgements)", name, result, got["result="+result], n)
				}
			}
		}
		if err := testutil.GatherAndCompare(reg, strings.NewReader(fmt.Sprintf(`
# HELP aftercast_pairs_scored_total Forecast-actual pairs completed by actuals accepted by this process.
# TYPE aftercast_pairs_scored_total counter
aftercast_pairs_scored_total %d
`, len(mSeries)*mProd*mHorizon)), "aftercast_pairs_scored_total"); err != nil {
			t.Error(err)
		}
		// State changes: as many as the stored drift events, by level and state.
		want := map[string]float64{}
		for _, ev := range evs {
			level := "lead"
			if ev.Lead == 0 {
				level = "series"
			}
			want[fmt.Sprintf("level=%s,state=%s", level, ev.State)]++
		}
		got := family(t, reg, "aftercast_drift_state_changes_total")
		for k, v := range got {
			if v != want[k] {
				t.Errorf("aftercast_drift_state_changes_total{%s} = %v, want %v", k, v, want[k])
			}
		}
		if got["level=series,state=within"] == 0 {
			t.Errorf("no series-level change to within: %v", got)
		}
	})

	t.Run("series families", func(t *testing.T) {
		t.Parallel()
		// One state set per (series, model), exactly one state at 1.
		states := family(t, reg, "aftercast_series_drift_state")
		if len(states) != 5*len(mSeries) {
			t.Errorf("aftercast_series_drift_state has %d series, want %d", len(states), 5*len(mSeries))
		}
		for _, key := range mSeries {
			ones := 0
			for _, s := range []scoring.State{scoring.StateWithin, scoring.StateDegraded, scoring.StateImproved,
				scoring.StateInsufficientData, scoring.StateInsufficientBaseline} {
				v, ok := states[fmt.Sprintf("model=%s,series=%s,state=%s", mModel, key, s)]
				if !ok {
					t.Errorf("%s: no sample for state %s", key, s)
				}
				ones += int(v)
			}
			if ones != 1 {
				t.Errorf("%s: %d states at 1, want 1", key, ones)
			}
		}
		for name, n := range map[string]int{
			"aftercast_series_window_mae": 3, "aftercast_series_window_me": 3, "aftercast_series_window_pairs": 3,
			"aftercast_series_expected": 6, "aftercast_series_band_lower": 6, "aftercast_series_band_upper": 6,
			"aftercast_series_alarm_upper": 6, "aftercast_series_alarm_lower": 3,
			"aftercast_series_last_origin_timestamp_seconds": 3, "aftercast_series_origin_interval_seconds": 3,
			"aftercast_series_last_actual_timestamp_seconds": 3, "aftercast_series_last_actual_received_timestamp_seconds": 3,
		} {
			if got, err := testutil.GatherAndCount(reg, name); err != nil || got != n {
				t.Errorf("%s: %d series (%v), want %d", name, got, err, n)
			}
		}
		if got := family(t, reg, "aftercast_series_window_pairs"); got["model=gbm,series=fleet/b"] != mProd {
			t.Errorf("pooled window pairs %v, want %d for fleet/b", got, mProd)
		}
		// Freshness: the newest actual (production's last target) and origin
		// (the vector after production), and the daily cadence of the baseline.
		lastTarget := mOrigin(mBacktest + mProd - 1).Add(mHorizon * time.Hour).Unix()
		var exp strings.Builder
		exp.WriteString("# HELP aftercast_series_last_actual_timestamp_seconds Time of the newest actual received for the series.\n")
		exp.WriteString("# TYPE aftercast_series_last_actual_timestamp_seconds gauge\n")
		for _, key := range mSeries {
			fmt.Fprintf(&exp, "aftercast_series_last_actual_timestamp_seconds{series=%q} %d\n", key, lastTarget)
		}
		exp.WriteString("# HELP aftercast_series_origin_interval_seconds Usual gap between origins: the step times the baseline's origin cadence (the step without a baseline).\n")
		exp.WriteString("# TYPE aftercast_series_origin_interval_seconds gauge\n")
		for _, key := range mSeries {
			fmt.Fprintf(&exp, "aftercast_series_origin_interval_seconds{model=%q,series=%q} 86400\n", mModel, key)
		}
		if err := testutil.GatherAndCompare(reg, strings.NewReader(exp.String()),
			"aftercast_series_last_actual_timestamp_seconds", "aftercast_series_origin_interval_seconds"); err != nil {
			t.Error(err)
		}
		if got := family(t, reg, "aftercast_series_last_origin_timestamp_seconds"); got["model=gbm,series=fleet/a"] != float64(mOrigin(mBacktest+mProd).Unix()) ||
			got["model=gbm,series=fleet/c"] != float64(mOrigin(mBacktest+mProd-1).Unix()) {
			t.Errorf("last origins %v", got)
		}
	})

	t.Run("per-lead families for decision leads", func(t *testing.T) {
		t.Parallel()
		got := perLeadSet(t, reg)
		for _, key := range mSeries {
			if !slices.Equal(got[key], decisionOf(key)) {
				t.Errorf("%s: per-lead families for leads %v, want the decision leads %v", key, got[key], decisionOf(key))
			}
		}
		var leads int
		for _, key := range mSeries {
			leads += len(decisionOf(key))
		}
		for name, n := range map[string]int{
			"aftercast_lead_window_mae": leads, "aftercast_lead_window_rmse": leads, "aftercast_lead_window_me": leads,
			"aftercast_lead_window_pairs": leads, "aftercast_lead_expected": 3 * leads, "aftercast_lead_band_lower": 3 * leads,
			"aftercast_lead_band_upper": 3 * leads, "aftercast_lead_alarm_upper": 3 * leads, "aftercast_lead_alarm_lower": leads,
			"aftercast_lead_drift_state": 5 * leads,
		} {
			if got, err := testutil.GatherAndCount(reg, name); err != nil || got != n {
				t.Errorf("%s: %d series (%v), want %d", name, got, err, n)
			}
		}
		if err := testutil.GatherAndCompare(reg, strings.NewReader(`
# HELP aftercast_metrics_series_dropped_total (series, model) pairs left out of the per-lead families by the --metrics-max-series cap, summed over scrapes.
# TYPE aftercast_metrics_series_dropped_total counter
aftercast_metrics_series_dropped_total 0
`), "aftercast_metrics_series_dropped_total"); err != nil {
			t.Error(err)
		}
	})

	t.Run("metric labels and values", func(t *testing.T) {
		t.Parallel()
		// Mean error is "me" everywhere, as scoring spells it.
		for name, want := range map[string][]string{
			"aftercast_lead_expected": {"mae", "me", "rmse"}, "aftercast_lead_band_lower": {"mae", "me", "rmse"},
			"aftercast_lead_band_upper": {"mae", "me", "rmse"}, "aftercast_lead_alarm_upper": {"mae", "me", "rmse"},
			"aftercast_lead_alarm_lower": {"me"}, "aftercast_series_expected": {"mae", "me"}, "aftercast_series_band_lower": {"mae", "me"},
			"aftercast_series_band_upper": {"mae", "me"}, "aftercast_series_alarm_upper": {"mae", "me"}, "aftercast_series_alarm_lower": {"me"},
		} {
			if got := labelValues(t, reg, name, "metric"); !slices.Equal(got, want) {
				t.Errorf("%s: metric label values %v, want %v", name, got, want)
			}
		}
		mfs, err := reg.Gather()
		if err != nil {
			t.Fatal(err)
		}
		for _, mf := range mfs {
			if strings.Contains(mf.GetName(), "bias") {
				t.Errorf("family %s: mean error is spelled me", mf.GetName())
			}
			for _, m := range mf.GetMetric() {
				for _, l := range m.GetLabel() {
					if l.GetValue() == "bias" {
						t.Errorf("%s has label %s=bias: mean error is spelled me", mf.GetName(), l.GetName())
					}
				}
			}
		}
		// The pooled families carry the stored snapshot, each value under
		// its own name.
		for _, st := range sts {
			if st.Lead != 0 {
				continue
			}
			key := fmt.Sprintf("model=%s,series=%s", st.Model, st.Series)
			sn := st.Snapshot
			for _, c := range []struct {
				name, metric string
				want         *float64
			}{
				{"aftercast_series_window_mae", "", sn.MAE}, {"aftercast_series_window_me", "", sn.ME},
				{"aftercast_series_expected", "me", sn.MEExpected}, {"aftercast_series_alarm_upper", "mae", sn.MAEAlarmLimit},
				{"aftercast_series_alarm_upper", "me", sn.MEAlarmUpper}, {"aftercast_series_alarm_lower", "me", sn.MEAlarmLower},
				{"aftercast_series_band_lower", "me", sn.MEBandLower}, {"aftercast_series_band_upper", "mae", sn.MAEBandUpper},
			} {
				k := key
				if c.metric != "" {
					k = "metric=" + c.metric + "," + key
				}
				got, ok := family(t, reg, c.name)[k]
				if c.want == nil || !ok || got != *c.want {
					t.Errorf("%s{%s} = %v (present %v), want the stored %v", c.name, k, got, ok, c.want)
				}
			}
		}
	})

	t.Run("onsets in data time", func(t *testing.T) {
		t.Parallel()
		seriesOnset := family(t, reg, "aftercast_series_drift_onset_origin_timestamp_seconds")
		since := family(t, reg, "aftercast_series_drift_origins_since_onset")
		leadOnset := family(t, reg, "aftercast_lead_drift_onset_origin_timestamp_seconds")
		exported := perLeadSet(t, reg)
		first, last := mOrigin(mBacktest), mOrigin(mBacktest+mProd-1)
		var nSeries, nLead int
		for _, st := range sts {
			key := fmt.Sprintf("model=%s,series=%s", st.Model, st.Series)
			fam, k := seriesOnset, key
			if st.Lead > 0 {
				if !slices.Contains(exported[st.Series], st.Lead) {
					continue
				}
				fam, k = leadOnset, fmt.Sprintf("lead=%d,%s", st.Lead, key)
			}
			got, ok := fam[k]
			if st.Onset.IsZero() {
				if ok {
					t.Errorf("{%s}: onset gauge %v for a state without onset", k, got)
				}
				continue
			}
			if st.Lead > 0 {
				nLead++
			} else {
				nSeries++
			}
			// The origin the state was entered at, not when it was noticed.
			if !ok || got != float64(st.Onset.Unix()) {
				t.Errorf("{%s}: onset gauge %v (present %v), want the stored onset origin %v = %d", k, got, ok, st.Onset, st.Onset.Unix())
			}
			if st.Onset.Before(first) || st.Onset.After(last) {
				t.Errorf("{%s}: stored onset %v is not a production origin (%v … %v)", k, st.Onset, first, last)
			}
			if st.Lead == 0 {
				// Daily origins, every one scored for every decision lead:
				// the origins judged after the onset are the days from it to
				// the last origin.
				want := int(st.LastOrigin.Sub(st.Onset) / (24 * time.Hour))
				if since[key] != float64(want) || st.Snapshot.OriginsSinceOnset != want {
					t.Errorf("{%s}: origins since onset %v, stored %d, want %d (onset %v, last origin %v)",
						key, since[key], st.Snapshot.OriginsSinceOnset, want, st.Onset, st.LastOrigin)
				}
			}
		}
		if nSeries != len(mSeries) {
			t.Fatalf("%d series states with an onset, want all %d (every series left insufficient_data)", nSeries, len(mSeries))
		}
		if len(seriesOnset) != nSeries || len(since) != nSeries || len(leadOnset) != nLead {
			t.Errorf("onset gauges: %d series, %d since-onset, %d leads; want %d, %d, %d",
				len(seriesOnset), len(since), len(leadOnset), nSeries, nSeries, nLead)
		}
	})

	t.Run("evaluation backlog drained", func(t *testing.T) {
		t.Parallel()
		if err := testutil.GatherAndCompare(reg, strings.NewReader(backlogText(0, 0)),
			"aftercast_drift_marks_pending", "aftercast_drift_marks_oldest_age_seconds"); err != nil {
			t.Error(err)
		}
	})

	t.Run("grpc and pool", func(t *testing.T) {
		t.Parallel()
		handled := family(t, reg, "grpc_server_handled_total")
		if handled["grpc_code=OK,grpc_method=PushForecasts,grpc_service=aftercast.v1.ForecastService,grpc_type=unary"] < 4 {
			t.Errorf("PushForecasts OK count %v, want ≥ 4", handled["grpc_code=OK,grpc_method=PushForecasts,grpc_service=aftercast.v1.ForecastService,grpc_type=unary"])
		}
		if _, ok := handled["grpc_code=Unavailable,grpc_method=WatchDriftEvents,grpc_service=aftercast.v1.DriftService,grpc_type=server_stream"]; !ok {
			t.Error("grpc_server_handled_total is not initialised for every method and code")
		}
		if n, err := testutil.GatherAndCount(reg, "grpc_server_handling_seconds"); err != nil || n == 0 {
			t.Errorf("grpc_server_handling_seconds: %d %v", n, err)
		}
		for _, name := range []string{"aftercast_db_pool_max_conns", "aftercast_db_pool_total_conns", "aftercast_db_pool_acquire_count_total"} {
			if v := family(t, reg, name)[""]; v <= 0 {
				t.Errorf("%s = %v, want > 0", name, v)
			}
		}
	})

	t.Run("scrape", func(t *testing.T) {
		t.Parallel()
		resp, err := get(t.Context(), "http://"+srv.MetricsAddr()+"/metrics")
		if err != nil {
			t.Fatal(err)
		}
		body, err := io.ReadAll(resp.Body)
		resp.Body.Close()
		if err != nil || resp.StatusCode != http.StatusOK {
			t.Fatalf("GET /metrics: %d %v", resp.StatusCode, err)
		}
		for _, want := range []string{`aftercast_series_drift_state{model="gbm",series="fleet/a",state="within"}`, "\naftercast_drift_marks_pending 0\n",
			"# HELP aftercast_lead_window_mae ", "# TYPE grpc_server_handling_seconds histogram", "aftercast_db_pool_idle_conns "} {
			if !bytes.Contains(body, []byte(want)) {
				t.Errorf("scrape lacks %q", want)
			}
		}
		promtool, err := exec.LookPath("promtool")
		if err != nil {
			t.Log("promtool is not on PATH: skipping `promtool check metrics` (apt-get install prometheus provides it)")
			return
		}
		cmd := exec.CommandContext(ctx, promtool, "check", "metrics")
		cmd.Stdin = bytes.NewReader(body)
		out, err := cmd.CombinedOutput()
		t.Logf("promtool check metrics on %d bytes: exit %v, output %q", len(body), cmd.ProcessState.ExitCode(), out)
		if err != nil || len(bytes.TrimSpace(out)) > 0 {
			t.Errorf("promtool check metrics: %v\n%s", err, out)
		}
	})

	// Replicas on the same database report the same state, with their own
	// lead selection and cap.
	seriesFamilies := []string{"aftercast_series_drift_state", "aftercast_series_window_mae", "aftercast_series_window_me",
		"aftercast_series_window_pairs", "aftercast_series_expected", "aftercast_series_band_lower", "aftercast_series_band_upper",
		"aftercast_series_alarm_upper", "aftercast_series_alarm_lower", "aftercast_series_last_origin_timestamp_seconds",
		"aftercast_series_origin_interval_seconds", "aftercast_series_last_actual_timestamp_seconds",
		"aftercast_series_last_actual_received_timestamp_seconds", "aftercast_series_drift_onset_origin_timestamp_seconds",
		"aftercast_series_drift_origins_since_onset", "aftercast_drift_marks_pending", "aftercast_drift_marks_oldest_age_seconds"}
	sameSeriesFamilies := func(t *testing.T, other prometheus.Gatherer) {
		t.Helper()
		a, err := reg.Gather()
		if err != nil {
			t.Fatal(err)
		}
		b, err := other.Gather()
		if err != nil {
			t.Fatal(err)
		}
		for _, name := range seriesFamilies {
			if !sameFamily(a, b, name) {
				t.Errorf("%s differs between replicas", name)
			}
		}
	}

	t.Run("all leads", func(t *testing.T) {
		t.Parallel()
		_, reg2 := metricsServer(t, url, server.Config{MetricsLeads: "all"})
		lint(t, reg2)
		got := perLeadSet(t, reg2)
		for _, key := range mSeries {
			if len(got[key]) != mHorizon {
				t.Errorf("%s: per-lead families for leads %v, want all %d", key, got[key], mHorizon)
			}
		}
		if n, err := testutil.GatherAndCount(reg2, "aftercast_lead_window_rmse"); err != nil || n != len(mSeries)*mHorizon {
			t.Errorf("aftercast_lead_window_rmse: %d %v, want %d", n, err, len(mSeries)*mHorizon)
		}
		sameSeriesFamilies(t, reg2)
		// This replica pushed nothing: its counters are its own.
		if got := family(t, reg2, "aftercast_forecast_points_received_total"); got["result=accepted"] != 0 {
			t.Errorf("replica counted %v accepted forecasts, want 0", got["result=accepted"])
		}
	})

	t.Run("lead list and cap", func(t *testing.T) {
		t.Parallel()
		srv3, reg3 := metricsServer(t, url, server.Config{MetricsLeads: "1-2", MetricsMaxSeries: 2})
		lint(t, reg3) // first scrape: drops fleet/c
		got := perLeadSet(t, reg3)
		if want := map[string][]int{"fleet/a": {1, 2}, "fleet/b": {1, 2}}; len(got) != 2 || !slices.Equal(got["fleet/a"], want["fleet/a"]) || !slices.Equal(got["fleet/b"], want["fleet/b"]) {
			t.Errorf("per-lead families %v, want leads 1-2 of the first two series %v", got, want)
		}
		if n, err := testutil.GatherAndCount(reg3, "aftercast_series_drift_state"); err != nil || n != 5*len(mSeries) {
			t.Errorf("the cap must leave the series families alone: %d %v", n, err)
		}
		// Three scrapes so far, each dropping one pair; this is the fourth.
		if err := testutil.GatherAndCompare(reg3, strings.NewReader(`
# HELP aftercast_metrics_series_dropped_total (series, model) pairs left out of the per-lead families by the --metrics-max-series cap, summed over scrapes.
# TYPE aftercast_metrics_series_dropped_total counter
aftercast_metrics_series_dropped_total 4
`), "aftercast_metrics_series_dropped_total"); err != nil {
			t.Error(err)
		}
		sameSeriesFamilies(t, reg3)
		// Without its database a scrape fails rather than dropping the families.
		if err := srv3.Stop(ctx); err != nil {
			t.Fatal(err)
		}
		_, err := reg3.Gather()
		for _, want := range []string{"reading drift states", "reading freshness", "reading drift backlog"} {
			if err == nil || !strings.Contains(err.Error(), want) {
				t.Errorf("gather with the pool closed: %v, want an error %q", err, want)
			}
		}
	})
}

// backlogText is the exposition of the backlog families.
func backlogText(pending int, age float64) string {
	return fmt.Sprintf(`
# HELP aftercast_drift_marks_oldest_age_seconds Age of the oldest drift mark waiting for evaluation; 0 when none waits.
# TYPE aftercast_drift_marks_oldest_age_seconds gauge
aftercast_drift_marks_oldest_age_seconds %v
# HELP aftercast_drift_marks_pending Drift marks waiting for evaluation: stored and acknowledged writes whose drift states are not judged yet (all replicas).
# TYPE aftercast_drift_marks_pending gauge
aftercast_drift_marks_pending %d
`, age, pending)
}

// Marks that no evaluator can take show up as pending, with the age of the
// oldest growing, until they are judged. The test holds the marks with a
// claim of its own (what a stuck replica would do) taken before the server
// starts, so the server's evaluator cannot get at them.
func TestMetricsDriftBacklog(t *testing.T) {
	t.Parallel()
	url := storetest.URL(t)
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	t.Cleanup(cancel)
	pool, err := pgxpool.New(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(pool.Close)
	st := store.New(pool, store.Limits{})
	written := time.Now()
	for _, key := range []string{"lag/a", "lag/b"} {
		if _, _, err := st.CreateSeries(ctx, store.Series{Key: key, Step: "1h", Horizon: 2}); err != nil {
			t.Fatal(err)
		}
		if _, err := st.WriteActuals(ctx, []store.Actual{{Series: key, Time: mT0, Value: 1}, {Series: key, Time: mT0.Add(time.Hour), Value: 2}}, 0); err != nil {
			t.Fatal(err)
		}
	}
	if pending, _, err := st.DriftBacklog(ctx); err != nil || pending != 2 {
		t.Fatalf("backlog after writing actuals of two series: %d marks (%v), want 2", pending, err)
	}
	claim, err := st.ClaimDrift(ctx, 10)
	if err != nil || claim == nil || len(claim.Series) != 2 {
		t.Fatalf("claiming the marks: %v %v", claim, err)
	}
	released := false
	release := func() {
		if !released {
			claim.Release(ctx)
			released = true
		}
	}
	t.Cleanup(release)

	srv, reg := metricsServer(t, url, server.Config{})
	lint(t, reg)
	gatherAge := func() float64 {
		t.Helper()
		if got := family(t, reg, "aftercast_drift_marks_pending")[""]; got != 2 {
			t.Fatalf("aftercast_drift_marks_pending = %v while two marks are held, want 2", got)
		}
		return family(t, reg, "aftercast_drift_marks_oldest_age_seconds")[""]
	}
	a1 := gatherAge()
	a2 := gatherAge()
	if elapsed := time.Since(written).Seconds(); !(0 < a1 && a1 < a2 && a2 <= elapsed) {
		t.Errorf("oldest mark age %v, then %v; want growing, above 0 and at most the %v s since the marks were written", a1, a2, elapsed)
	}

	release()
	if err := srv.Drift().Drain(ctx); err != nil {
		t.Fatal(err)
	}
	if err := testutil.GatherAndCompare(reg, strings.NewReader(backlogText(0, 0)),
		"aftercast_drift_marks_pending", "aftercast_drift_marks_oldest_age_seconds"); err != nil {
		t.Errorf("after the drain: %v", err)
	}
}

func TestMetricsLeadsFlag(t *testing.T) {
	t.Parallel()
	for _, leads := range []string{"bogus", "0-3", "5-2", ","} {
		if _, err := server.New(server.Config{MetricsLeads: leads}); err == nil {
			t.Errorf("MetricsLeads %q: no error", leads)
		}
	}
	for _, leads := range []string{"", "decision", "all", "1-24,48"} {
		if _, err := server.New(server.Config{MetricsLeads: leads}); err != nil {
			t.Errorf("MetricsLeads %q: %v", leads, err)
		}
	}
}
