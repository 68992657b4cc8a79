package server

import (
	"context"
	"fmt"
	"log/slog"
	"slices"
	"strconv"
	"sync/atomic"
	"time"

	grpcprom "github.com/grpc-ecosystem/go-grpc-middleware/providers/prometheus"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promauto"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
)

// scrapeTimeout bounds the database reads of one scrape; it matches
// Prometheus' default scrape_timeout.
const scrapeTimeout = 10 * time.Second

// defaultMetricsMaxSeries is the cap on (series, model) pairs with per-lead
// families when Config.MetricsMaxSeries is zero.
const defaultMetricsMaxSeries = 2000

// grpcBuckets are the handling-time buckets: unary calls take milliseconds,
// pushing streams and watches take minutes.
var grpcBuckets = []float64{.001, .005, .01, .025, .05, .1, .25, .5, 1, 2.5, 5, 10, 30, 60, 300}

// forecastResult is what happened to one pushed forecast point; a closed
// label value set.
type forecastResult int

const (
	forecastAccepted forecastResult = iota
	forecastDuplicate
	forecastLate
	forecastRejected
	numForecastResults
)

func (r forecastResult) String() string {
	switch r {
	case forecastAccepted:
		return "accepted"
	case forecastDuplicate:
		return "duplicate"
	case forecastLate:
		return "late"
	case forecastRejected:
		return "rejected"
	}
	panic(fmt.Sprintf("unknown forecast result %d", int(r)))
}

// actualResult is what happened to one pushed actual; a closed label value
// set.
type actualResult int

const (
	actualAccepted actualResult = iota
	actualDuplicate
	actualRevised
	actualRejected
	numActualResults
)

func (r actualResult) String() string {
	switch r {
	case actualAccepted:
		return "accepted"
	case actualDuplicate:
		return "duplicate"
	case actualRevised:
		return "revised"
	case actualRejected:
		return "rejected"
	}
	panic(fmt.Sprintf("unknown actual result %d", int(r)))
}

// driftLevel says whether a drift state is one lead's or the series'.
type driftLevel int

const (
	levelLead driftLevel = iota
	levelSeries
	numDriftLevels
)

func (l driftLevel) String() string {
	switch l {
	case levelLead:
		return "lead"
	case levelSeries:
		return "series"
	}
	panic(fmt.Sprintf("unknown drift level %d", int(l)))
}

func levelOf(lead int) driftLevel {
	if lead == 0 {
		return levelSeries
	}
	return levelLead
}

// errorMetrics is the closed set of "metric" label values of the
// expectation, band and alarm families: scoring's metric names, the one
// spelling the API, events and status page use too.
var errorMetrics = [...]scoring.Metric{scoring.MetricMAE, scoring.MetricRMSE, scoring.MetricME}

// metricLabel is m as a label value. It panics on a metric outside
// errorMetrics: scoring grew a metric that the metrics do not know.
func metricLabel(m scoring.Metric) string {
	if !slices.Contains(errorMetrics[:], m) {
		panic(fmt.Sprintf("unknown error metric %q", m))
	}
	return string(m)
}

// driftStates is the closed set of "state" label values, in exposition
// order.
var driftStates = [...]scoring.State{scoring.StateWithin, scoring.StateDegraded, scoring.StateImproved,
	scoring.StateInsufficientData, scoring.StateInsufficientBaseline}

// stateLabel is s as a label value. It panics on a state outside
// driftStates: scoring grew a state that the metrics do not know.
func stateLabel(s scoring.State) string {
	if !slices.Contains(driftStates[:], s) {
		panic(fmt.Sprintf("unknown drift state %q", s))
	}
	return string(s)
}

// leadMode selects the leads that get per-lead families.
type leadMode int

const (
	leadsDecision leadMode = iota // each series' decision leads
	leadsAll                      // every lead
	leadsList                     // the leads of a list, where the series has them
)

