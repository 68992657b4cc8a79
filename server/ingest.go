package server

import (
	"context"
	"crypto/sha256"
	"errors"
	"fmt"
	"io"
	"math"
	"time"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server/store"
)

// maxRejectionsListed bounds the rejections returned in one
// acknowledgement; the counts stay exact.
const maxRejectionsListed = 1000

type forecastService struct {
	*api
	aftercastv1.UnimplementedForecastServiceServer
}

// pointPaths names the fields of a vector's points as sent: per lead, the
// path of its value ("dense.values[3]", "sparse.points[2].value").
type pointPaths map[int]string

// toVectors converts a batch. Values the store cannot represent (NaN in a
// dense list, sparse leads out of range or repeated) are rejected here, with
// the store's conventions: the index of the vector in the push, the lead of
// a rejected point, and the path of the field as sent. It returns, per
// vector, where each lead's value was sent, so that the store's rejections
// of points can name it. Quantile values, sent in the order of the points,
// are laid out per lead as the store keeps them.
func (a *api) toVectors(fs []*aftercastv1.Forecast, first int) ([]store.ForecastVector, []pointPaths, store.Ack) {
	var ack store.Ack
	maxH := a.store.Limits().MaxHorizon
	out := make([]store.ForecastVector, len(fs))
	paths := make([]pointPaths, len(fs))
	reject := func(i, lead int, field, reason string) {
		ack.Rejected++
		ack.Rejections = append(ack.Rejections, store.Rejection{Index: first + i, Lead: lead, Field: field, Reason: reason})
	}
	for i, f := range fs {
		v := store.ForecastVector{Series: f.GetSeries(), Model: f.GetModel()}
		v.Origin, v.OriginInvalid = wireTime(f.GetOriginTime())
		v.IssuedAt, v.IssueInvalid = wireTime(f.GetIssueTime())
		paths[i] = pointPaths{}
		switch {
		case f.GetDense() != nil:
			v.Values = append([]float64(nil), f.GetDense().GetValues()...)
			for k, x := range v.Values {
				paths[i][k+1] = fmt.Sprintf("dense.values[%d]", k)
				if math.IsNaN(x) {
					reject(i, k+1, paths[i][k+1], "NaN is not a forecast: leave the lead out with sparse values instead")
				}
			}
		case f.GetSparse() != nil:
			for k, p := range f.GetSparse().GetPoints() {
				h := int(p.GetLead())
				switch {
				case h < 1 || h > maxH:
					reject(i, h, fmt.Sprintf("sparse.points[%d].lead", k), fmt.Sprintf("lead %d is outside 1..%d", h, maxH))
					continue
				case math.IsNaN(p.GetValue()):
					reject(i, h, fmt.Sprintf("sparse.points[%d].value", k), "NaN is not a forecast")
					continue
				}
				for len(v.Values) < h {
					v.Values = append(v.Values, math.NaN())
				}
				if !math.IsNaN(v.Values[h-1]) {
					reject(i, h, fmt.Sprintf("sparse.points[%d].lead", k), fmt.Sprintf("lead %d appears twice in one vector", h))
					continue
				}
				v.Values[h-1], paths[i][h] = p.GetValue(), fmt.Sprintf("sparse.points[%d].value", k)
			}
		}
		for _, q := range f.GetQuantiles() {
			v.Quantiles = append(v.Quantiles, store.Quantile{Level: q.GetLevel(), Values: perLead(f, q.GetValues(), len(v.Values))})
		}
		out[i] = v
	}
	return out, paths, ack
}

// perLead lays quantile values, sent in the order of a sparse vector's
// points, out per lead (NaN where a lead has none); dense values and
// values that do not match the points are passed on for the store to judge.
func perLead(f *aftercastv1.Forecast, vals []float64, leads int) []float64 {
	points := f.GetSparse().GetPoints()
	if f.GetSparse() == nil || len(vals) != len(points) {
		return vals
	}
	out := make([]float64, leads)
	for j := range out {
		out[j] = math.NaN()
	}
	for j, x := range vals {
		if h := int(points[j].GetLead()); h >= 1 && h <= leads {
			out[h-1] = x
		}
	}
	return out
}

