package promtest_test

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"net"
	"net/http"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

func TestMain(m *testing.M) { os.Exit(storetest.Main(m)) }

const (
	model    = "gbm-v3"
	drifting = "north/heat" // production errors ×3 at every lead
	healthy  = "south/heat" // production errors as in the backtest
	horizon  = 48
	backtest = 365 // daily backtest origins
	prodN    = 40  // daily production origins: the 30-origin window fills
	waitFor  = 60 * time.Second
)

var decisionLeads = func() []int32 {
	var out []int32
	for h := int32(25); h <= horizon; h++ {
		out = append(out, h)
	}
	return out
}()

var t0 = time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)

func origin(k int) time.Time { return t0.Add(time.Duration(k) * 24 * time.Hour) }

func level(t time.Time) float64 { return 100 + 10*math.Sin(float64(t.Unix())/7200) }

// The rules of deploy/prometheus on a real Prometheus scraping a real
// aftercast: the drifting series raises AftercastSeriesDegraded and one
// AftercastLeadDegraded carrying all its degraded leads; the healthy one
// raises neither.
func TestDriftAlertsInPrometheus(t *testing.T) {
	t.Parallel()
	promBin, err := exec.LookPath("prometheus")
	if err != nil {
		t.Skip("skipping the real-Prometheus alert test: no `prometheus` binary on PATH (Debian: apt-get install prometheus; .ci/run installs it)")
	}
	if testing.Short() {
		t.Skip("skipping the real-Prometheus alert test in -short mode")
	}
	ctx, cancel := context.WithTimeout(context.Background(), 3*time.Minute)
	defer cancel()

	srv, err := server.New(server.Config{Listen: "127.0.0.1:0", MetricsListen: "127.0.0.1:0",
		DatabaseURL: storetest.URL(t), Logger: storetest.Logger(t)})
	if err != nil {
		t.Fatal(err)
	}
	if err := srv.Start(ctx); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = srv.Stop(context.Background()) })
	conn, err := grpc.NewClient(srv.GRPCAddr(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close() })

	load(ctx, t, srv.Store(), conn)
	// Drift is judged off the request path: settle it before Prometheus
	// looks, so that what it sees is final.
	if err := srv.Drift().Drain(ctx); err != nil {
		t.Fatal(err)
	}
	onsets := storedOnsets(ctx, t, srv.Store())
	prom := startPrometheus(ctx, t, promBin, srv.MetricsAddr())

	// Poll until both drift alerts of the drifting series are active
	// (pending is enough: `for:` is minutes long).
	deadline := time.Now().Add(waitFor)
	var alerts []alert
	for {
		alerts, err = prom.alerts(ctx)
		if err == nil && find(alerts, "AftercastSeriesDegraded", drifting) != nil && find(alerts, "AftercastLeadDegraded", drifting) != nil {
			break
		}
		if time.Now().After(deadline) {
			prom.dumpLog(t)
			t.Fatalf("after %v no AftercastSeriesDegraded and AftercastLeadDegraded for %s/%s in Prometheus (last error %v); active alerts:\n%s",
				waitFor, drifting, model, err, describe(alerts))
		}
		time.Sleep(500 * time.Millisecond)
	}
	t.Logf("active alerts:\n%s", describe(alerts))
	for _, name := range []string{"AftercastSeriesDegraded", "AftercastLeadDegraded"} {
		a := find(alerts, name, drifting)
		t.Logf("%s: %s\n  %s\n  %s", name, a.Annotations["summary"], a.Annotations["description"], a.Annotations["runbook_url"])
	}

	// The descriptions give onsets in data time: the stored onset origins,
	// not when the states were noticed.
	if want := "degraded since the origin " + onsets.series.String() + " (data time"; !strings.Contains(find(alerts, "AftercastSeriesDegraded", drifting).Annotations["description"], want) {
		t.Errorf("AftercastSeriesDegraded description lacks %q", want)
	}
	if want := "The first of them became degraded at the origin " + onsets.firstLead.String() + " (data time)"; !strings.Contains(find(alerts, "AftercastLeadDegraded", drifting).Annotations["description"], want) {
		t.Errorf("AftercastLeadDegraded description lacks %q", want)
	}

	lead := find(alerts, "AftercastLeadDegraded", drifting)
	if n := countAlerts(alerts, "AftercastLeadDegraded", drifting); n != 1 {
		t.Errorf("%d AftercastLeadDegraded alerts for %s, want 1 for all its leads", n, drifting)
	}
	// Every exported lead of the drifting series is degraded (by default
	// serve exports the decision leads, 24 here), all in that one alert.
	exported, err := prom.query(ctx, fmt.Sprintf(`count(max by (lead) (aftercast_lead_drift_state{series=%q,model=%q}))`, drifting, model))
	if err != nil || exported < 1 {
		t.Errorf("leads of %s exported: %v (%v)", drifting, exported, err)
	}
	if v, err := strconv.ParseFloat(lead.Value, 64); err != nil || v != exported {
		t.Errorf("AftercastLeadDegraded value %q, want all %v exported leads degraded", lead.Value, exported)
	}
	if a := find(alerts, "AftercastSeriesDegraded", drifting); a.Labels["severity"] != "page" || a.Annotations["runbook_url"] == "" {
		t.Errorf("AftercastSeriesDegraded %+v, want severity page and a runbook_url", a)
	}

	// The healthy series is exported and within its band, so the absence of
	// its alerts means something.
	if v, err := prom.query(ctx, fmt.Sprintf(`max(aftercast_series_drift_state{series=%q,model=%q,state="within"})`, healthy, model)); err != nil || v != 1 {
		t.Errorf("series state of %s within = %v (%v), want 1", healthy, v, err)
	}
	if v, err := prom.query(ctx, fmt.Sprintf(`count(max by (lead) (aftercast_lead_drift_state{series=%q,model=%q}))`, healthy, model)); err != nil || v != exported {
		t.Errorf("%s exports %v leads (%v), want %v as %s", healthy, v, err, exported, drifting)
	}
	for _, name := range []string{"AftercastSeriesDegraded", "AftercastLeadDegraded"} {
		if a := find(alerts, name, healthy); a != nil {
			t.Errorf("%s is active for the healthy series: %+v", name, a)
		}
	}

	// The backlog was drained before Prometheus started: nothing pending
	// and no age, as scraped.
	for _, q := range []string{"max(aftercast_drift_marks_pending)", "max(aftercast_drift_marks_oldest_age_seconds)"} {
		if v, err := prom.query(ctx, q); err != nil || v != 0 {
			t.Errorf("%s = %v (%v), want 0 after the drain", q, v, err)
		}
	}
	// Every rule evaluates without error against real aftercast metrics.
	rules, err := prom.rules(ctx)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range rules {
		if r.Health != "ok" {
			t.Errorf("rule %s: health %q, error %q", r.Name, r.Health, r.LastError)
		}
	}
	if len(rules) == 0 {
		t.Error("Prometheus loaded no rules")
	}

	// Every query of the Grafana dashboard parses and runs, with the
	// variables set to the drifting series.
	for _, q := range dashboardQueries(t) {
		r := strings.NewReplacer("$series", drifting, "$model", model, "$lead", "30")
		var body struct {
			Status string `json:"status"`
		}
		if err := prom.get(ctx, "/api/v1/query?query="+url.QueryEscape(r.Replace(q)), &body); err != nil || body.Status != "success" {
			t.Errorf("dashboard query %s: %v %s", q, err, body.Status)
		}
	}
	if t.Failed() {
		prom.dumpLog(t)
	}
}

