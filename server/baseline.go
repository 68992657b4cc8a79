package server

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/drift"
	"github.com/aftercast/aftercast/server/store"
)

// maxBaselineRows bounds one import held in memory before its commit
// (about 100 MB at this size).
const maxBaselineRows = 2_000_000

type baselineService struct {
	*api
	aftercastv1.UnimplementedBaselineServiceServer
}

func (s *baselineService) ImportBaseline(stream aftercastv1.BaselineService_ImportBaselineServer) error {
	ctx := stream.Context()
	var (
		model    string
		rows     []store.BacktestRow
		training []store.TrainingActual
		first    = true
	)
	for {
		req, err := stream.Recv()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return err
		}
		switch {
		case first:
			model, first = req.GetModel(), false
			if model == "" {
				return invalidArg("model", "required in the first message")
			}
		case req.GetModel() != "" && req.GetModel() != model:
			return invalidArg("model", fmt.Sprintf("one import is of one model: %q, then %q", model, req.GetModel()))
		}
		if len(rows)+len(req.GetRows()) > maxBaselineRows || len(training)+len(req.GetTrainingActuals()) > maxBaselineRows {
			return invalidArg("rows", fmt.Sprintf("an import holds at most %d backtest rows and %d training actuals", maxBaselineRows, maxBaselineRows))
		}
		for _, r := range req.GetRows() {
			rows = append(rows, store.BacktestRow{Series: r.GetSeries(), Origin: r.GetOriginTime().AsTime(), Target: r.GetTargetTime().AsTime(),
				Forecast: r.GetForecast(), Actual: r.GetActual()})
		}
		for _, t := range req.GetTrainingActuals() {
			training = append(training, store.TrainingActual{Series: t.GetSeries(), Time: t.GetTime().AsTime(), Value: t.GetValue()})
		}
	}
	vs, err := s.store.ImportBaseline(ctx, model, rows, training)
	if err != nil {
		return s.status(ctx, err)
	}
	// A new version was stored with a mark to re-judge the production
	// period against it.
	s.drift.Wake()
	resp := &aftercastv1.ImportBaselineResponse{Model: model}
	for _, v := range vs {
		ib := &aftercastv1.ImportedBaseline{Version: versionToProto(v), Created: v.Created}
		if err := s.describeScale(ctx, ib); err != nil {
			return s.status(ctx, err)
		}
		resp.Baselines = append(resp.Baselines, ib)
	}
	return stream.SendAndClose(resp)
}

// describeScale adds the series' error scale and the pooled quantity's b̂
// to an imported version: preparing it here also warms the evaluator's
// cache for the replay the import marked.
func (s *baselineService) describeScale(ctx context.Context, ib *aftercastv1.ImportedBaseline) error {
	v := ib.GetVersion()
	se, err := s.store.GetSeries(ctx, v.GetSeries())
	if err != nil {
		return err
	}
	ib.ErrorScale = errorScaleToProto(se.ErrorScale)
	_, _, pooled, err := s.drift.BaselineView(ctx, v.GetSeries(), v.GetModel(), int(v.GetVersion()), scoring.DriftWindow)
	if err != nil {
		return err
	}
	if pooled != nil {
		ib.PooledErrorScaleExponent = pooled.Scale.B
	}
	return nil
}

var warningKinds = map[string]aftercastv1.BaselineWarningKind{
	store.WarnCadence:         aftercastv1.BaselineWarningKind_BASELINE_WARNING_KIND_ORIGIN_CADENCE_DIFFERS,
	store.WarnHorizon:         aftercastv1.BaselineWarningKind_BASELINE_WARNING_KIND_HORIZON_DIFFERS,
	store.WarnLeadNotUsable:   aftercastv1.BaselineWarningKind_BASELINE_WARNING_KIND_LEAD_NOT_USABLE,
	store.WarnNoTraining:      aftercastv1.BaselineWarningKind_BASELINE_WARNING_KIND_NO_TRAINING_ACTUALS,
	store.WarnTrainingIgnored: aftercastv1.BaselineWarningKind_BASELINE_WARNING_KIND_TRAINING_ACTUALS_IGNORED,
}

func versionToProto(v store.BaselineVersion) *aftercastv1.BaselineVersion {
	p := &aftercastv1.BaselineVersion{Series: v.Series, Model: v.Model, Version: int32(v.Version), Active: v.Active,
		CreateTime: timestamppb.New(v.CreatedAt), FirstOriginTime: timestamppb.New(v.FirstOrigin), LastOriginTime: timestamppb.New(v.LastOrigin),
		OriginCadenceSteps: int32(v.CadenceSteps), MaxLead: int32(v.MaxLead), RowCount: v.Rows, TrainingActualCount: v.TrainingCount}
	if !math.IsNaN(v.MASEScale) {
		p.MaseScale = &v.MASEScale
	}
	for _, w := range v.Warnings {
		pw := &aftercastv1.BaselineWarning{Kind: warningKinds[w.Kind], Message: w.Message}
		if w.Lead > 0 {
			l := int32(w.Lead)
			pw.Lead = &l
		}
		p.Warnings = append(p.Warnings, pw)
	}
	return p
}

