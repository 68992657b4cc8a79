package server

import (
	"context"
	"fmt"
	"log/slog"
	"strings"

	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/drift"
	"github.com/aftercast/aftercast/server/store"
)

// api holds what every service implementation shares.
type api struct {
	store *store.Store
	drift *drift.Evaluator
	log   *slog.Logger
	m     *metrics
	// stopping is closed when the server starts shutting down, to end
	// long-lived streams.
	stopping chan struct{}
	// dbLost is called when a request finds the database gone.
	dbLost func()
}

func (a *api) metrics() *metrics { return a.m }

func (a *api) status(ctx context.Context, err error) error {
	if a.dbLost != nil && dbUnavailable(err) {
		a.dbLost()
	}
	return toStatus(ctx, a.log, err)
}

type seriesService struct {
	*api
	aftercastv1.UnimplementedSeriesServiceServer
}

func seriesToProto(s store.Series) *aftercastv1.Series {
	leads := make([]int32, len(s.DecisionLeads))
	for i, h := range s.DecisionLeads {
		leads[i] = int32(h)
	}
	return &aftercastv1.Series{Key: s.Key, Step: s.Step, Horizon: int32(s.Horizon), Season: int32(s.Season),
		Unit: s.Unit, TimeZone: s.TimeZone, DecisionLeads: leads, CreateTime: timestamppb.New(s.CreatedAt),
		GridAnchorTime: timestamppb.New(s.GridAnchor), ErrorScale: errorScaleToProto(s.ErrorScale)}
}

func errorScaleToProto(m scoring.ScaleMode) aftercastv1.ErrorScale {
	if m == scoring.ScaleAbsolute {
		return aftercastv1.ErrorScale_ERROR_SCALE_ABSOLUTE
	}
	return aftercastv1.ErrorScale_ERROR_SCALE_AUTO
}

// errorScaleFromProto reads a mode; unspecified is "" (the default).
func errorScaleFromProto(e aftercastv1.ErrorScale) (scoring.ScaleMode, error) {
	switch e {
	case aftercastv1.ErrorScale_ERROR_SCALE_UNSPECIFIED:
		return "", nil
	case aftercastv1.ErrorScale_ERROR_SCALE_AUTO:
		return scoring.ScaleAuto, nil
	case aftercastv1.ErrorScale_ERROR_SCALE_ABSOLUTE:
		return scoring.ScaleAbsolute, nil
	}
	return "", invalidArg("series.error_scale", fmt.Sprintf("unknown value %d", e))
}

func leadsFromProto(ls []int32) []int {
	out := make([]int, len(ls))
	for i, h := range ls {
		out[i] = int(h)
	}
	return out
}

func (s *seriesService) CreateSeries(ctx context.Context, req *aftercastv1.CreateSeriesRequest) (*aftercastv1.CreateSeriesResponse, error) {
	p := req.GetSeries()
	if p == nil {
		return nil, invalidArg("series", "missing")
	}
	mode, err := errorScaleFromProto(p.GetErrorScale())
	if err != nil {
		return nil, err
	}
	in := store.Series{Key: p.GetKey(), Step: p.GetStep(), Horizon: int(p.GetHorizon()),
		Season: int(p.GetSeason()), Unit: p.GetUnit(), TimeZone: p.GetTimeZone(), DecisionLeads: leadsFromProto(p.GetDecisionLeads()),
		ErrorScale: mode}
	if a := p.GetGridAnchorTime(); a != nil {
		in.GridAnchor = a.AsTime()
	}
	se, created, err := s.store.CreateSeries(ctx, in)
	if err != nil {
		return nil, s.status(ctx, err)
	}
	return &aftercastv1.CreateSeriesResponse{Series: seriesToProto(se), Created: created}, nil
}

// UpdateSeries changes the error scale or decision leads; the store marks
// the series for a replay, which the evaluator is woken to run.
func (s *seriesService) UpdateSeries(ctx context.Context, req *aftercastv1.UpdateSeriesRequest) (*aftercastv1.UpdateSeriesResponse, error) {
	p := req.GetSeries()
	if !store.ValidKey(p.GetKey()) {
		return nil, invalidArg("series.key", nameRule)
	}
	if len(req.GetUpdateMask().GetPaths()) == 0 {
		return nil, invalidArg("update_mask", `name the fields to change: "error_scale", "decision_leads"`)
	}
	var u store.SeriesUpdate
	for _, path := range req.GetUpdateMask().GetPaths() {
		switch path {
		case "error_scale":
			mode, err := errorScaleFromProto(p.GetErrorScale())
			if err != nil {
				return nil, err
			}
			if mode == "" {
				return nil, invalidArg("series.error_scale", "unspecified: want ERROR_SCALE_AUTO or ERROR_SCALE_ABSOLUTE")
			}
			u.ErrorScale = &mode
		case "decision_leads":
			leads := leadsFromProto(p.GetDecisionLeads())
			u.DecisionLeads = &leads
		default:
			return nil, invalidArg("update_mask", fmt.Sprintf("%q cannot be changed: only error_scale and decision_leads", path))
		}
	}
	se, changed, err := s.store.UpdateSeries(ctx, p.GetKey(), u)
	if err != nil {
		return nil, s.status(ctx, err)
	}
	if changed {
		s.drift.Wake()
	}
	return &aftercastv1.UpdateSeriesResponse{Series: seriesToProto(se), Changed: changed}, nil
}

func (s *seriesService) GetSeries(ctx context.Context, req *aftercastv1.GetSeriesRequest) (*aftercastv1.GetSeriesResponse, error) {
	se, err := s.store.GetSeries(ctx, req.GetKey())
	if err != nil {
		return nil, s.status(ctx, err)
	}
	return &aftercastv1.GetSeriesResponse{Series: seriesToProto(se)}, nil
}

// ListSeries pages by key; the page token's position is the last key of
// the page.
func (s *seriesService) ListSeries(ctx context.Context, req *aftercastv1.ListSeriesRequest) (*aftercastv1.ListSeriesResponse, error) {
	size, err := pageSize(req.GetPageSize(), 100, 1000)
	if err != nil {
		return nil, err
	}
	pos, err := decodePage(req)
	if err != nil {
		return nil, err
	}
	after := string(pos)
	if after != "" && !store.ValidKey(after) {
		return nil, badToken()
	}
	prefix := req.GetKeyPrefix()
	if after < prefix {
		after = prefix
	}
	var out []*aftercastv1.Series
	next := ""
	for len(out) < size {
		list, err := s.store.ListSeries(ctx, after, size+1-len(out))
		if err != nil {
			return nil, s.status(ctx, err)
		}
		for _, se := range list {
			if !strings.HasPrefix(se.Key, prefix) {
				return &aftercastv1.ListSeriesResponse{Series: out}, nil
			}
			if len(out) == size {
				next = out[len(out)-1].GetKey()
				break
			}
			out = append(out, seriesToProto(se))
		}
		if next != "" || len(list) == 0 {
			break
		}
		after = list[len(list)-1].Key
	}
	// The prefix itself may be a key: ListSeries starts after its argument.
	if req.GetPageToken() == "" && prefix != "" {
		if se, err := s.store.GetSeries(ctx, prefix); err == nil && (len(out) == 0 || out[0].GetKey() != prefix) {
			out = append([]*aftercastv1.Series{seriesToProto(se)}, out...)
			if len(out) > size {
				out = out[:size]
				next = out[size-1].GetKey()
			}
		}
	}
	resp := &aftercastv1.ListSeriesResponse{Series: out}
	if next != "" {
		resp.NextPageToken = encodePage([]byte(next), req)
	}
	return resp, nil
}