// leadSelection is Config.MetricsLeads parsed.
type leadSelection struct {
	mode  leadMode
	leads []int // leadsList only, sorted
}

func parseLeadSelection(s string) (leadSelection, error) {
	switch s {
	case "", "decision":
		return leadSelection{mode: leadsDecision}, nil
	case "all":
		return leadSelection{mode: leadsAll}, nil
	}
	leads, err := scoring.ParseLeads(s)
	if err != nil || len(leads) == 0 {
		return leadSelection{}, fmt.Errorf("metrics leads %q: want decision, all or a lead list such as 1-24,48", s)
	}
	return leadSelection{mode: leadsList, leads: leads}, nil
}

// metrics is the service's instrumentation: counters moved where ingestion
// and drift evaluation happen, the gRPC server metrics, and collectors that
// read the drift states, freshness, evaluation backlog and pool statistics
// from the store at scrape time. All of it lives on the registry of
// Config.Registry.
type metrics struct {
	forecastPoints *prometheus.CounterVec
	actuals        *prometheus.CounterVec
	pairsScored    prometheus.Counter
	stateChanges   *prometheus.CounterVec
	grpc           *grpcprom.ServerMetrics

	// store is the store the collectors read, set once Start opened it.
	store atomic.Pointer[store.Store]
}

func newMetrics(reg prometheus.Registerer, log *slog.Logger, leads leadSelection, maxSeries int) *metrics {
	f := promauto.With(reg)
	m := &metrics{
		forecastPoints: f.NewCounterVec(prometheus.CounterOpts{
			Name: "aftercast_forecast_points_received_total",
			Help: "Forecast points (one value for one lead) received by this process, by what became of them.",
		}, []string{"result"}),
		actuals: f.NewCounterVec(prometheus.CounterOpts{
			Name: "aftercast_actuals_received_total",
			Help: "Actuals received by this process, by what became of them.",
		}, []string{"result"}),
		pairsScored: f.NewCounter(prometheus.CounterOpts{
			Name: "aftercast_pairs_scored_total",
			Help: "Forecast-actual pairs completed by actuals accepted by this process.",
		}),
		stateChanges: f.NewCounterVec(prometheus.CounterOpts{
			Name: "aftercast_drift_state_changes_total",
			Help: "Drift state changes made by this process's evaluations, by level (lead or series) and new state.",
		}, []string{"level", "state"}),
		grpc: grpcprom.NewServerMetrics(grpcprom.WithServerHandlingTimeHistogram(grpcprom.WithHistogramBuckets(grpcBuckets))),
	}
	for r := range numForecastResults {
		m.forecastPoints.WithLabelValues(r.String())
	}
	for r := range numActualResults {
		m.actuals.WithLabelValues(r.String())
	}
	for l := range numDriftLevels {
		for _, s := range driftStates {
			m.stateChanges.WithLabelValues(l.String(), stateLabel(s))
		}
	}
	reg.MustRegister(m.grpc,
		newStateCollector(&m.store, log, leads, maxSeries),
		newPoolCollector(&m.store))
	return m
}

// The counting methods accept a nil *metrics, which counts nothing.

func (m *metrics) countForecasts(ack store.Ack) {
	if m == nil {
		return
	}
	m.forecastPoints.WithLabelValues(forecastAccepted.String()).Add(float64(ack.Accepted))
	m.forecastPoints.WithLabelValues(forecastDuplicate.String()).Add(float64(ack.Duplicate))
	m.forecastPoints.WithLabelValues(forecastLate.String()).Add(float64(ack.Late))
	m.forecastPoints.WithLabelValues(forecastRejected.String()).Add(float64(ack.Rejected))
}

func (m *metrics) countActuals(ack store.Ack) {
	if m == nil {
		return
	}
	m.actuals.WithLabelValues(actualAccepted.String()).Add(float64(ack.Accepted))
	m.actuals.WithLabelValues(actualDuplicate.String()).Add(float64(ack.Duplicate))
	m.actuals.WithLabelValues(actualRevised.String()).Add(float64(ack.Revised))
	m.actuals.WithLabelValues(actualRejected.String()).Add(float64(ack.Rejected))
	m.pairsScored.Add(float64(ack.Scored))
}