// dashboardQueries returns every "expr" in deploy/grafana/aftercast-dashboard.json.
func dashboardQueries(t *testing.T) []string {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "..", "deploy", "grafana", "aftercast-dashboard.json"))
	if err != nil {
		t.Fatal(err)
	}
	var doc any
	if err := json.Unmarshal(b, &doc); err != nil {
		t.Fatalf("dashboard JSON: %v", err)
	}
	var out []string
	var walk func(v any)
	walk = func(v any) {
		switch v := v.(type) {
		case map[string]any:
			for k, e := range v {
				if s, ok := e.(string); ok && k == "expr" {
					out = append(out, s)
				} else {
					walk(e)
				}
			}
		case []any:
			for _, e := range v {
				walk(e)
			}
		}
	}
	walk(doc)
	if len(out) == 0 {
		t.Fatal("no queries found in the dashboard")
	}
	return out
}

// load creates both series, imports a 365-origin backtest of iid N(0, 1)
// errors for each, and pushes prodN production origins: for the healthy
// series errors of exactly each lead's backtest MAE with alternating sign
// (window MAE on the expectation, bias near zero), for the drifting one
// three times that. Actuals go in chunks, each judged by the service as it
// arrives.
func load(ctx context.Context, t *testing.T, st *store.Store, conn *grpc.ClientConn) {
	t.Helper()
	seriesC := aftercastv1.NewSeriesServiceClient(conn)
	forecastC := aftercastv1.NewForecastServiceClient(conn)
	actualC := aftercastv1.NewActualServiceClient(conn)
	factor := map[string]float64{drifting: 3, healthy: 1}
	for i, key := range []string{drifting, healthy} {
		_, err := seriesC.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{
			Key: key, Step: "1h", Horizon: horizon, Unit: "MW", DecisionLeads: decisionLeads}})
		if err != nil {
			t.Fatal(err)
		}
		r := rand.New(rand.NewPCG(uint64(i), 7))
		var rows []store.BacktestRow
		mae := make([]float64, horizon+1)
		for k := range backtest {
			o := origin(k)
			for h := 1; h <= horizon; h++ {
				tg := o.Add(time.Duration(h) * time.Hour)
				e := r.NormFloat64()
				mae[h] += math.Abs(e) / backtest
				rows = append(rows, store.BacktestRow{Series: key, Origin: o, Target: tg, Actual: level(tg), Forecast: level(tg) - e})
			}
		}
		if _, err := st.ImportBaseline(ctx, model, rows, nil); err != nil {
			t.Fatalf("importing the backtest of %s: %v", key, err)
		}
		var fs []*aftercastv1.Forecast
		for k := backtest; k < backtest+prodN; k++ {
			o := origin(k)
			vals := make([]float64, horizon)
			for h := 1; h <= horizon; h++ {
				e := factor[key] * mae[h]
				if (k+h)%2 == 1 {
					e = -e
				}
				vals[h-1] = level(o.Add(time.Duration(h)*time.Hour)) - e
			}
			fs = append(fs, &aftercastv1.Forecast{Series: key, Model: model, OriginTime: timestamppb.New(o),
				Values: &aftercastv1.Forecast_Dense{Dense: &aftercastv1.DenseValues{Values: vals}}})
		}
		resp, err := forecastC.PushForecasts(ctx, &aftercastv1.PushForecastsRequest{Forecasts: fs})
		if err != nil || resp.GetSummary().GetRejected() != 0 {
			t.Fatalf("pushing forecasts of %s: %v %v", key, resp, err)
		}
	}
	// Actuals for every target, a few days per message.
	first, last := origin(backtest).Add(time.Hour), origin(backtest+prodN-1).Add(horizon*time.Hour)
	const chunk = 5 * 24
	var as []*aftercastv1.Actual
	flush := func() {
		if len(as) == 0 {
			return
		}
		resp, err := actualC.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: as})
		if err != nil || resp.GetSummary().GetRejected() != 0 {
			t.Fatalf("pushing actuals: %v %v", resp, err)
		}
		as = nil
	}
	for tg := first; !tg.After(last); tg = tg.Add(time.Hour) {
		for _, key := range []string{drifting, healthy} {
			as = append(as, &aftercastv1.Actual{Series: key, Time: timestamppb.New(tg), Value: level(tg)})
		}
		if len(as) >= 2*chunk {
			flush()
		}
	}
	flush()
}

