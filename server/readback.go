package server

import (
	"context"
	"encoding/binary"
	"math"
	"time"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server/store"
)

// afterTime reads the position of a listing by time: the last time sent.
func afterTime(req interface {
	proto.Message
	GetPageToken() string
}) (time.Time, error) {
	pos, err := decodePage(req)
	if err != nil || pos == nil {
		return time.Time{}, err
	}
	ns, n := binary.Varint(pos)
	if n != len(pos) || ns < store.MinTime.UnixNano() || ns >= store.MaxTime.UnixNano() {
		return time.Time{}, badToken()
	}
	return time.Unix(0, ns).UTC(), nil
}

func timeToken(t time.Time, req proto.Message) string {
	return encodePage(binary.AppendVarint(nil, t.UnixNano()), req)
}

// timeRange reads an optional [from, to) pair of timestamps.
func timeRange(fromField string, from *timestamppb.Timestamp, toField string, to *timestamppb.Timestamp) (time.Time, time.Time, error) {
	var lo, hi time.Time
	for _, t := range []struct {
		field string
		ts    *timestamppb.Timestamp
		to    *time.Time
	}{{fromField, from, &lo}, {toField, to, &hi}} {
		if t.ts == nil {
			continue
		}
		if err := t.ts.CheckValid(); err != nil {
			return lo, hi, invalidArg(t.field, err.Error())
		}
		*t.to = t.ts.AsTime()
	}
	if !lo.IsZero() && !hi.IsZero() && !lo.Before(hi) {
		return lo, hi, invalidArg(toField, "must be after "+fromField)
	}
	return lo, hi, nil
}

func (s *forecastService) ListForecasts(ctx context.Context, req *aftercastv1.ListForecastsRequest) (*aftercastv1.ListForecastsResponse, error) {
	size, err := pageSize(req.GetPageSize(), 100, 1000)
	if err != nil {
		return nil, err
	}
	from, to, err := timeRange("origin_from_time", req.GetOriginFromTime(), "origin_to_time", req.GetOriginToTime())
	if err != nil {
		return nil, err
	}
	after, err := afterTime(req)
	if err != nil {
		return nil, err
	}
	fs, err := s.store.ListForecasts(ctx, req.GetSeries(), req.GetModel(), from, to, after, size+1)
	if err != nil {
		return nil, s.status(ctx, err)
	}
	resp := &aftercastv1.ListForecastsResponse{}
	for i, f := range fs {
		if i == size {
			resp.NextPageToken = timeToken(fs[i-1].Origin, req)
			break
		}
		resp.Forecasts = append(resp.Forecasts, storedForecastToProto(f))
	}
	return resp, nil
}

func storedForecastToProto(f store.StoredForecast) *aftercastv1.StoredForecast {
	p := &aftercastv1.StoredForecast{OriginTime: timestamppb.New(f.Origin), IssueTime: timeOrNil(f.IssuedAt),
		FirstReceiveTime: timestamppb.New(f.FirstReceived), ReceiveTime: timestamppb.New(f.Receive)}
	for i, x := range f.Values {
		if math.IsNaN(x) {
			continue
		}
		pt := &aftercastv1.StoredPoint{Lead: int32(i + 1), Value: x, Late: i < len(f.Late) && f.Late[i]}
		if i < len(f.LateReissues) && !math.IsNaN(f.LateReissues[i]) {
			v := f.LateReissues[i]
			pt.LateReissue = &v
		}
		p.Points = append(p.Points, pt)
	}
	for k, level := range f.QuantileLevels {
		q := &aftercastv1.QuantileValues{Level: level}
		for _, pt := range p.Points {
			q.Values = append(q.Values, at(f.QuantileValues[k], int(pt.Lead)-1))
		}
		p.Quantiles = append(p.Quantiles, q)
	}
	return p
}

// at is xs[i], NaN past its end.
func at(xs []float64, i int) float64 {
	if i < len(xs) {
		return xs[i]
	}
	return math.NaN()
}

func (s *actualService) ListActuals(ctx context.Context, req *aftercastv1.ListActualsRequest) (*aftercastv1.ListActualsResponse, error) {
	size, err := pageSize(req.GetPageSize(), 1000, 10000)
	if err != nil {
		return nil, err
	}
	from, to, err := timeRange("time_from", req.GetTimeFrom(), "time_to", req.GetTimeTo())
	if err != nil {
		return nil, err
	}
	after, err := afterTime(req)
	if err != nil {
		return nil, err
	}
	as, err := s.store.ListActuals(ctx, req.GetSeries(), from, to, after, size+1)
	if err != nil {
		return nil, s.status(ctx, err)
	}
	resp := &aftercastv1.ListActualsResponse{}
	for i, a := range as {
		if i == size {
			resp.NextPageToken = timeToken(as[i-1].Time, req)
			break
		}
		resp.Actuals = append(resp.Actuals, &aftercastv1.StoredActual{Time: timestamppb.New(a.Time), Value: a.Value,
			FirstReceiveTime: timestamppb.New(a.FirstReceived), ReceiveTime: timestamppb.New(a.Receive), Revisions: int32(a.Revisions)})
	}
	return resp, nil
}

func (s *seriesService) ListModels(ctx context.Context, req *aftercastv1.ListModelsRequest) (*aftercastv1.ListModelsResponse, error) {
	ms, err := s.store.ListModels(ctx, req.GetSeries())
	if err != nil {
		return nil, s.status(ctx, err)
	}
	resp := &aftercastv1.ListModelsResponse{}
	for _, m := range ms {
		resp.Models = append(resp.Models, &aftercastv1.SeriesModel{Model: m.Model, LastOriginTime: timeOrNil(m.LastOrigin),
			BaselineVersion: int32(m.BaselineVersion)})
	}
	return resp, nil
}
