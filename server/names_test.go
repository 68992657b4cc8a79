package server_test

import (
	"context"
	"testing"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/status"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// A series key or model with a NUL byte is valid UTF-8, so it reaches the
// server, but PostgreSQL cannot hold it as text: every RPC that names a
// series or a model must answer it as the unknown name it is (NotFound, or
// an empty list for a filter), never Internal. Found by FuzzPush.
func TestNamesPostgreSQLCannotHold(t *testing.T) {
	t.Parallel()
	srv, c := start(t, storetest.URL(t))
	ctx := ctxT(t)
	conn, err := grpc.NewClient(srv.GRPCAddr(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	if _, err := c.series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: "n", Step: "1h", Horizon: 2}}); err != nil {
		t.Fatal(err)
	}
	if _, err := c.forecast.PushForecasts(ctx, &aftercastv1.PushForecastsRequest{Forecasts: []*aftercastv1.Forecast{dense("n", "m", 0, 1, 2)}}); err != nil {
		t.Fatal(err)
	}
	bl, dr := aftercastv1.NewBaselineServiceClient(conn), aftercastv1.NewDriftServiceClient(conn)
	for _, names := range [][2]string{{"n\x00", "m"}, {"n", "m\x00"}} {
		key, model := names[0], names[1]
		calls := map[string]func(context.Context) error{
			"GetSeries": func(ctx context.Context) error {
				_, err := c.series.GetSeries(ctx, &aftercastv1.GetSeriesRequest{Key: key})
				return err
			},
			"ListModels": func(ctx context.Context) error {
				_, err := c.series.ListModels(ctx, &aftercastv1.ListModelsRequest{Series: key})
				return err
			},
			"ListForecasts": func(ctx context.Context) error {
				_, err := c.forecast.ListForecasts(ctx, &aftercastv1.ListForecastsRequest{Series: key, Model: model})
				return err
			},
			"ListActuals": func(ctx context.Context) error {
				_, err := c.actual.ListActuals(ctx, &aftercastv1.ListActualsRequest{Series: key})
				return err
			},
			"GetAccuracy": func(ctx context.Context) error {
				_, err := c.accuracy.GetAccuracy(ctx, &aftercastv1.GetAccuracyRequest{Series: key, Model: model})
				return err
			},
			"ListPairs": func(ctx context.Context) error {
				_, err := c.accuracy.ListPairs(ctx, &aftercastv1.ListPairsRequest{Series: key, Model: model})
				return err
			},
			"GetBaseline": func(ctx context.Context) error {
				_, err := bl.GetBaseline(ctx, &aftercastv1.GetBaselineRequest{Series: key, Model: model})
				return err
			},
			"ListBaselineVersions": func(ctx context.Context) error {
				_, err := bl.ListBaselineVersions(ctx, &aftercastv1.ListBaselineVersionsRequest{Series: key, Model: model})
				return err
			},
			"ListDriftStates": func(ctx context.Context) error {
				_, err := dr.ListDriftStates(ctx, &aftercastv1.ListDriftStatesRequest{Series: key, Model: model})
				return err
			},
			"ListDriftEvents": func(ctx context.Context) error {
				_, err := dr.ListDriftEvents(ctx, &aftercastv1.ListDriftEventsRequest{Series: key, Model: model})
				return err
			},
			"GetDriftHistory": func(ctx context.Context) error {
				_, err := dr.GetDriftHistory(ctx, &aftercastv1.GetDriftHistoryRequest{Series: key, Model: model})
				return err
			},
		}
		for name, call := range calls {
			switch code := status.Code(call(ctx)); code {
			case codes.OK, codes.NotFound, codes.InvalidArgument:
			default:
				t.Errorf("%s(series %q, model %q): %v, want NotFound, InvalidArgument or an empty answer", name, key, model, code)
			}
		}
	}
}