// writeForecasts stores a batch of forecasts, the batch at position first
// of its push, and counts what became of them. A batch with a request id
// that was committed before is answered with its receipt (store.Once).
func (a *api) writeForecasts(ctx context.Context, fs []*aftercastv1.Forecast, first int, requestID string) (store.Ack, error) {
	vs, paths, pre := a.toVectors(fs, first)
	// finish adds the rejections made here to the store's, naming a
	// rejected point by the field it was sent in where the store says
	// "values" and its lead.
	finish := func(stored store.Ack) store.Ack {
		ack := pre
		ack.Rejections = append([]store.Rejection(nil), pre.Rejections...)
		for _, r := range stored.Rejections {
			if p, ok := paths[r.Index-first][r.Lead]; ok && r.Field == "values" && !r.Whole {
				r.Field = p
			}
			ack.Rejections = append(ack.Rejections, r)
		}
		stored.Rejections = nil
		ack.Add(stored)
		return capped(ack)
	}
	once := store.Once{ID: requestID, Digest: digest(requestID, "forecasts", first, fs), Finish: finish}
	ack, err := a.store.WriteForecastsOnce(ctx, once, vs, first)
	if !ack.Replayed {
		ack = finish(ack)
	}
	if err == nil && !ack.Replayed {
		a.metrics().countForecasts(ack)
	}
	return ack, err
}

// writeActuals stores a batch of actuals, as writeForecasts, and counts
// what became of them. The store marks what the batch re-scores in the
// same transaction; the evaluator is woken to judge it off the request
// path.
func (a *api) writeActuals(ctx context.Context, wire []*aftercastv1.Actual, first int, requestID string) (store.Ack, error) {
	once := store.Once{ID: requestID, Digest: digest(requestID, "actuals", first, wire), Finish: capped}
	ack, err := a.store.WriteActualsOnce(ctx, once, toActuals(wire), first)
	ack = capped(ack)
	if err == nil && !ack.Replayed {
		a.metrics().countActuals(ack)
		if ack.Accepted+ack.Revised > 0 {
			a.drift.Wake()
		}
	}
	return ack, err
}

// digest identifies the content of a batch that carries a request id:
// its kind, its position in the push and its items as encoded
// deterministically. Nil without an id.
func digest[M proto.Message](requestID, kind string, first int, items []M) []byte {
	if requestID == "" {
		return nil
	}
	h := sha256.New()
	fmt.Fprintf(h, "%s %d %d\n", kind, first, len(items))
	det := proto.MarshalOptions{Deterministic: true}
	var buf []byte
	for _, it := range items {
		buf, _ = det.MarshalAppend(buf[:0], it) // what arrived was decoded, so it encodes
		fmt.Fprintf(h, "%d\n", len(buf))
		h.Write(buf)
	}
	return h.Sum(nil)
}

// capped keeps no more rejections than a summary lists, and one more,
// which marks the list truncated; the counts stay exact.
func capped(ack store.Ack) store.Ack {
	if len(ack.Rejections) > maxRejectionsListed+1 {
		ack.Rejections = ack.Rejections[:maxRejectionsListed+1]
	}
	return ack
}

// addCapped adds a batch's acknowledgement to a stream's total, keeping no
// more rejections than a summary lists (and one more, which marks it
// truncated): a long stream of bad rows must not grow the server's memory.
// The counts stay exact.
func addCapped(total *store.Ack, ack store.Ack) {
	total.Add(ack)
	if len(total.Rejections) > maxRejectionsListed+1 {
		total.Rejections = total.Rejections[:maxRejectionsListed+1]
	}
}

func forecastSummary(ack store.Ack) *aftercastv1.ForecastPushSummary {
	s := &aftercastv1.ForecastPushSummary{Accepted: ack.Accepted, Duplicate: ack.Duplicate, Late: ack.Late, Rejected: ack.Rejected}
	for i, r := range ack.Rejections {
		if i == maxRejectionsListed {
			s.RejectionsTruncated = true
			break
		}
		s.Rejections = append(s.Rejections, &aftercastv1.ForecastRejection{Index: int64(r.Index), Lead: int32(r.Lead), Field: r.Field,
			Reason: r.Reason, WholeVector: r.Whole})
	}
	return s
}

