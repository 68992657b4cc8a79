package server

import (
	"cmp"
	"context"
	"crypto/sha256"
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
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
// path of its value and of its lead ("dense.values[3]" for both;
// "sparse.points[2].value" and "sparse.points[2].lead").
type pointPaths map[int][2]string

// toVectors converts a batch. Values the store cannot represent (NaN in a
// dense list, sparse leads out of range or repeated) are rejected here, with
// the store's conventions: the index of the vector in the push, the lead of
// a rejected point, and the path of the field as sent. It returns, per
// vector, where each lead's value was sent, so that the store's rejections
// of points can name it. Quantile values, sent in the order of the points,
// are laid out per lead as the store keeps them.
func (a *api) toVectors(fs []*aftercastv1.Forecast, first int) ([]store.ForecastVector, []pointPaths, store.Ack) {
	var ack store.Ack
	out := make([]store.ForecastVector, len(fs))
	paths := make([]pointPaths, len(fs))
	for i, f := range fs {
		v := store.ForecastVector{Series: f.GetSeries(), Model: f.GetModel()}
		v.Origin, v.OriginInvalid = wireTime(f.GetOriginTime())
		v.IssuedAt, v.IssueInvalid = wireTime(f.GetIssueTime())
		reject := func(lead int, field, reason string) {
			v.Refused++
			ack.Rejected++
			ack.Rejections = append(ack.Rejections, store.Rejection{Index: first + i, Lead: lead, Field: field, Reason: reason})
		}
		if f.GetDense() != nil {
			v.Values, paths[i] = denseValues(f.GetDense().GetValues(), reject)
		} else {
			v.Values, paths[i] = a.sparseValues(f.GetSparse().GetPoints(), reject)
		}
		v.Quantiles, v.Problem = quantilesPerLead(f, len(v.Values))
		out[i] = v
	}
	return out, paths, ack
}

// denseValues takes a dense list as it is, rejecting NaN (a lead left out
// is sent sparse).
func denseValues(vals []float64, reject func(lead int, field, reason string)) ([]float64, pointPaths) {
	paths := pointPaths{}
	out := append([]float64(nil), vals...)
	for k, x := range out {
		p := fmt.Sprintf("dense.values[%d]", k)
		paths[k+1] = [2]string{p, p}
		if math.IsNaN(x) {
			reject(k+1, p, "NaN is not a forecast: leave the lead out with sparse values instead")
		}
	}
	return out, paths
}

// sparseValues lays sparse points out per lead (NaN where none), rejecting
// leads out of range or repeated — a repeat of a lead refused for its
// value too — and NaN values.
func (a *api) sparseValues(points []*aftercastv1.LeadValue, reject func(lead int, field, reason string)) ([]float64, pointPaths) {
	maxH := a.store.Limits().MaxHorizon
	paths := pointPaths{}
	seen := map[int]bool{}
	var out []float64
	for k, p := range points {
		h := int(p.GetLead())
		lead, value := fmt.Sprintf("sparse.points[%d].lead", k), fmt.Sprintf("sparse.points[%d].value", k)
		switch {
		case h < 1 || h > maxH:
			reject(h, lead, fmt.Sprintf("lead %d is outside 1..%d", h, maxH))
		case seen[h]:
			reject(h, lead, fmt.Sprintf("lead %d appears twice in one vector", h))
		case math.IsNaN(p.GetValue()):
			seen[h] = true
			reject(h, value, "NaN is not a forecast")
		default:
			seen[h] = true
			for len(out) < h {
				out = append(out, math.NaN())
			}
			out[h-1], paths[h] = p.GetValue(), [2]string{value, lead}
		}
	}
	return out, paths
}

// quantilesPerLead lays each quantile's values out per lead as the store
// keeps them. A sparse vector's are sent in the order of its points, one
// per point as sent: any other count rejects the vector (the store judges
// dense ones). A repeated lead takes the first point's.
func quantilesPerLead(f *aftercastv1.Forecast, leads int) ([]store.Quantile, *store.FieldViolation) {
	points := f.GetSparse().GetPoints()
	var out []store.Quantile
	for k, q := range f.GetQuantiles() {
		vals := q.GetValues()
		if f.GetSparse() != nil {
			if len(vals) != len(points) {
				return nil, &store.FieldViolation{Field: fmt.Sprintf("quantiles[%d].values", k),
					Reason: fmt.Sprintf("%d values for %d points", len(vals), len(points))}
			}
			vals = sparseQuantile(points, vals, leads)
		}
		out = append(out, store.Quantile{Level: q.GetLevel(), Values: vals})
	}
	return out, nil
}

func sparseQuantile(points []*aftercastv1.LeadValue, vals []float64, leads int) []float64 {
	out := make([]float64, leads)
	set := make([]bool, leads)
	for j := range out {
		out[j] = math.NaN()
	}
	for j, x := range vals {
		if h := int(points[j].GetLead()); h >= 1 && h <= leads && !set[h-1] {
			out[h-1], set[h-1] = x, true
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
			if p, ok := paths[r.Index-first][r.Lead]; ok && !r.Whole {
				switch r.Field {
				case "values":
					r.Field = p[0]
				case "lead":
					r.Field = p[1]
				}
			}
			ack.Rejections = append(ack.Rejections, r)
		}
		stored.Rejections = nil
		ack.Add(stored)
		slices.SortStableFunc(ack.Rejections, func(x, y store.Rejection) int { return cmp.Compare(x.Index, y.Index) })
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
