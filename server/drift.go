package server

import (
	"context"
	"encoding/binary"
	"fmt"
	"math"
	"strconv"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
)

type driftService struct {
	*api
	aftercastv1.UnimplementedDriftServiceServer
}

var stateToProto = map[scoring.State]aftercastv1.DriftState{
	scoring.StateWithin:               aftercastv1.DriftState_DRIFT_STATE_WITHIN,
	scoring.StateDegraded:             aftercastv1.DriftState_DRIFT_STATE_DEGRADED,
	scoring.StateImproved:             aftercastv1.DriftState_DRIFT_STATE_IMPROVED,
	scoring.StateInsufficientData:     aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_DATA,
	scoring.StateInsufficientBaseline: aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_BASELINE,
}

var metricToProto = map[scoring.Metric]aftercastv1.DriftMetric{
	scoring.MetricMAE: aftercastv1.DriftMetric_DRIFT_METRIC_MAE,
	scoring.MetricME:  aftercastv1.DriftMetric_DRIFT_METRIC_ME,
}

var causeToProto = map[scoring.Cause]aftercastv1.DriftCause{
	scoring.CauseData:     aftercastv1.DriftCause_DRIFT_CAUSE_DATA,
	scoring.CauseRevision: aftercastv1.DriftCause_DRIFT_CAUSE_REVISION,
	scoring.CauseBaseline: aftercastv1.DriftCause_DRIFT_CAUSE_BASELINE,
}

// timeOrNil is t as a proto timestamp, nil when zero.
func timeOrNil(t time.Time) *timestamppb.Timestamp {
	if t.IsZero() {
		return nil
	}
	return timestamppb.New(t)
}

func leadOrNil(h int) *int32 {
	if h == 0 {
		return nil
	}
	l := int32(h)
	return &l
}

func statusToProto(st store.DriftStatus) *aftercastv1.DriftStatus {
	sn := st.Snapshot
	p := &aftercastv1.DriftStatus{Lead: leadOrNil(st.Lead), State: stateToProto[st.State],
		NoticedTime: timeOrNil(st.Noticed), OnsetOriginTime: timeOrNil(st.Onset), OriginsSinceOnset: int32(sn.OriginsSinceOnset),
		LastOriginTime: timeOrNil(st.LastOrigin), WindowN: int32(sn.WindowN),
		Mae: sn.MAE, MaeExpected: sn.MAEExpected, MaeBandLower: sn.MAEBandLower, MaeBandUpper: sn.MAEBandUpper, MaeAlarmLimit: sn.MAEAlarmLimit,
		Me: sn.ME, MeExpected: sn.MEExpected, MeBandLower: sn.MEBandLower, MeBandUpper: sn.MEBandUpper,
		MeAlarmLower: sn.MEAlarmLower, MeAlarmUpper: sn.MEAlarmUpper, KEff: sn.KEff,
		OnsetMetric: metricToProto[sn.EnteredMetric], OnsetValue: sn.EnteredValue, OnsetLimit: sn.EnteredLimit, Reason: sn.Reason,
		LevelScale: sn.LevelScale, BacktestMae: sn.BacktestMAE}
	//lint:ignore SA1019 sent for clients older than noticed_time
	p.StateSinceTime = timeOrNil(st.Noticed) //nolint:staticcheck // SA1019: sent for clients older than noticed_time
	for _, m := range sn.Breached {
		p.BreachedMetrics = append(p.BreachedMetrics, metricToProto[m])
	}
	return p
}

// ListDriftStates lists every (series, model) with forecasts or a
// baseline, with its stored states: the series-level state and every
// lead's. One without a baseline, or whose baseline was not judged yet,
// has a series-level state saying so and no lead states. Pages by offset.
func (s *driftService) ListDriftStates(ctx context.Context, req *aftercastv1.ListDriftStatesRequest) (*aftercastv1.ListDriftStatesResponse, error) {
	pg, err := offsetPaging(req)
	if err != nil {
		return nil, err
	}
	sts, err := s.store.DriftStates(ctx, req.GetSeries(), req.GetModel())
	if err != nil {
		return nil, s.status(ctx, err)
	}
	models, err := s.store.Models(ctx, req.GetSeries(), req.GetModel())
	if err != nil {
		return nil, s.status(ctx, err)
	}
	type key struct{ series, model string }
	byKey := map[key][]store.DriftStatus{}
	for _, st := range sts {
		k := key{st.Series, st.Model}
		byKey[k] = append(byKey[k], st)
	}
	groups := make([]*aftercastv1.SeriesModelDrift, 0, len(models))
	for _, m := range models {
		g, err := s.group(ctx, m, byKey[key{m.Series, m.Model}])
		if err != nil {
			return nil, s.status(ctx, err)
		}
		groups = append(groups, g)
	}
	resp := &aftercastv1.ListDriftStatesResponse{}
	if resp.PendingEvaluations, _, err = s.store.DriftBacklog(ctx); err != nil {
		return nil, s.status(ctx, err)
	}
	if resp.ExpectedChancePagesPerWeek, err = s.chancePages(ctx, groups); err != nil {
		return nil, s.status(ctx, err)
	}
	resp.States, resp.NextPageToken = pageOf(groups, pg)
	return resp, nil
}