func (s *forecastService) PushForecasts(ctx context.Context, req *aftercastv1.PushForecastsRequest) (*aftercastv1.PushForecastsResponse, error) {
	ack, err := s.writeForecasts(ctx, req.GetForecasts(), 0, req.GetRequestId())
	if err != nil {
		return nil, s.status(ctx, err)
	}
	return &aftercastv1.PushForecastsResponse{Summary: forecastSummary(ack)}, nil
}

// StreamForecasts commits each message's batch before reading the next,
// and answers once at the end; a stream broken midway leaves the committed
// batches, and a whole re-push counts them as duplicates.
func (s *forecastService) StreamForecasts(stream aftercastv1.ForecastService_StreamForecastsServer) error {
	ctx := stream.Context()
	var total store.Ack
	n := 0
	for {
		req, err := stream.Recv()
		if errors.Is(err, io.EOF) {
			return stream.SendAndClose(&aftercastv1.StreamForecastsResponse{Summary: forecastSummary(total)})
		}
		if err != nil {
			return err
		}
		ack, err := s.writeForecasts(ctx, req.GetForecasts(), n, req.GetRequestId())
		if err != nil {
			return s.status(ctx, err)
		}
		addCapped(&total, ack)
		n += len(req.GetForecasts())
	}
}

type actualService struct {
	*api
	aftercastv1.UnimplementedActualServiceServer
}

func toActuals(as []*aftercastv1.Actual) []store.Actual {
	out := make([]store.Actual, len(as))
	for i, a := range as {
		out[i] = store.Actual{Series: a.GetSeries(), Value: a.GetValue()}
		out[i].Time, out[i].TimeInvalid = wireTime(a.GetTime())
	}
	return out
}

// wireTime converts a timestamp as sent: the zero time when unset, and a
// reason when its nanoseconds lie outside [0, 1e9), which AsTime would
// silently carry into the seconds. Seconds outside the stored range are
// the store's to refuse.
func wireTime(ts *timestamppb.Timestamp) (time.Time, string) {
	if ts == nil {
		return time.Time{}, ""
	}
	if n := ts.GetNanos(); n < 0 || n >= 1e9 {
		return time.Time{}, fmt.Sprintf("not a valid timestamp: nanos %d outside [0, 999999999]", n)
	}
	return ts.AsTime(), ""
}

func actualSummary(ack store.Ack) *aftercastv1.ActualPushSummary {
	s := &aftercastv1.ActualPushSummary{Accepted: ack.Accepted, Duplicate: ack.Duplicate, Revised: ack.Revised, Rejected: ack.Rejected}
	for i, r := range ack.Rejections {
		if i == maxRejectionsListed {
			s.RejectionsTruncated = true
			break
		}
		s.Rejections = append(s.Rejections, &aftercastv1.ActualRejection{Index: int64(r.Index), Field: r.Field, Reason: r.Reason})
	}
	return s
}

func (s *actualService) PushActuals(ctx context.Context, req *aftercastv1.PushActualsRequest) (*aftercastv1.PushActualsResponse, error) {
	ack, err := s.writeActuals(ctx, req.GetActuals(), 0, req.GetRequestId())
	if err != nil {
		return nil, s.status(ctx, err)
	}
	return &aftercastv1.PushActualsResponse{Summary: actualSummary(ack)}, nil
}

// StreamActuals: same commit-per-message semantics as StreamForecasts.
func (s *actualService) StreamActuals(stream aftercastv1.ActualService_StreamActualsServer) error {
	ctx := stream.Context()
	var total store.Ack
	n := 0
	for {
		req, err := stream.Recv()
		if errors.Is(err, io.EOF) {
			return stream.SendAndClose(&aftercastv1.StreamActualsResponse{Summary: actualSummary(total)})
		}
		if err != nil {
			return err
		}
		ack, err := s.writeActuals(ctx, req.GetActuals(), n, req.GetRequestId())
		if err != nil {
			return s.status(ctx, err)
		}
		addCapped(&total, ack)
		n += len(req.GetActuals())
	}
}