func (m *metrics) countStateChanges(evs []store.DriftEvent) {
	if m == nil {
		return
	}
	for _, ev := range evs {
		m.stateChanges.WithLabelValues(levelOf(ev.Lead).String(), stateLabel(ev.State)).Inc()
	}
}

// stateCollector exports the drift states, freshness and evaluation
// backlog stored in PostgreSQL, read at scrape time: every replica on one
// database reports the same values.
type stateCollector struct {
	store     *atomic.Pointer[store.Store]
	log       *slog.Logger
	leads     leadSelection
	maxSeries int // < 0: no cap

	dropped atomic.Uint64

	leadMAE, leadRMSE, leadME, leadPairs       *prometheus.Desc
	leadExpected, leadBandLower, leadBandUpper *prometheus.Desc
	leadAlarmUpper, leadAlarmLower, leadState  *prometheus.Desc
	leadOnset, leadLevelScale                  *prometheus.Desc

	seriesState, seriesMAE, seriesME, seriesPairs    *prometheus.Desc
	seriesExpected, seriesBandLower, seriesBandUpper *prometheus.Desc
	seriesAlarmUpper, seriesAlarmLower               *prometheus.Desc
	seriesOnset, seriesSinceOnset, seriesLevelScale  *prometheus.Desc

	lastOrigin, originInterval, lastActual, lastActualReceived *prometheus.Desc

	marksPending, marksOldestAge *prometheus.Desc

	droppedDesc *prometheus.Desc
}

