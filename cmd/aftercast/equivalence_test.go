package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/store/storetest"
)

func TestMain(m *testing.M) { os.Exit(storetest.Main(m)) }

// Issue 3's promise, end to end through the CLI and a real service: pushing
// the same files twice, in a shuffled order, and revising actuals leaves
// `aftercast accuracy` equal to `aftercast evaluate` on the final data.
func TestAccuracyEqualsEvaluateOnFinalData(t *testing.T) {
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
	cli := func(args ...string) string {
		t.Helper()
		var out, errb bytes.Buffer
		if code := run(args, &out, &errb); code != 0 {
			t.Fatalf("aftercast %s: exit %d: %s", strings.Join(args, " "), code, errb.String())
		}
		return out.String()
	}
	// A daily series whose values are stamped 05:00 local: its grid starts there.
	cli("series", "create", addr, "--step", "1d", "--horizon", "4", "--tz", "Europe/Brussels", "--grid-anchor", "2000-01-01T05:00:00+01:00", "eq/daily")

	dir := t.TempDir()
	r := rand.New(rand.NewPCG(11, 12))
	bru, _ := time.LoadLocation("Europe/Brussels")
	t0 := time.Date(2026, 3, 20, 5, 0, 0, 0, bru) // across the spring DST change
	type row struct {
		origin, target time.Time
		f              float64
	}
	var rows []row
	actual := map[time.Time]float64{}
	for k := range 20 {
		o := t0.AddDate(0, 0, k)
		for h := 1; h <= 4; h++ {
			tg := o.AddDate(0, 0, h)
			rows = append(rows, row{o, tg, math.Round(100*(50+r.NormFloat64()*5)) / 100})
			actual[tg] = math.Round(100*(50+r.NormFloat64()*4)) / 100
		}
	}
	write := func(name, header string, lines []string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(header+"\n"+strings.Join(lines, "\n")+"\n"), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	var fl []string
	for _, x := range rows {
		fl = append(fl, fmt.Sprintf("eq/daily,%s,%s,%v", x.origin.Format(time.RFC3339), x.target.Format(time.RFC3339), x.f))
	}
	r.Shuffle(len(fl), func(i, j int) { fl[i], fl[j] = fl[j], fl[i] })
	forecasts := write("f.csv", "series,origin_time,target_time,forecast", fl)
	var al, revised []string
	for tg, v := range actual {
		al = append(al, fmt.Sprintf("eq/daily,%s,%v", tg.UTC().Format(time.RFC3339), v+3)) // first values, revised below
	}
	for tg, v := range actual {
		revised = append(revised, fmt.Sprintf("eq/daily,%s,%v", tg.Format(time.RFC3339), v))
	}
	actualsFirst := write("a1.csv", "series,time,value", al)
	actualsFinal := write("a2.csv", "series,time,value", revised)

	cli("push", "forecasts", addr, "--model", "m", forecasts)
	if out := cli("push", "forecasts", addr, "--model", "m", forecasts); !strings.Contains(out, "duplicate") {
		t.Errorf("second push: %q, want duplicates reported", out)
	}
	cli("push", "actuals", addr, actualsFirst)
	cli("push", "actuals", addr, actualsFinal) // revisions
	cli("push", "actuals", addr, actualsFinal) // duplicates

	var final []string
	for _, x := range rows {
		final = append(final, fmt.Sprintf("eq/daily,m,%s,%s,%v,%v", x.origin.Format(time.RFC3339), x.target.Format(time.RFC3339), x.f, actual[x.target]))
	}
	pairs := write("final.csv", "series,model,origin_time,target_time,forecast,actual", final)

	live := cli("accuracy", addr, "--series", "eq/daily", "--model", "m", "--format", "json")
	offline := cli("evaluate", "--step", "1d", "--tz", "Europe/Brussels", "--format", "json", pairs)
	var a, b any
	if err := json.Unmarshal([]byte(live), &a); err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal([]byte(offline), &b); err != nil {
		t.Fatal(err)
	}
	// The live accuracy counts late pairs beside the metrics; on this
	// data, pushed before its actuals, there are none.
	if late := dropLate(a); late != 0 {
		t.Errorf("accuracy counts %v late pairs, want 0", late)
	}
	if diff := jsonDiff("", a, b); diff != "" {
		t.Errorf("accuracy differs from evaluate on the final data: %s\naccuracy: %s\nevaluate: %s", diff, live, offline)
	}
}

// dropLate removes the "late" counts from accuracy JSON, which offline
// evaluation does not have, and returns their sum; -1 where one is missing.
func dropLate(v any) float64 {
	var sum float64
	take := func(m map[string]any) {
		n, ok := m["late"].(float64)
		if !ok {
			sum = math.Inf(-1)
		}
		sum += n
		delete(m, "late")
	}
	for _, r := range v.(map[string]any)["results"].([]any) {
		r := r.(map[string]any)
		take(r["overall"].(map[string]any))
		for _, l := range r["leads"].([]any) {
			take(l.(map[string]any))
		}
	}
	return max(sum, -1)
}

// jsonDiff compares decoded JSON, numbers to 1e-12 relative (the service
// and evaluate add the same pairs in different orders).
func jsonDiff(path string, a, b any) string {
	switch x := a.(type) {
	case map[string]any:
		y, ok := b.(map[string]any)
		if !ok || len(x) != len(y) {
			return path + ": object shapes differ"
		}
		for k := range x {
			if d := jsonDiff(path+"."+k, x[k], y[k]); d != "" {
				return d
			}
		}
	case []any:
		y, ok := b.([]any)
		if !ok || len(x) != len(y) {
			return path + ": array lengths differ"
		}
		for i := range x {
			if d := jsonDiff(fmt.Sprintf("%s[%d]", path, i), x[i], y[i]); d != "" {
				return d
			}
		}
	case float64:
		y, ok := b.(float64)
		if !ok || math.Abs(x-y) > 1e-12*math.Max(math.Abs(x), math.Abs(y)) {
			return fmt.Sprintf("%s: %v vs %v", path, a, b)
		}
	default:
		if a != b {
			return fmt.Sprintf("%s: %v vs %v", path, a, b)
		}
	}
	return ""
}
