package server

import (
	"context"
	"runtime/debug"

	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server/store"
)

// Version is the running build's version: the main module's version, with
// the VCS revision when the build recorded one; "(devel)" for a plain
// `go build` in a checkout built without VCS stamping.
func Version() string {
	bi, ok := debug.ReadBuildInfo()
	if !ok {
		return "(unknown)"
	}
	v := bi.Main.Version
	if v == "" {
		v = "(devel)"
	}
	var rev, dirty string
	for _, s := range bi.Settings {
		switch s.Key {
		case "vcs.revision":
			rev = s.Value
		case "vcs.modified":
			if s.Value == "true" {
				dirty = "+dirty"
			}
		}
	}
	if rev != "" {
		v += " " + rev[:min(12, len(rev))] + dirty
	}
	return v
}

type infoService struct {
	*api
	maxMessageBytes int
	aftercastv1.UnimplementedInfoServiceServer
}

func (s *infoService) GetServerInfo(context.Context, *aftercastv1.GetServerInfoRequest) (*aftercastv1.GetServerInfoResponse, error) {
	l := s.store.Limits()
	return &aftercastv1.GetServerInfoResponse{Version: Version(), MaxBatch: int32(l.MaxBatch), MaxMessageBytes: int64(s.maxMessageBytes),
		MaxHorizon: int32(l.MaxHorizon), MaxPageSize: int32(l.MaxPageSize), MaxWindow: int32(l.MaxWindow),
		EarliestTime: timestamppb.New(store.MinTime), LatestTime: timestamppb.New(store.MaxTime)}, nil
}