func newStateCollector(st *atomic.Pointer[store.Store], log *slog.Logger, leads leadSelection, maxSeries int) *stateCollector {
	lead := []string{"series", "model", "lead"}
	leadMetric := []string{"series", "model", "lead", "metric"}
	pair := []string{"series", "model"}
	pairMetric := []string{"series", "model", "metric"}
	d := prometheus.NewDesc
	return &stateCollector{store: st, log: log, leads: leads, maxSeries: maxSeries,
		leadMAE:        d("aftercast_lead_window_mae", "Mean absolute error of the lead over the live window (series unit).", lead, nil),
		leadRMSE:       d("aftercast_lead_window_rmse", "Root mean squared error of the lead over the live window (series unit).", lead, nil),
		leadME:         d("aftercast_lead_window_me", "Mean error (actual − forecast) of the lead over the live window (series unit).", lead, nil),
		leadPairs:      d("aftercast_lead_window_pairs", "Scored pairs in the lead's live window.", lead, nil),
		leadExpected:   d("aftercast_lead_expected", "What the backtest baseline expects of the lead's window, by metric (mae, rmse, me); level-adjusted when the errors are scaled (aftercast_lead_level_scale).", leadMetric, nil),
		leadLevelScale: d("aftercast_lead_level_scale", "Mean level scale max(|forecast|, φ)^b̂ over the lead's live window (method §4a): expectations, bands and limits are the baseline's scaled ones times it; 1 without scaling.", lead, nil),
		leadBandLower:  d("aftercast_lead_band_lower", "Lower end (p = 0.025) of the lead's central 95% band for a window of this size, by metric (mae, rmse, me).", leadMetric, nil),
		leadBandUpper:  d("aftercast_lead_band_upper", "Upper end (p = 0.975) of the lead's central 95% band for a window of this size, by metric (mae, rmse, me).", leadMetric, nil),
		leadAlarmUpper: d("aftercast_lead_alarm_upper", "Lead's alarm limit for a window of this size: the one-sided p = 0.995 bound for mae and rmse, the upper end (p = 0.999) of the two-sided alarm band for me.", leadMetric, nil),
		leadAlarmLower: d("aftercast_lead_alarm_lower", "Lower end (p = 0.001) of the lead's two-sided me alarm band (metric=me).", leadMetric, nil),
		leadState:      d("aftercast_lead_drift_state", "Drift state of the lead: 1 for the current state, 0 for the others.", []string{"series", "model", "lead", "state"}, nil),
		leadOnset:      d("aftercast_lead_drift_onset_origin_timestamp_seconds", "Origin (data time) at which the lead entered its current drift state; absent for the state its production period started in.", lead, nil),

		seriesState:      d("aftercast_series_drift_state", "Drift state of the series over its pooled decision leads (the paging state): 1 for the current state, 0 for the others.", []string{"series", "model", "state"}, nil),
		seriesMAE:        d("aftercast_series_window_mae", "Mean over the live window of the per-origin mean |error| of the decision leads (series unit).", pair, nil),
		seriesME:         d("aftercast_series_window_me", "Mean over the live window of the per-origin mean error (actual − forecast) of the decision leads (series unit).", pair, nil),
		seriesPairs:      d("aftercast_series_window_pairs", "Origins in the series' pooled live window.", pair, nil),
		seriesExpected:   d("aftercast_series_expected", "What the backtest baseline expects of the pooled window, by metric (mae, me); level-adjusted when the errors are scaled (aftercast_series_level_scale).", pairMetric, nil),
		seriesLevelScale: d("aftercast_series_level_scale", "Mean level scale max(|forecast|, φ)^b̂ over the pooled live window (method §4a): expectations, bands and limits are the baseline's scaled ones times it; 1 without scaling.", pair, nil),
		seriesBandLower:  d("aftercast_series_band_lower", "Lower end (p = 0.025) of the pooled central 95% band for a window of this size, by metric (mae, me).", pairMetric, nil),
		seriesBandUpper:  d("aftercast_series_band_upper", "Upper end (p = 0.975) of the pooled central 95% band for a window of this size, by metric (mae, me).", pairMetric, nil),
		seriesAlarmUpper: d("aftercast_series_alarm_upper", "Pooled alarm limit for a window of this size: the one-sided p = 0.995 bound for mae, the upper end (p = 0.999) of the two-sided alarm band for me.", pairMetric, nil),
		seriesAlarmLower: d("aftercast_series_alarm_lower", "Lower end (p = 0.001) of the pooled two-sided me alarm band (metric=me).", pairMetric, nil),
		seriesOnset:      d("aftercast_series_drift_onset_origin_timestamp_seconds", "Origin (data time) at which the series entered its current drift state; absent for the state its production period started in.", pair, nil),
		seriesSinceOnset: d("aftercast_series_drift_origins_since_onset", "Origins judged after the one at which the series entered its current drift state (0: the latest origin entered it); absent for the state its production period started in.", pair, nil),

		lastOrigin:         d("aftercast_series_last_origin_timestamp_seconds", "Origin time of the newest forecast received for the series and model.", pair, nil),
		originInterval:     d("aftercast_series_origin_interval_seconds", "Usual gap between origins: the step times the baseline's origin cadence (the step without a baseline).", pair, nil),
		lastActual:         d("aftercast_series_last_actual_timestamp_seconds", "Time of the newest actual received for the series.", []string{"series"}, nil),
		lastActualReceived: d("aftercast_series_last_actual_received_timestamp_seconds", "When the newest actual of the series was received.", []string{"series"}, nil),

		marksPending:   d("aftercast_drift_marks_pending", "Drift marks waiting for evaluation: stored and acknowledged writes whose drift states are not judged yet (all replicas).", nil, nil),
		marksOldestAge: d("aftercast_drift_marks_oldest_age_seconds", "Age of the oldest drift mark waiting for evaluation; 0 when none waits.", nil, nil),

		droppedDesc: d("aftercast_metrics_series_dropped_total", "(series, model) pairs left out of the per-lead families by the --metrics-max-series cap, summed over scrapes.", nil, nil),
	}
}