// group is the drift picture of one (series, model) from its stored
// states (by lead, the series level first).
func (s *driftService) group(ctx context.Context, m store.ModelOf, sts []store.DriftStatus) (*aftercastv1.SeriesModelDrift, error) {
	se, err := s.store.GetSeries(ctx, m.Series)
	if err != nil {
		return nil, err
	}
	dec := make([]int32, 0, len(se.Decision()))
	for _, h := range se.Decision() {
		dec = append(dec, int32(h))
	}
	g := &aftercastv1.SeriesModelDrift{Series: m.Series, Model: m.Model, BaselineVersion: int32(m.BaselineVersion), DecisionLeads: dec}
	for _, st := range sts {
		if st.Lead == 0 {
			g.SeriesStatus = statusToProto(st)
			g.BaselineVersion = int32(st.BaselineVersion)
		} else {
			g.LeadStatuses = append(g.LeadStatuses, statusToProto(st))
		}
	}
	switch {
	case g.SeriesStatus != nil:
	case m.BaselineVersion == 0:
		g.SeriesStatus = &aftercastv1.DriftStatus{State: aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_BASELINE,
			Reason: "no baseline imported for this model: aftercast baseline import"}
	default:
		g.SeriesStatus = &aftercastv1.DriftStatus{State: aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_DATA,
			Reason: "the baseline has not been judged against production yet"}
	}
	return g, nil
}

// chancePages is the pages the (series, model) groups that can page are
// expected to raise by chance per week if all are healthy (method.md §5).
func (s *driftService) chancePages(ctx context.Context, groups []*aftercastv1.SeriesModelDrift) (float64, error) {
	fs, _, err := s.store.Freshness(ctx)
	if err != nil {
		return 0, err
	}
	interval := map[[2]string]time.Duration{}
	for _, f := range fs {
		interval[[2]string{f.Series, f.Model}] = f.OriginInterval
	}
	var pages float64
	for _, g := range groups {
		if g.GetSeriesStatus().GetState() != aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_BASELINE {
			pages += scoring.ChancePagesPerWeek(interval[[2]string{g.GetSeries(), g.GetModel()}])
		}
	}
	return pages, nil
}

