package server

import (
	"context"
	"encoding/base64"
	"encoding/binary"
	"fmt"
	"hash/fnv"
	"math"
	"time"

	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server/store"
)

// timeCursor is the page token of a listing by time: the last time sent and
// a hash of the request it continues, so that a token is refused for any
// other request instead of silently skipping items.
type timeCursor struct {
	after time.Time
	req   uint32
}

func requestKey(parts ...any) uint32 {
	h := fnv.New32a()
	for _, p := range parts {
		fmt.Fprintf(h, "%v\x00", p)
	}
	return h.Sum32()
}

func (c timeCursor) token() string {
	b := binary.AppendVarint(nil, c.after.UnixNano())
	b = binary.LittleEndian.AppendUint32(b, c.req)
	return base64.RawURLEncoding.EncodeToString(b)
}

// readCursor decodes a page token of the request whose key is req.
func readCursor(tok string, req uint32) (time.Time, error) {
	if tok == "" {
		return time.Time{}, nil
	}
	b, err := base64.RawURLEncoding.DecodeString(tok)
	if err == nil {
		ns, n := binary.Varint(b)
		if n > 0 && len(b) == n+4 && ns >= store.MinTime.UnixNano() && ns < store.MaxTime.UnixNano() {
			if binary.LittleEndian.Uint32(b[n:]) != req {
				return time.Time{}, invalidArg("page_token", "this token continues another request: repeat that request, or start this one without a page token")
			}
			return time.Unix(0, ns).UTC(), nil
		}
	}
	return time.Time{}, invalidArg("page_token", "not a token this service issued: start without a page token and pass on next_page_token")
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
	key := requestKey("forecasts", req.GetSeries(), req.GetModel(), from.UnixMicro(), to.UnixMicro())
	after, err := readCursor(req.GetPageToken(), key)
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
			resp.NextPageToken = timeCursor{fs[i-1].Origin, key}.token()
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
	return p
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
	key := requestKey("actuals", req.GetSeries(), from.UnixMicro(), to.UnixMicro())
	after, err := readCursor(req.GetPageToken(), key)
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
			resp.NextPageToken = timeCursor{as[i-1].Time, key}.token()
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