// Describe sends every family the collector may emit.
func (c *stateCollector) Describe(ch chan<- *prometheus.Desc) {
	for _, d := range []*prometheus.Desc{c.leadMAE, c.leadRMSE, c.leadME, c.leadPairs, c.leadExpected, c.leadBandLower,
		c.leadBandUpper, c.leadAlarmUpper, c.leadAlarmLower, c.leadState, c.leadOnset, c.leadLevelScale, c.seriesState, c.seriesMAE, c.seriesME,
		c.seriesPairs, c.seriesExpected, c.seriesBandLower, c.seriesBandUpper, c.seriesAlarmUpper, c.seriesAlarmLower,
		c.seriesOnset, c.seriesSinceOnset, c.seriesLevelScale, c.lastOrigin, c.originInterval, c.lastActual, c.lastActualReceived,
		c.marksPending, c.marksOldestAge, c.droppedDesc} {
		ch <- d
	}
}

// Collect reads the drift states, freshness and evaluation backlog from
// the store. A failed read is reported to the registry as an invalid
// metric, which fails the scrape (the target shows up = 0) rather than
// silently dropping the alerting families.
func (c *stateCollector) Collect(ch chan<- prometheus.Metric) {
	if st := c.store.Load(); st != nil {
		ctx, cancel := context.WithTimeout(context.Background(), scrapeTimeout)
		defer cancel()
		if err := c.collectDrift(ctx, st, ch); err != nil {
			ch <- prometheus.NewInvalidMetric(c.seriesState, err)
		}
		if err := c.collectFreshness(ctx, st, ch); err != nil {
			ch <- prometheus.NewInvalidMetric(c.lastOrigin, err)
		}
		if err := c.collectBacklog(ctx, st, ch); err != nil {
			ch <- prometheus.NewInvalidMetric(c.marksPending, err)
		}
	}
	ch <- prometheus.MustNewConstMetric(c.droppedDesc, prometheus.CounterValue, float64(c.dropped.Load()))
}

// gauge sends a sample for v unless it is nil (not known yet).
func gauge(ch chan<- prometheus.Metric, d *prometheus.Desc, v *float64, labels ...string) {
	if v != nil {
		ch <- prometheus.MustNewConstMetric(d, prometheus.GaugeValue, *v, labels...)
	}
}

// onsetGauge sends the onset origin as Unix seconds unless it is zero (the
// state the production period started in has no onset).
func onsetGauge(ch chan<- prometheus.Metric, d *prometheus.Desc, onset time.Time, labels ...string) {
	if !onset.IsZero() {
		ch <- prometheus.MustNewConstMetric(d, prometheus.GaugeValue, unixSeconds(onset), labels...)
	}
}

// stateSet sends one sample per drift state, 1 for cur.
func (c *stateCollector) stateSet(ch chan<- prometheus.Metric, d *prometheus.Desc, cur scoring.State, labels ...string) {
	if !slices.Contains(driftStates[:], cur) {
		c.log.Warn("drift state unknown to the metrics", "state", cur, "labels", labels)
	}
	lv := make([]string, len(labels)+1)
	copy(lv, labels)
	for _, s := range driftStates {
		v := 0.0
		if s == cur {
			v = 1
		}
		lv[len(labels)] = string(s)
		ch <- prometheus.MustNewConstMetric(d, prometheus.GaugeValue, v, lv...)
	}
}

func (c *stateCollector) collectDrift(ctx context.Context, st *store.Store, ch chan<- prometheus.Metric) error {
	sts, err := st.DriftStates(ctx, "", "")
	if err != nil {
		return fmt.Errorf("reading drift states for metrics: %w", err)
	}
	maxSeries := c.maxSeries
	if maxSeries == 0 {
		maxSeries = defaultMetricsMaxSeries
	}
	var exported uint64
	// sts is ordered by series, model, lead: one run per (series, model).
	for i := 0; i < len(sts); {
		j := i
		for j < len(sts) && sts[j].Series == sts[i].Series && sts[j].Model == sts[i].Model {
			j++
		}
		run := sts[i:j]
		i = j
		if run[0].Lead == 0 {
			c.emitSeries(ch, run[0])
			run = run[1:]
		}
		want, err := c.selectLeads(ctx, st, run)
		if err != nil {
			return err
		}
		if len(want) == 0 {
			continue
		}
		if maxSeries > 0 && exported >= uint64(maxSeries) {
			c.dropped.Add(1)
			continue
		}
		exported++
		for _, ls := range want {
			c.emitLead(ch, ls)
		}
	}
	return nil
}