// ListBaselineVersions pages with an offset token; versions are few.
func (s *baselineService) ListBaselineVersions(ctx context.Context, req *aftercastv1.ListBaselineVersionsRequest) (*aftercastv1.ListBaselineVersionsResponse, error) {
	pg, err := offsetPaging(req)
	if err != nil {
		return nil, err
	}
	vs, err := s.store.ListBaselineVersions(ctx, req.GetSeries(), req.GetModel())
	if err != nil {
		return nil, s.status(ctx, err)
	}
	resp := &aftercastv1.ListBaselineVersionsResponse{}
	var page []store.BaselineVersion
	page, resp.NextPageToken = pageOf(vs, pg)
	for _, v := range page {
		resp.Versions = append(resp.Versions, versionToProto(v))
	}
	return resp, nil
}

func pageSize(req int32, def, limit int) (int, error) {
	switch {
	case req < 0:
		return 0, invalidArg("page_size", "must not be negative")
	case req == 0:
		return def, nil
	}
	return min(int(req), limit), nil
}

// offsetPage is a page of a listing small enough to read whole and page in
// memory: the token's position is the offset of the page's first item.
type offsetPage struct {
	size, off int
	req       proto.Message
}

// offsetPaging reads a request's page size (default 100, at most 1000) and
// offset token.
func offsetPaging(req interface {
	proto.Message
	GetPageSize() int32
	GetPageToken() string
}) (offsetPage, error) {
	size, err := pageSize(req.GetPageSize(), 100, 1000)
	if err != nil {
		return offsetPage{}, err
	}
	pos, err := decodePage(req)
	if err != nil || pos == nil {
		return offsetPage{size: size, req: req}, err
	}
	off, n := binary.Uvarint(pos)
	if n != len(pos) || off > 1<<31 {
		return offsetPage{}, badToken()
	}
	return offsetPage{size, int(off), req}, nil
}

// pageOf returns the page of items and the token of the next page, "" on
// the last one.
func pageOf[T any](items []T, p offsetPage) ([]T, string) {
	lo, hi := min(p.off, len(items)), min(p.off+p.size, len(items))
	if hi < len(items) {
		return items[lo:hi], encodePage(binary.AppendUvarint(nil, uint64(hi)), p.req)
	}
	return items[lo:hi], ""
}

// GetBaseline returns a version with per-lead expectations, bands and
// limits for the requested window size.
func (s *baselineService) GetBaseline(ctx context.Context, req *aftercastv1.GetBaselineRequest) (*aftercastv1.GetBaselineResponse, error) {
	n := scoring.DriftWindow
	if req.WindowN != nil {
		n = int(req.GetWindowN())
	}
	if maxN := s.store.Limits().MaxWindow; n < 1 || n > maxN {
		return nil, invalidArg("window_n", fmt.Sprintf("want 1 to %d origins", maxN))
	}
	v, leads, pooled, err := s.drift.BaselineView(ctx, req.GetSeries(), req.GetModel(), int(req.GetVersion()), n)
	if err != nil {
		return nil, s.status(ctx, err)
	}
	se, err := s.store.GetSeries(ctx, req.GetSeries())
	if err != nil {
		return nil, s.status(ctx, err)
	}
	resp := &aftercastv1.GetBaselineResponse{Version: versionToProto(v), WindowN: int32(n), ErrorScale: errorScaleToProto(se.ErrorScale)}
	for _, l := range leads {
		resp.Leads = append(resp.Leads, leadViewToProto(l))
	}
	if pooled != nil {
		resp.Pooled = leadViewToProto(*pooled)
	}
	return resp, nil
}

func bandToProto(b scoring.Band) *aftercastv1.MetricBand {
	if !b.Usable() || b.Metric == "" {
		return nil
	}
	p := &aftercastv1.MetricBand{Expected: b.Expected, BandLower: b.Lower, BandUpper: b.Upper, AlarmUpper: b.AlarmUpper, KEff: b.KEff}
	if !math.IsInf(b.AlarmLower, -1) && !math.IsNaN(b.AlarmLower) {
		lo := b.AlarmLower
		p.AlarmLower = &lo
	}
	return p
}

func leadViewToProto(l drift.LeadView) *aftercastv1.BaselineLead {
	p := &aftercastv1.BaselineLead{Lead: int32(l.Lead), K: int32(l.K), KEff: l.KEff, Mae: bandToProto(l.MAE), Rmse: bandToProto(l.RMSE),
		Me: bandToProto(l.ME), Usable: l.Usable, UnusableReason: l.Reason, ErrorScaleExponent: l.Scale.B, ErrorScaleFloor: l.Scale.Phi}
	if l.Lead > 0 {
		p.Expected = metricsToProto(l.Expected)
	}
	return p
}