// onsets are the stored onset origins of the drifting series: its series
// state's, and the earliest of its degraded decision leads'.
type onsets struct{ series, firstLead time.Time }

func storedOnsets(ctx context.Context, t *testing.T, st *store.Store) onsets {
	t.Helper()
	sts, err := st.DriftStates(ctx, drifting, model)
	if err != nil {
		t.Fatal(err)
	}
	var out onsets
	for _, s := range sts {
		switch {
		case s.Lead == 0:
			out.series = s.Onset
		case s.State == "degraded" && slices.Contains(decisionLeads, int32(s.Lead)) &&
			(out.firstLead.IsZero() || s.Onset.Before(out.firstLead)):
			out.firstLead = s.Onset
		}
	}
	if out.series.IsZero() || out.firstLead.IsZero() {
		t.Fatalf("stored states of %s/%s: no series onset or no degraded decision lead with an onset: %+v", drifting, model, sts)
	}
	return out
}

// prometheus is a running Prometheus with its log.
type prometheus struct {
	base string
	log  *syncBuffer
}

// startPrometheus writes deploy/prometheus/prometheus.yml into a temporary
// directory with the target set to metricsAddr and 1s intervals, copies the
// rules beside it, starts Prometheus on a free port and waits until it is
// ready. It is stopped when t ends.
func startPrometheus(ctx context.Context, t *testing.T, bin, metricsAddr string) *prometheus {
	t.Helper()
	dir := t.TempDir()
	cfg, err := os.ReadFile(filepath.Join("..", "..", "deploy", "prometheus", "prometheus.yml"))
	if err != nil {
		t.Fatal(err)
	}
	rules, err := os.ReadFile(filepath.Join("..", "..", "deploy", "prometheus", "aftercast-rules.yml"))
	if err != nil {
		t.Fatal(err)
	}
	const target = `"127.0.0.1:7411"`
	if !bytes.Contains(cfg, []byte(target)) || !bytes.Contains(cfg, []byte("- aftercast-rules.yml")) {
		t.Fatalf("deploy/prometheus/prometheus.yml no longer has the target %s and rule file aftercast-rules.yml this test rewrites", target)
	}
	cfg = bytes.ReplaceAll(cfg, []byte(target), []byte(strconv.Quote(metricsAddr)))
	for _, key := range []string{"scrape_interval", "evaluation_interval", "scrape_timeout"} {
		cfg = regexp.MustCompile(`(?m)^(\s*`+key+`:).*$`).ReplaceAll(cfg, []byte("${1} 1s"))
	}
	cfgPath := filepath.Join(dir, "prometheus.yml")
	if err := os.WriteFile(cfgPath, cfg, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "aftercast-rules.yml"), rules, 0o644); err != nil {
		t.Fatal(err)
	}

	p := &prometheus{log: &syncBuffer{}}
	var cmd *exec.Cmd
	var exited chan struct{}
	for attempt := 0; ; attempt++ {
		addr := freeAddr(t)
		p.base = "http://" + addr
		// Not CommandContext, which would kill Prometheus before the
		// cleanup below interrupts it.
		cmd = exec.Command(bin, "--config.file="+cfgPath, //nolint:noctx // stopped by stop() in t.Cleanup "--storage.tsdb.path="+filepath.Join(dir, "data"),
			"--web.listen-address="+addr, "--log.level=info")
		cmd.Stdout, cmd.Stderr = p.log, p.log
		if err := cmd.Start(); err != nil {
			t.Fatalf("starting prometheus: %v", err)
		}
		exited = make(chan struct{})
		go func() { _ = cmd.Wait(); close(exited) }()
		err := p.waitReady(ctx, exited)
		if err == nil {
			break
		}
		stop(cmd, exited)
		if attempt == 2 || !strings.Contains(p.log.String(), "address already in use") {
			p.dumpLog(t)
			t.Fatalf("prometheus did not become ready: %v", err)
		}
	}
	t.Cleanup(func() { stop(cmd, exited) })
	return p
}