// selectLeads keeps the lead states of one (series, model) that get
// per-lead families.
func (c *stateCollector) selectLeads(ctx context.Context, st *store.Store, run []store.DriftStatus) ([]store.DriftStatus, error) {
	if len(run) == 0 || c.leads.mode == leadsAll {
		return run, nil
	}
	keep := c.leads.leads
	if c.leads.mode == leadsDecision {
		se, err := st.GetSeries(ctx, run[0].Series)
		if err != nil {
			return nil, fmt.Errorf("reading series for metrics: %w", err)
		}
		keep = se.Decision()
	}
	var out []store.DriftStatus
	for _, ls := range run {
		if slices.Contains(keep, ls.Lead) {
			out = append(out, ls)
		}
	}
	return out, nil
}

func (c *stateCollector) emitSeries(ch chan<- prometheus.Metric, ss store.DriftStatus) {
	sn, s, m := ss.Snapshot, ss.Series, ss.Model
	c.stateSet(ch, c.seriesState, ss.State, s, m)
	onsetGauge(ch, c.seriesOnset, ss.Onset, s, m)
	if !ss.Onset.IsZero() {
		ch <- prometheus.MustNewConstMetric(c.seriesSinceOnset, prometheus.GaugeValue, float64(sn.OriginsSinceOnset), s, m)
	}
	gauge(ch, c.seriesMAE, sn.MAE, s, m)
	gauge(ch, c.seriesME, sn.ME, s, m)
	ch <- prometheus.MustNewConstMetric(c.seriesPairs, prometheus.GaugeValue, float64(sn.WindowN), s, m)
	mae, me := metricLabel(scoring.MetricMAE), metricLabel(scoring.MetricME)
	gauge(ch, c.seriesExpected, sn.MAEExpected, s, m, mae)
	gauge(ch, c.seriesExpected, sn.MEExpected, s, m, me)
	gauge(ch, c.seriesBandLower, sn.MAEBandLower, s, m, mae)
	gauge(ch, c.seriesBandLower, sn.MEBandLower, s, m, me)
	gauge(ch, c.seriesBandUpper, sn.MAEBandUpper, s, m, mae)
	gauge(ch, c.seriesBandUpper, sn.MEBandUpper, s, m, me)
	gauge(ch, c.seriesAlarmUpper, sn.MAEAlarmLimit, s, m, mae)
	gauge(ch, c.seriesAlarmUpper, sn.MEAlarmUpper, s, m, me)
	gauge(ch, c.seriesAlarmLower, sn.MEAlarmLower, s, m, me)
	levelScale(ch, c.seriesLevelScale, sn, s, m)
}

// levelScale exports a window's mean level scale, 1 when it is not
// scaled, for a window that has pairs.
func levelScale(ch chan<- prometheus.Metric, d *prometheus.Desc, sn store.Snapshot, labels ...string) {
	if sn.WindowN == 0 || sn.MAEExpected == nil {
		return
	}
	x := 1.0
	if sn.LevelScale != nil {
		x = *sn.LevelScale
	}
	ch <- prometheus.MustNewConstMetric(d, prometheus.GaugeValue, x, labels...)
}