func optNaN(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

func eventToProto(ev store.DriftEvent) *aftercastv1.DriftEvent {
	return &aftercastv1.DriftEvent{Token: strconv.FormatInt(ev.Seq, 10), EventTime: timestamppb.New(ev.Time), Series: ev.Series, Model: ev.Model,
		Lead: leadOrNil(ev.Lead), OriginTime: timeOrNil(ev.Origin), Cause: causeToProto[ev.Cause], Metric: metricToProto[ev.Metric],
		PreviousState: stateToProto[ev.Previous], NewState: stateToProto[ev.State],
		Value: optNaN(ev.Value), Limit: optNaN(ev.Limit), BandLower: optNaN(ev.BandLower), BandUpper: optNaN(ev.BandUpper),
		WindowN: int32(ev.WindowN), KEff: optNaN(ev.KEff)}
}

// eventToken reads an event's token (its sequence number), refusing one
// this service never issued: a resume token from another deployment, or
// made up, would otherwise deliver nothing and say nothing.
func (s *driftService) eventToken(ctx context.Context, field, tok string) (int64, error) {
	if tok == "" {
		return 0, nil
	}
	n, err := strconv.ParseInt(tok, 10, 64)
	if err != nil || n < 1 {
		return 0, invalidArg(field, "not an event token: pass the token of the last event processed, or none to start with new events")
	}
	last, err := s.store.LastEventSeq(ctx)
	if err != nil {
		return 0, s.status(ctx, err)
	}
	if n > last {
		return 0, invalidArg(field, fmt.Sprintf("no event %d was ever issued here (the newest is %d): "+
			"pass the token of the last event processed, or none to start with new events", n, last))
	}
	return n, nil
}

func (s *driftService) ListDriftEvents(ctx context.Context, req *aftercastv1.ListDriftEventsRequest) (*aftercastv1.ListDriftEventsResponse, error) {
	size, err := pageSize(req.GetPageSize(), 100, 1000)
	if err != nil {
		return nil, err
	}
	var after int64
	pos, err := decodePage(req)
	if err != nil {
		return nil, err
	}
	if pos != nil {
		seq, n := binary.Varint(pos)
		if n != len(pos) || seq < 0 {
			return nil, badToken()
		}
		after = seq
	}
	f := store.EventFilter{Series: req.GetSeries(), Model: req.GetModel(), After: after, Limit: size + 1}
	for _, t := range []struct {
		field string
		ts    *timestamppb.Timestamp
		to    *time.Time
	}{{"since_time", req.GetSinceTime(), &f.Since}, {"origin_from_time", req.GetOriginFromTime(), &f.OriginFrom},
		{"origin_to_time", req.GetOriginToTime(), &f.OriginTo}} {
		if t.ts == nil {
			continue
		}
		if err := t.ts.CheckValid(); err != nil {
			return nil, invalidArg(t.field, err.Error())
		}
		*t.to = t.ts.AsTime()
	}
	if !f.OriginFrom.IsZero() && !f.OriginTo.IsZero() && !f.OriginFrom.Before(f.OriginTo) {
		return nil, invalidArg("origin_to_time", "must be after origin_from_time")
	}
	evs, err := s.store.DriftEvents(ctx, f)
	if err != nil {
		return nil, s.status(ctx, err)
	}
	resp := &aftercastv1.ListDriftEventsResponse{}
	for i, ev := range evs {
		if i == size {
			resp.NextPageToken = encodePage(binary.AppendVarint(nil, evs[i-1].Seq), req)
			break
		}
		resp.Events = append(resp.Events, eventToProto(ev))
	}
	return resp, nil
}

// watchPoll is how often a watch looks for new events. Events are rare and
// ordered by sequence number in commit order, so polling "after the last
// one sent" misses nothing.
const watchPoll = 500 * time.Millisecond

// WatchDriftEvents sends every event after the resume token, then new ones
// as they are committed, until the client goes away.
func (s *driftService) WatchDriftEvents(req *aftercastv1.WatchDriftEventsRequest, stream aftercastv1.DriftService_WatchDriftEventsServer) error {
	ctx := stream.Context()
	after, err := s.eventToken(ctx, "resume_token", req.GetResumeToken())
	if err != nil {
		return err
	}
	if req.GetResumeToken() == "" {
		// No token: start with what is committed after the call began.
		if after, err = s.store.LastEventSeq(ctx); err != nil {
			return s.status(ctx, err)
		}
	}
	tick := time.NewTicker(watchPoll)
	defer tick.Stop()
	for {
		qctx, cancel := context.WithTimeout(ctx, 30*time.Second)
		evs, err := s.store.DriftEvents(qctx, store.EventFilter{Series: req.GetSeries(), Model: req.GetModel(), After: after, Limit: 1000})
		cancel()
		if err != nil {
			return s.status(ctx, err)
		}
		for _, ev := range evs {
			if err := stream.Send(&aftercastv1.WatchDriftEventsResponse{Event: eventToProto(ev)}); err != nil {
				return err
			}
			after = ev.Seq
		}
		if len(evs) == 1000 {
			continue
		}
		select {
		case <-ctx.Done():
			return nil
		case <-s.stopping:
			// Shutting down: end the stream so that draining does not wait
			// for watchers; clients resume with their last token.
			return status.Error(codes.Unavailable, "server shutting down, resume with the last token")
		case <-tick.C:
		}
	}
}

// GetDriftHistory replays the stored production period and returns its
// transitions.
func (s *driftService) GetDriftHistory(ctx context.Context, req *aftercastv1.GetDriftHistoryRequest) (*aftercastv1.GetDriftHistoryResponse, error) {
	if req.Lead != nil && req.GetLead() < 0 {
		return nil, invalidArg("lead", "must be 0 (the series level) or a lead")
	}
	history, version, err := s.drift.History(ctx, req.GetSeries(), req.GetModel())
	if err != nil {
		return nil, s.status(ctx, err)
	}
	resp := &aftercastv1.GetDriftHistoryResponse{BaselineVersion: int32(version)}
	for _, c := range history {
		if req.Lead != nil && int(req.GetLead()) != c.Lead {
			continue
		}
		t := &aftercastv1.DriftTransition{Lead: leadOrNil(c.Lead), OriginTime: timestamppb.New(c.Origin), PreviousState: stateToProto[c.From],
			NewState: stateToProto[c.To], Metric: metricToProto[c.Metric], WindowN: int32(c.N), Reason: c.Reason}
		if c.Metric != "" {
			t.Value, t.Limit, t.KEff = optNaN(c.Value), optNaN(c.Limit), optNaN(c.KEff)
		}
		resp.Transitions = append(resp.Transitions, t)
	}
	return resp, nil
}