// stop interrupts Prometheus and kills it if it has not exited in 10s.
func stop(cmd *exec.Cmd, exited chan struct{}) {
	_ = cmd.Process.Signal(os.Interrupt)
	select {
	case <-exited:
	case <-time.After(10 * time.Second):
		_ = cmd.Process.Kill()
		<-exited
	}
}

func freeAddr(t *testing.T) string {
	t.Helper()
	var lc net.ListenConfig
	l, err := lc.Listen(t.Context(), "tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	return l.Addr().String()
}

func (p *prometheus) waitReady(ctx context.Context, exited chan struct{}) error {
	deadline := time.Now().Add(30 * time.Second)
	for {
		select {
		case <-exited:
			return errors.New("prometheus exited")
		default:
		}
		if err := p.get(ctx, "/-/ready", nil); err == nil {
			return nil
		} else if time.Now().After(deadline) {
			return err
		}
		time.Sleep(200 * time.Millisecond)
	}
}

func (p *prometheus) dumpLog(t *testing.T) {
	t.Helper()
	t.Logf("prometheus log:\n%s", p.log.String())
}

// get fetches path and decodes a JSON body into out when out is not nil.
func (p *prometheus) get(ctx context.Context, path string, out any) error {
	ctx, cancel := context.WithTimeout(ctx, 5*time.Second)
	defer cancel()
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, p.base+path, nil)
	if err != nil {
		return err
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		return fmt.Errorf("GET %s: %s", path, resp.Status)
	}
	if out == nil {
		return nil
	}
	return json.NewDecoder(resp.Body).Decode(out)
}