func (c *stateCollector) emitLead(ch chan<- prometheus.Metric, ls store.DriftStatus) {
	sn, s, m, h := ls.Snapshot, ls.Series, ls.Model, strconv.Itoa(ls.Lead)
	c.stateSet(ch, c.leadState, ls.State, s, m, h)
	onsetGauge(ch, c.leadOnset, ls.Onset, s, m, h)
	gauge(ch, c.leadMAE, sn.MAE, s, m, h)
	gauge(ch, c.leadRMSE, sn.RMSE, s, m, h)
	gauge(ch, c.leadME, sn.ME, s, m, h)
	ch <- prometheus.MustNewConstMetric(c.leadPairs, prometheus.GaugeValue, float64(sn.WindowN), s, m, h)
	mae, rmse, me := metricLabel(scoring.MetricMAE), metricLabel(scoring.MetricRMSE), metricLabel(scoring.MetricME)
	gauge(ch, c.leadExpected, sn.MAEExpected, s, m, h, mae)
	gauge(ch, c.leadExpected, sn.RMSEExpected, s, m, h, rmse)
	gauge(ch, c.leadExpected, sn.MEExpected, s, m, h, me)
	gauge(ch, c.leadBandLower, sn.MAEBandLower, s, m, h, mae)
	gauge(ch, c.leadBandLower, sn.RMSEBandLower, s, m, h, rmse)
	gauge(ch, c.leadBandLower, sn.MEBandLower, s, m, h, me)
	gauge(ch, c.leadBandUpper, sn.MAEBandUpper, s, m, h, mae)
	gauge(ch, c.leadBandUpper, sn.RMSEBandUpper, s, m, h, rmse)
	gauge(ch, c.leadBandUpper, sn.MEBandUpper, s, m, h, me)
	gauge(ch, c.leadAlarmUpper, sn.MAEAlarmLimit, s, m, h, mae)
	gauge(ch, c.leadAlarmUpper, sn.RMSEAlarmLimit, s, m, h, rmse)
	gauge(ch, c.leadAlarmUpper, sn.MEAlarmUpper, s, m, h, me)
	gauge(ch, c.leadAlarmLower, sn.MEAlarmLower, s, m, h, me)
	levelScale(ch, c.leadLevelScale, sn, s, m, h)
}

// collectBacklog exports the drift marks waiting for the evaluators (of
// every replica): how many, and how long the oldest has waited by the
// database's clock, which stamped them.
func (c *stateCollector) collectBacklog(ctx context.Context, st *store.Store, ch chan<- prometheus.Metric) error {
	pending, age, err := st.DriftBacklog(ctx)
	if err != nil {
		return fmt.Errorf("reading drift backlog for metrics: %w", err)
	}
	ch <- prometheus.MustNewConstMetric(c.marksPending, prometheus.GaugeValue, float64(pending))
	ch <- prometheus.MustNewConstMetric(c.marksOldestAge, prometheus.GaugeValue, age.Seconds())
	return nil
}

func (c *stateCollector) collectFreshness(ctx context.Context, st *store.Store, ch chan<- prometheus.Metric) error {
	fs, as, err := st.Freshness(ctx)
	if err != nil {
		return fmt.Errorf("reading freshness for metrics: %w", err)
	}
	for _, f := range fs {
		ch <- prometheus.MustNewConstMetric(c.lastOrigin, prometheus.GaugeValue, unixSeconds(f.LastOrigin), f.Series, f.Model)
		if f.OriginInterval > 0 {
			ch <- prometheus.MustNewConstMetric(c.originInterval, prometheus.GaugeValue, f.OriginInterval.Seconds(), f.Series, f.Model)
		}
	}
	for _, a := range as {
		ch <- prometheus.MustNewConstMetric(c.lastActual, prometheus.GaugeValue, unixSeconds(a.LastTime), a.Series)
		ch <- prometheus.MustNewConstMetric(c.lastActualReceived, prometheus.GaugeValue, unixSeconds(a.ReceivedAt), a.Series)
	}
	return nil
}

func unixSeconds(t time.Time) float64 { return float64(t.UnixNano()) / 1e9 }

