package main

import (
	"bytes"
	"context"
	"strings"
	"testing"
	"time"

	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// Times in CSV files, at both ends of the stored range and just outside,
// and off the series' grid: the rows outside are refused with their line
// and the reason, the rows inside are stored exactly.
func TestPushedTimesAtTheRangeEnds(t *testing.T) {
	t.Parallel()
	srv, err := server.New(server.Config{Listen: "127.0.0.1:0", MetricsListen: "-", DatabaseURL: storetest.URL(t)})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	if err := srv.Start(ctx); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = srv.Stop(context.Background()) })
	addr := "--addr=" + srv.GRPCAddr()
	cli := func(args ...string) (int, string) {
		var out, errb bytes.Buffer
		code := run(args, &out, &errb)
		return code, out.String() + errb.String()
	}
	if code, out := cli("series", "create", addr, "--step", "1h", "--horizon", "1", "edge"); code != 0 {
		t.Fatal(out)
	}
	file := writeTemp(t, "series,time,value\n"+
		"edge,1899-12-31T23:00:00Z,1\n"+ // line 2: just before
		"edge,1900-01-01T00:00:00Z,2\n"+ // line 3: the first instant
		"edge,2199-12-31T23:00:00Z,3\n"+ // line 4: the last hour
		"edge,2200-01-01T00:00:00Z,4\n"+ // line 5: just after
		"edge,9999-01-01T00:00:00Z,5\n"+ // line 6
		"edge,2026-01-01T00:30:00+00:00,6\n") // line 7: off the grid
	code, out := cli("push", "actuals", addr, file)
	if code != 1 {
		t.Errorf("push with refused rows: exit %d, want 1:\n%s", code, out)
	}
	for _, want := range []string{"accepted 2", "rejected 4",
		"line 2: 1899-12-31T23:00:00Z is outside the accepted range [1900-01-01T00:00:00Z, 2200-01-01T00:00:00Z)",
		"line 5: 2200-01-01T00:00:00Z is outside the accepted range",
		"line 6: 9999-01-01T00:00:00Z is outside the accepted range",
		"line 7: 2026-01-01T00:30:00Z is not on the series' grid"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	_, as, err := srv.Store().Freshness(ctx)
	if err != nil || len(as) != 1 || !as[0].LastTime.Equal(time.Date(2199, 12, 31, 23, 0, 0, 0, time.UTC)) {
		t.Errorf("newest actual stored: %+v %v, want 2199-12-31T23:00:00Z", as, err)
	}
}
