package server

import (
	"context"
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

var metricToProto = map[string]aftercastv1.DriftMetric{
	"mae": aftercastv1.DriftMetric_DRIFT_METRIC_MAE,
	"me":  aftercastv1.DriftMetric_DRIFT_METRIC_ME,
}

func statusToProto(st store.DriftStatus) *aftercastv1.DriftStatus {
	sn := st.Snapshot
	p := &aftercastv1.DriftStatus{State: stateToProto[st.State], StateSinceTime: timestamppb.New(st.Since), WindowN: int32(sn.WindowN),
		Mae: sn.MAE, MaeExpected: sn.MAEExpected, MaeBandLower: sn.MAEBandLower, MaeBandUpper: sn.MAEBandUpper, MaeAlarmLimit: sn.MAEAlarmLimit,
		Me: sn.ME, MeExpected: sn.MEExpected, MeAlarmLower: sn.MEAlarmLower, MeAlarmUpper: sn.MEAlarmUpper, KEff: sn.KEff}
	if st.Lead > 0 {
		l := int32(st.Lead)
		p.Lead = &l
	}
	if !st.LastOrigin.IsZero() {
		p.LastOriginTime = timestamppb.New(st.LastOrigin)
	}
	for _, m := range sn.Breached {
		p.BreachedMetrics = append(p.BreachedMetrics, metricToProto[m])
	}
	return p
}

// ListDriftStates groups the stored states per (series, model): the
// series-level state and every lead's. Pages by offset over the groups.
func (s *driftService) ListDriftStates(ctx context.Context, req *aftercastv1.ListDriftStatesRequest) (*aftercastv1.ListDriftStatesResponse, error) {
	pg, err := offsetPaging(req)
	if err != nil {
		return nil, err
	}
	sts, err := s.store.DriftStates(ctx, req.GetSeries(), req.GetModel())
	if err != nil {
		return nil, s.status(ctx, err)
	}
	var groups []*aftercastv1.SeriesModelDrift
	for _, st := range sts {
		g := groups
		if len(g) == 0 || g[len(g)-1].GetSeries() != st.Series || g[len(g)-1].GetModel() != st.Model {
			se, err := s.store.GetSeries(ctx, st.Series)
			if err != nil {
				return nil, s.status(ctx, err)
			}
			dec := make([]int32, 0, len(se.Decision()))
			for _, h := range se.Decision() {
				dec = append(dec, int32(h))
			}
			groups = append(groups, &aftercastv1.SeriesModelDrift{Series: st.Series, Model: st.Model,
				BaselineVersion: int32(st.BaselineVersion), DecisionLeads: dec})
		}
		cur := groups[len(groups)-1]
		if st.Lead == 0 {
			cur.SeriesStatus = statusToProto(st)
		} else {
			cur.LeadStatuses = append(cur.LeadStatuses, statusToProto(st))
		}
	}
	resp := &aftercastv1.ListDriftStatesResponse{}
	resp.States, resp.NextPageToken = pageOf(groups, pg)
	return resp, nil
}

func optNaN(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

func eventToProto(ev store.DriftEvent) *aftercastv1.DriftEvent {
	p := &aftercastv1.DriftEvent{Token: strconv.FormatInt(ev.Seq, 10), EventTime: timestamppb.New(ev.Time), Series: ev.Series, Model: ev.Model,
		OriginTime: timestamppb.New(ev.Origin), Metric: metricToProto[ev.Metric], PreviousState: stateToProto[ev.Previous], NewState: stateToProto[ev.State],
		Value: optNaN(ev.Value), Limit: optNaN(ev.Limit), BandLower: optNaN(ev.BandLower), BandUpper: optNaN(ev.BandUpper),
		WindowN: int32(ev.WindowN), KEff: optNaN(ev.KEff)}
	if ev.Lead > 0 {
		l := int32(ev.Lead)
		p.Lead = &l
	}
	return p
}

func eventToken(tok string) (int64, error) {
	if tok == "" {
		return 0, nil
	}
	n, err := strconv.ParseInt(tok, 10, 64)
	if err != nil || n < 0 {
		return 0, invalidArg("token", "not a token this service issued")
	}
	return n, nil
}

func (s *driftService) ListDriftEvents(ctx context.Context, req *aftercastv1.ListDriftEventsRequest) (*aftercastv1.ListDriftEventsResponse, error) {
	size, err := pageSize(req.GetPageSize(), 100, 1000)
	if err != nil {
		return nil, err
	}
	after, err := eventToken(req.GetPageToken())
	if err != nil {
		return nil, err
	}
	var since time.Time
	if req.GetSinceTime() != nil {
		since = req.GetSinceTime().AsTime()
	}
	evs, err := s.store.DriftEvents(ctx, req.GetSeries(), req.GetModel(), since, after, size+1)
	if err != nil {
		return nil, s.status(ctx, err)
	}
	resp := &aftercastv1.ListDriftEventsResponse{}
	for i, ev := range evs {
		if i == size {
			resp.NextPageToken = strconv.FormatInt(evs[i-1].Seq, 10)
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
	after, err := eventToken(req.GetResumeToken())
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
		evs, err := s.store.DriftEvents(qctx, req.GetSeries(), req.GetModel(), time.Time{}, after, 1000)
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

// evaluateDrift re-judges the drift states of the series an ingestion
// touched. The data is committed already; a failure here is logged and
// caught up by the next evaluation, which is idempotent.
func (a *api) evaluateDrift(ctx context.Context, series []string) {
	if len(series) == 0 {
		return
	}
	evs, err := a.store.EvaluateDrift(ctx, series)
	if err != nil {
		a.log.ErrorContext(ctx, "evaluating drift", "err", err)
	}
	a.metrics().countStateChanges(evs)
	for _, ev := range evs {
		a.log.InfoContext(ctx, "drift state changed", "series", ev.Series, "model", ev.Model, "lead", ev.Lead,
			"from", ev.Previous, "to", ev.State, "metric", ev.Metric, "origin", ev.Origin)
	}
}