// poolCollector exports pgxpool.Stat, read at scrape time.
type poolCollector struct {
	store *atomic.Pointer[store.Store]

	acquired, constructing, idle, total, max                 *prometheus.Desc
	acquires, acquireSeconds, canceled, empty                *prometheus.Desc
	emptyWaitSeconds, newConns, lifetimeDestroy, idleDestroy *prometheus.Desc
}

func newPoolCollector(st *atomic.Pointer[store.Store]) *poolCollector {
	d := func(name, help string) *prometheus.Desc {
		return prometheus.NewDesc("aftercast_db_pool_"+name, help, nil, nil)
	}
	return &poolCollector{store: st,
		acquired:         d("acquired_conns", "Connections of the PostgreSQL pool currently in use."),
		constructing:     d("constructing_conns", "Connections of the PostgreSQL pool being opened."),
		idle:             d("idle_conns", "Idle connections in the PostgreSQL pool."),
		total:            d("total_conns", "Connections in the PostgreSQL pool: acquired, idle and being opened."),
		max:              d("max_conns", "Largest size of the PostgreSQL pool."),
		acquires:         d("acquire_count_total", "Successful connection acquisitions from the PostgreSQL pool."),
		acquireSeconds:   d("acquire_duration_seconds_total", "Time spent in successful connection acquisitions from the PostgreSQL pool."),
		canceled:         d("canceled_acquire_count_total", "Connection acquisitions from the PostgreSQL pool cancelled by their context."),
		empty:            d("empty_acquire_count_total", "Successful acquisitions that waited because the PostgreSQL pool had no idle connection."),
		emptyWaitSeconds: d("empty_acquire_wait_seconds_total", "Time successful acquisitions waited because the PostgreSQL pool had no idle connection."),
		newConns:         d("new_conns_count_total", "Connections the PostgreSQL pool opened."),
		lifetimeDestroy:  d("max_lifetime_destroy_count_total", "Connections closed because they reached the pool's maximum lifetime."),
		idleDestroy:      d("max_idle_destroy_count_total", "Connections closed because they stayed idle beyond the pool's maximum idle time."),
	}
}

// Describe sends every family of the pool.
func (c *poolCollector) Describe(ch chan<- *prometheus.Desc) {
	for _, d := range []*prometheus.Desc{c.acquired, c.constructing, c.idle, c.total, c.max, c.acquires, c.acquireSeconds,
		c.canceled, c.empty, c.emptyWaitSeconds, c.newConns, c.lifetimeDestroy, c.idleDestroy} {
		ch <- d
	}
}

// Collect reads the pool statistics; nothing before the pool is open.
func (c *poolCollector) Collect(ch chan<- prometheus.Metric) {
	st := c.store.Load()
	if st == nil {
		return
	}
	s := st.Pool().Stat()
	g := func(d *prometheus.Desc, v float64) { ch <- prometheus.MustNewConstMetric(d, prometheus.GaugeValue, v) }
	n := func(d *prometheus.Desc, v float64) {
		ch <- prometheus.MustNewConstMetric(d, prometheus.CounterValue, v)
	}
	g(c.acquired, float64(s.AcquiredConns()))
	g(c.constructing, float64(s.ConstructingConns()))
	g(c.idle, float64(s.IdleConns()))
	g(c.total, float64(s.TotalConns()))
	g(c.max, float64(s.MaxConns()))
	n(c.acquires, float64(s.AcquireCount()))
	n(c.acquireSeconds, s.AcquireDuration().Seconds())
	n(c.canceled, float64(s.CanceledAcquireCount()))
	n(c.empty, float64(s.EmptyAcquireCount()))
	n(c.emptyWaitSeconds, s.EmptyAcquireWaitTime().Seconds())
	n(c.newConns, float64(s.NewConnsCount()))
	n(c.lifetimeDestroy, float64(s.MaxLifetimeDestroyCount()))
	n(c.idleDestroy, float64(s.MaxIdleDestroyCount()))
}