// alert is one entry of Prometheus' /api/v1/alerts.
type alert struct {
	Labels      map[string]string `json:"labels"`
	Annotations map[string]string `json:"annotations"`
	State       string            `json:"state"`
	Value       string            `json:"value"`
}

func (p *prometheus) alerts(ctx context.Context) ([]alert, error) {
	var body struct {
		Status string `json:"status"`
		Data   struct {
			Alerts []alert `json:"alerts"`
		} `json:"data"`
	}
	if err := p.get(ctx, "/api/v1/alerts", &body); err != nil {
		return nil, err
	}
	return body.Data.Alerts, nil
}

// rule is one rule of Prometheus' /api/v1/rules.
type rule struct {
	Name      string `json:"name"`
	Health    string `json:"health"`
	LastError string `json:"lastError"`
}

func (p *prometheus) rules(ctx context.Context) ([]rule, error) {
	var body struct {
		Data struct {
			Groups []struct {
				Rules []rule `json:"rules"`
			} `json:"groups"`
		} `json:"data"`
	}
	if err := p.get(ctx, "/api/v1/rules", &body); err != nil {
		return nil, err
	}
	var out []rule
	for _, g := range body.Data.Groups {
		out = append(out, g.Rules...)
	}
	return out, nil
}

// query evaluates an instant query whose result is a single sample.
func (p *prometheus) query(ctx context.Context, q string) (float64, error) {
	var body struct {
		Data struct {
			Result []struct {
				Value [2]any `json:"value"`
			} `json:"result"`
		} `json:"data"`
	}
	if err := p.get(ctx, "/api/v1/query?query="+url.QueryEscape(q), &body); err != nil {
		return 0, err
	}
	if len(body.Data.Result) != 1 {
		return 0, fmt.Errorf("%s: %d samples, want 1", q, len(body.Data.Result))
	}
	s, _ := body.Data.Result[0].Value[1].(string)
	return strconv.ParseFloat(s, 64)
}

func find(alerts []alert, name, series string) *alert {
	for i, a := range alerts {
		if a.Labels["alertname"] == name && a.Labels["series"] == series && a.Labels["model"] == model {
			return &alerts[i]
		}
	}
	return nil
}

func countAlerts(alerts []alert, name, series string) int {
	n := 0
	for _, a := range alerts {
		if a.Labels["alertname"] == name && a.Labels["series"] == series && a.Labels["model"] == model {
			n++
		}
	}
	return n
}

func describe(alerts []alert) string {
	var b strings.Builder
	for _, a := range alerts {
		fmt.Fprintf(&b, "  %s %s series=%s model=%s value=%s\n", a.State, a.Labels["alertname"], a.Labels["series"], a.Labels["model"], a.Value)
	}
	if b.Len() == 0 {
		return "  (none)\n"
	}
	return b.String()
}

// syncBuffer is a bytes.Buffer safe for the writes of a child process's
// stdout and stderr copiers and reads from the test.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}
