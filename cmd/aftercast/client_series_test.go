package main

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/aftercast/aftercast/server"
)

// The error scale is set on create, shown by get and list, and changed
// with series update, which says that the production period is re-judged.
func TestSeriesErrorScale(t *testing.T) {
	t.Parallel()
	addr := startService(t, server.Config{})
	run := func(args ...string) (int, string, string) {
		t.Helper()
		return cliRun(append(args[:2:2], append([]string{"--addr", addr}, args[2:]...)...)...)
	}
	if code, out, errs := run("series", "create", "--step", "1h", "--horizon", "4", "--error-scale", "absolute", "es/a"); code != 0 {
		t.Fatal(out, errs)
	}
	if _, out, _ := run("series", "get", "es/a"); !strings.Contains(out, "error scale     absolute") {
		t.Errorf("series get:\n%s", out)
	}
	if _, out, _ := run("series", "get", "--format", "json", "es/a"); !strings.Contains(out, `"error_scale": "absolute"`) {
		t.Errorf("series get --format json:\n%s", out)
	}
	code, out, errs := run("series", "update", "--error-scale", "auto", "--decision-leads", "2-4", "es/a")
	if code != 0 || out != "series es/a: error scale auto, decision leads 2-4; its production period is being re-judged "+
		"(events with cause baseline; `aftercast drift` shows when it is done)\n" {
		t.Errorf("update: exit %d\n%s%s", code, out, errs)
	}
	if code, out, _ := run("series", "update", "--error-scale", "auto", "es/a"); code != 0 || !strings.Contains(out, "nothing changed") {
		t.Errorf("update to the same: exit %d\n%s", code, out)
	}
	if _, out, _ := run("series", "list"); !strings.Contains(out, "ERROR SCALE") || !strings.Contains(strings.Join(strings.Fields(out), " "), "2-4 auto") {
		t.Errorf("series list:\n%s", out)
	}
	if code, _, errs := run("series", "update", "--error-scale", "seasonal", "es/a"); code != 2 || !strings.Contains(errs, "want auto or absolute") {
		t.Errorf("a bad mode: exit %d\n%s", code, errs)
	}
	if code, _, errs := run("series", "update", "--decision-leads", "9", "es/a"); code != 1 || !strings.Contains(errs, "decision_leads") {
		t.Errorf("a lead beyond the horizon: exit %d\n%s", code, errs)
	}
	if code, _, errs := run("series", "update", "es/a"); code != 2 || !strings.Contains(errs, "give --error-scale or --decision-leads") {
		t.Errorf("nothing to update: exit %d\n%s", code, errs)
	}
}

// A backtest whose errors grow with a seasonal level (invented data): the
// import says the error scale grows with level and baseline show lists b̂
// and φ per lead; in absolute mode both say errors are judged as they are.
func TestBaselineReportsTheErrorScale(t *testing.T) {
	t.Parallel()
	addr := startService(t, server.Config{})
	r := rand.New(rand.NewPCG(3, 4))
	var b strings.Builder
	b.WriteString("series,origin_time,target_time,forecast,actual\n")
	t0 := time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)
	for k := range 365 {
		o := t0.AddDate(0, 0, k)
		l := 100 * (1 + 0.5*math.Cos(2*math.Pi*float64(k)/365))
		for _, key := range []string{"es/auto", "es/abs"} {
			fmt.Fprintf(&b, "%s,%s,%s,%g,%g\n", key, o.Format(time.RFC3339), o.AddDate(0, 0, 1).Format(time.RFC3339), l, l+5*l/100*r.NormFloat64())
		}
	}
	file := writeTemp(t, b.String())
	for _, c := range [][]string{{"es/auto", "auto"}, {"es/abs", "absolute"}} {
		if code, out, errs := cliRun("series", "create", "--addr", addr, "--step", "1d", "--horizon", "1", "--error-scale", c[1], c[0]); code != 0 {
			t.Fatal(out, errs)
		}
	}
	code, out, errs := cliRun("baseline", "import", "--addr", addr, "--model", "m", file)
	if code != 0 || !strings.Contains(out, "es/auto: version 1 created\n  error scale grows with level: b̂ = ") ||
		!strings.Contains(out, "es/abs: version 1 created\n  error scale absolute: errors are judged as they are") {
		t.Fatalf("import: exit %d\n%s%s", code, out, errs)
	}
	_, out, _ = cliRun("baseline", "show", "--addr", addr, "--series", "es/auto", "--model", "m", "--format", "json")
	var doc struct {
		ErrorScale string `json:"error_scale"`
		Leads      []struct {
			B   float64 `json:"error_scale_exponent"`
			Phi float64 `json:"error_scale_floor"`
		} `json:"leads"`
	}
	if err := json.Unmarshal([]byte(out), &doc); err != nil || doc.ErrorScale != "auto" || len(doc.Leads) != 1 ||
		doc.Leads[0].B < 0.5 || doc.Leads[0].B > 1 || math.Abs(doc.Leads[0].Phi-5) > 0.01 {
		t.Errorf("baseline show --format json: %v\n%s", err, out)
	}
	if _, out, _ := cliRun("baseline", "show", "--addr", addr, "--series", "es/auto", "--model", "m"); !strings.Contains(out, "B̂") ||
		!strings.Contains(out, "error scale auto:") {
		t.Errorf("baseline show:\n%s", out)
	}

	// Ten production days in winter (level about 150): accuracy sets the
	// lead's MAE beside the expectation scaled to that level.
	var fc, ac strings.Builder
	fc.WriteString("series,origin_time,target_time,forecast\n")
	ac.WriteString("series,time,value\n")
	for k := 365; k < 375; k++ {
		o := t0.AddDate(0, 0, k)
		l := 100 * (1 + 0.5*math.Cos(2*math.Pi*float64(k)/365))
		fmt.Fprintf(&fc, "es/auto,%s,%s,%g\n", o.Format(time.RFC3339), o.AddDate(0, 0, 1).Format(time.RFC3339), l)
		fmt.Fprintf(&ac, "es/auto,%s,%g\n", o.AddDate(0, 0, 1).Format(time.RFC3339), l+5*l/100*r.NormFloat64())
	}
	for _, push := range [][]string{{"push", "forecasts", "--addr", addr, "--model", "m", writeTemp(t, fc.String())},
		{"push", "actuals", "--addr", addr, writeTemp(t, ac.String())}} {
		if code, out, errs := cliRun(push...); code != 0 {
			t.Fatal(out, errs)
		}
	}
	_, out, _ = cliRun("accuracy", "--addr", addr, "--series", "es/auto", "--model", "m")
	i := strings.Index(out, "against baseline version 1")
	fields := strings.Fields(out[max(i, 0):])
	j := slices.Index(fields, "STATE")
	if i < 0 || j < 0 || len(fields) < j+10 {
		t.Fatalf("accuracy has no comparison with the baseline:\n%s", out)
	}
	// LEAD N MAE EXPECTED [lo, hi] ALARM BACKTEST LEVEL STATE
	row := fields[j+1:]
	if scale, err := strconv.ParseFloat(row[8], 64); err != nil || scale < 140 || scale > 150 || row[0] != "1" || row[1] != "10" {
		t.Errorf("accuracy's baseline row %q: want lead 1, 10 origins, a level scale near the winter level 148", row)
	}
}
