package main

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/push"
	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/store/storetest"
	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// storedServer starts the service on a database of its own and returns
// the --addr flag for it.
func storedServer(t *testing.T) string {
	t.Helper()
	srv, err := server.New(server.Config{Listen: "127.0.0.1:0", MetricsListen: "-", DatabaseURL: storetest.URL(t)})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	t.Cleanup(cancel)
	if err := srv.Start(ctx); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = srv.Stop(context.Background()) })
	return "--addr=" + srv.GRPCAddr()
}

// storedCLI runs aftercast commands, failing the test when one fails.
func storedCLI(t *testing.T, args ...string) string {
	t.Helper()
	var out, errb bytes.Buffer
	if code := run(args, &out, &errb); code != 0 {
		t.Fatalf("aftercast %s: exit %d:\n%s%s", strings.Join(args, " "), code, out.String(), errb.String())
	}
	return out.String()
}

// stored runs `aftercast stored ARGS` (runStored, until main.go lists it).
func stored(args ...string) (stdout, stderr string, err error) {
	var out, errb bytes.Buffer
	err = runStored(args, &out, &errb)
	return out.String(), errb.String(), err
}

// readCSV reads a whole CSV output.
func readCSV(t *testing.T, s string) [][]string {
	t.Helper()
	rows, err := csv.NewReader(strings.NewReader(s)).ReadAll()
	if err != nil {
		t.Fatalf("output is not CSV: %v\n%s", err, s)
	}
	return rows
}

// window is when a push ran, to the microsecond the service stores.
type window struct{ from, to time.Time }

func pushed(t *testing.T, args ...string) window {
	t.Helper()
	w := window{from: time.Now().Truncate(time.Microsecond)}
	storedCLI(t, args...)
	w.to = time.Now()
	return w
}

// checkIn checks that the RFC 3339 time s lies in w.
func (w window) checkIn(t *testing.T, what, s string) {
	t.Helper()
	got, err := time.Parse(time.RFC3339Nano, s)
	if err != nil || got.Before(w.from) || got.After(w.to) || got.Location() != time.UTC {
		t.Errorf("%s = %q, want a UTC time in [%s, %s]", what, s, w.from.Format(time.RFC3339Nano), w.to.Format(time.RFC3339Nano))
	}
}

// What `push` stored comes back from `stored` exactly — the values in use,
// a late value, a late re-issue beside the value it did not replace, a
// revised actual — in the columns push reads, with numbers that read back
// bit for bit; pushing the output again changes nothing.
func TestStoredReadsBackWhatWasPushed(t *testing.T) {
	t.Parallel()
	addr := storedServer(t)
	storedCLI(t, "series", "create", addr, "--step", "1h", "--horizon", "3", "rb/h")

	// Origin 0 has all three leads and an issue time; origin 1h only lead
	// 3. The numbers need all 17 digits, or are subnormal or tiny.
	f1 := pushed(t, "push", "forecasts", addr, "--model", "m", writeTemp(t, "series,origin_time,target_time,forecast,issued_at\n"+
		"rb/h,2026-01-01T01:00:00+01:00,2026-01-01T01:00:00Z,10,2025-12-31T23:30:00.123456Z\n"+
		"rb/h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,0.30000000000000004,2025-12-31T23:30:00.123456Z\n"+
		"rb/h,2026-01-01T00:00:00Z,2026-01-01T03:00:00Z,1e-320,2025-12-31T23:30:00.123456Z\n"+
		"rb/h,2026-01-01T01:00:00Z,2026-01-01T04:00:00Z,-123456789.98765432,\n"))
	a1 := pushed(t, "push", "actuals", addr, writeTemp(t, "series,time,value\n"+
		"rb/h,2026-01-01T01:00:00Z,12\nrb/h,2026-01-01T02:00:00Z,1e21\n"))
	a2 := pushed(t, "push", "actuals", addr, writeTemp(t, "series,time,value\nrb/h,2026-01-01T01:00:00Z,13.25\n")) // revised
	// Lead 1 of origin 0 again, after its actual: a late re-issue beside
	// 10. Lead 1 of origin 1h, first pushed after its actual: late.
	f2 := pushed(t, "push", "forecasts", addr, "--model", "m", writeTemp(t, "series,origin_time,target_time,forecast\n"+
		"rb/h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,11\n"+
		"rb/h,2026-01-01T01:00:00Z,2026-01-01T02:00:00Z,5\n"))
	storedCLI(t, "push", "forecasts", addr, "--model", "other", writeTemp(t, "series,origin_time,target_time,forecast\n"+
		"rb/h,2026-01-01T05:00:00Z,2026-01-01T06:00:00Z,1\n"))

	fout, ferr, err := stored("forecasts", addr, "--series", "rb/h", "--model", "m")
	if err != nil || ferr != "" {
		t.Fatalf("stored forecasts: %v %s", err, ferr)
	}
	rows := readCSV(t, fout)
	if !slices.Equal(rows[0][:len(push.ForecastColumns)], push.ForecastColumns) || rows[0][len(push.ForecastColumns)] != "issued_at" {
		t.Errorf("header %v does not start with the columns of push forecasts %v and issued_at", rows[0], push.ForecastColumns)
	}
	if want := "series,origin_time,target_time,forecast,issued_at,lead,late,late_reissue,first_received_at,received_at"; strings.Join(rows[0], ",") != want {
		t.Errorf("header %v, want %s", rows[0], want)
	}
	// The columns up to late_reissue, exactly; the receive times by
	// window.
	const issued0 = "2025-12-31T23:30:00.123456Z"
	want := [][]string{
		{"rb/h", "2026-01-01T00:00:00Z", "2026-01-01T01:00:00Z", "10", issued0, "1", "false", "11"},
		{"rb/h", "2026-01-01T00:00:00Z", "2026-01-01T02:00:00Z", "0.30000000000000004", issued0, "2", "false", ""},
		{"rb/h", "2026-01-01T00:00:00Z", "2026-01-01T03:00:00Z", "1e-320", issued0, "3", "false", ""},
		{"rb/h", "2026-01-01T01:00:00Z", "2026-01-01T02:00:00Z", "5", "", "1", "true", ""},
		{"rb/h", "2026-01-01T01:00:00Z", "2026-01-01T04:00:00Z", "-1.2345678998765431e+08", "", "3", "false", ""}, // the shortest form of -123456789.98765432
	}
	if len(rows) != 1+len(want) {
		t.Fatalf("stored forecasts: %d rows, want %d:\n%s", len(rows)-1, len(want), fout)
	}
	pushes := window{f1.from, f2.to}
	for i, w := range want {
		got := rows[1+i]
		if w[4] == "" { // no issue time sent: a receive time stands in
			w[4] = got[4]
			pushes.checkIn(t, fmt.Sprintf("row %d issued_at", i+1), got[4])
		}
		if !slices.Equal(got[:8], w) {
			t.Errorf("row %d: %q\nwant     %q", i+1, got[:8], w)
		}
	}
	for _, i := range []int{1, 2, 3} { // origin 0: pushed first by f1, last by f2 (the late re-issue)
		f1.checkIn(t, fmt.Sprintf("row %d first_received_at", i), rows[i][8])
		f2.checkIn(t, fmt.Sprintf("row %d received_at", i), rows[i][9])
	}
	for _, i := range []int{4, 5} { // origin 1h: first by f1, last by f2 (the late value)
		f1.checkIn(t, fmt.Sprintf("row %d first_received_at", i), rows[i][8])
		f2.checkIn(t, fmt.Sprintf("row %d received_at", i), rows[i][9])
	}
	if v, _ := strconv.ParseFloat(rows[3][3], 64); v != 1e-320 {
		t.Errorf("subnormal read back as %v", v)
	}

	aout, aerr, err := stored("actuals", addr, "--series", "rb/h")
	if err != nil || aerr != "" {
		t.Fatalf("stored actuals: %v %s", err, aerr)
	}
	arows := readCSV(t, aout)
	if want := "series,time,value,revisions,first_received_at,received_at"; strings.Join(arows[0], ",") != want ||
		!slices.Equal(arows[0][:len(push.ActualColumns)], push.ActualColumns) {
		t.Errorf("header %v, want %s", arows[0], want)
	}
	wantA := [][]string{
		{"rb/h", "2026-01-01T01:00:00Z", "13.25", "1"},
		{"rb/h", "2026-01-01T02:00:00Z", "1e+21", "0"},
	}
	if len(arows) != 3 {
		t.Fatalf("stored actuals: %d rows, want 2:\n%s", len(arows)-1, aout)
	}
	for i, w := range wantA {
		if got := arows[1+i]; !slices.Equal(got[:4], w) {
			t.Errorf("actual %d: %q, want %q", i+1, got[:4], w)
		}
	}
	a1.checkIn(t, "revised actual first_received_at", arows[1][4])
	a2.checkIn(t, "revised actual received_at", arows[1][5])
	a1.checkIn(t, "actual 2 first_received_at", arows[2][4])
	a1.checkIn(t, "actual 2 received_at", arows[2][5])

	// Pushed again as they are, both outputs are duplicates through and
	// through, and reading back gives the same bytes.
	if out := storedCLI(t, "push", "forecasts", addr, "--model", "m", writeTemp(t, fout)); !strings.Contains(out,
		"sent 5 points in 2 vectors for model m\naccepted 0, duplicate 5, late 0, rejected 0\n") {
		t.Errorf("stored forecasts pushed again:\n%s", out)
	}
	if out := storedCLI(t, "push", "actuals", addr, writeTemp(t, aout)); !strings.Contains(out,
		"sent 2 actuals\naccepted 0, duplicate 2, revised 0, rejected 0\n") {
		t.Errorf("stored actuals pushed again:\n%s", out)
	}
	if again, _, err := stored("forecasts", addr, "--series", "rb/h", "--model", "m"); err != nil || again != fout {
		t.Errorf("forecasts after pushing them again (%v):\n%s\nwant as before\n%s", err, again, fout)
	}
	if again, _, err := stored("actuals", addr, "--series", "rb/h"); err != nil || again != aout {
		t.Errorf("actuals after pushing them again (%v):\n%s\nwant as before\n%s", err, again, aout)
	}

	t.Run("json", func(t *testing.T) {
		t.Parallel()
		out, _, err := stored("forecasts", addr, "--series", "rb/h", "--model", "m", "--format", "json")
		if err != nil {
			t.Fatal(err)
		}
		var fj struct {
			Forecasts []storedForecastJSON `json:"forecasts"`
		}
		dec := json.NewDecoder(strings.NewReader(out))
		dec.DisallowUnknownFields()
		if err := dec.Decode(&fj); err != nil {
			t.Fatalf("stored forecasts --format json does not decode: %v\n%s", err, out)
		}
		if len(fj.Forecasts) != 2 {
			t.Fatalf("%d vectors, want 2:\n%s", len(fj.Forecasts), out)
		}
		// The same as the CSV, row by row.
		var i int
		for _, v := range fj.Forecasts {
			if v.Series != "rb/h" || v.Model != "m" {
				t.Errorf("vector %s names %s, %s", v.OriginTime, v.Series, v.Model)
			}
			for _, p := range v.Points {
				i++
				reissue := ""
				if p.LateReissue != nil {
					reissue = storedNumber(*p.LateReissue)
				}
				got := []string{"rb/h", v.OriginTime, p.TargetTime, storedNumber(p.Forecast), v.IssuedAt, fmt.Sprint(p.Lead),
					fmt.Sprint(p.Late), reissue, v.FirstReceivedAt, v.ReceivedAt}
				if !slices.Equal(got, rows[i]) {
					t.Errorf("JSON point %d: %q\nCSV row:     %q", i, got, rows[i])
				}
			}
		}
		if i != 5 || !strings.Contains(out, `"late_reissue":null`) || !strings.Contains(out, `"late_reissue":11`) {
			t.Errorf("%d points; want 5, late_reissue null and 11:\n%s", i, out)
		}

		out, _, err = stored("actuals", addr, "--series", "rb/h", "--format", "json")
		if err != nil {
			t.Fatal(err)
		}
		var aj struct {
			Actuals []storedActualJSON `json:"actuals"`
		}
		dec = json.NewDecoder(strings.NewReader(out))
		dec.DisallowUnknownFields()
		if err := dec.Decode(&aj); err != nil {
			t.Fatalf("stored actuals --format json does not decode: %v\n%s", err, out)
		}
		for i, a := range aj.Actuals {
			got := []string{a.Series, a.Time, storedNumber(a.Value), fmt.Sprint(a.Revisions), a.FirstReceivedAt, a.ReceivedAt}
			if !slices.Equal(got, arows[1+i]) {
				t.Errorf("JSON actual %d: %q\nCSV row:     %q", i+1, got, arows[1+i])
			}
		}
		if len(aj.Actuals) != 2 {
			t.Errorf("%d actuals, want 2", len(aj.Actuals))
		}

		out, _, err = stored("forecasts", addr, "--series", "rb/h", "--model", "m", "--format", "json", "--from", "2027-01-01T00:00:00Z")
		if err != nil || out != "{\"forecasts\":[]}\n" {
			t.Errorf("nothing in the range: %q %v", out, err)
		}
	})

	t.Run("ranges", func(t *testing.T) {
		t.Parallel()
		out, _, err := stored("forecasts", addr, "--series", "rb/h", "--model", "m", "--from", "2026-01-01T01:00:00+00:00")
		if got := readCSV(t, out); err != nil || len(got) != 3 || !slices.EqualFunc(got[1:], rows[4:], slices.Equal) {
			t.Errorf("--from the second origin (%v):\n%s", err, out)
		}
		out, _, err = stored("forecasts", addr, "--series", "rb/h", "--model", "m", "--to", "2026-01-01T02:00:00+01:00")
		if got := readCSV(t, out); err != nil || len(got) != 4 || !slices.EqualFunc(got[1:], rows[1:4], slices.Equal) {
			t.Errorf("--to the second origin (%v):\n%s", err, out)
		}
		out, _, err = stored("actuals", addr, "--series", "rb/h", "--from", "2026-01-01T01:30:00Z", "--to", "2026-01-01T03:00:00Z")
		if got := readCSV(t, out); err != nil || len(got) != 2 || !slices.Equal(got[1], arows[2]) {
			t.Errorf("actuals in [01:30, 03:00) (%v):\n%s", err, out)
		}
		out, errs, err := stored("actuals", addr, "--series", "rb/h", "--from", "2027-01-01T00:00:00Z")
		if err != nil || out != strings.Join(storedActualColumns, ",")+"\n" ||
			errs != "aftercast stored actuals: no actuals stored for series rb/h in the range\n" {
			t.Errorf("no actuals in the range: %v, stdout %q, stderr %q", err, out, errs)
		}
		out, errs, err = stored("forecasts", addr, "--series", "rb/h", "--model", "nope")
		if err != nil || out != strings.Join(storedForecastColumns, ",")+"\n" ||
			errs != "aftercast stored forecasts: no forecasts of model nope stored for series rb/h\n" {
			t.Errorf("a model without forecasts: %v, stdout %q, stderr %q", err, out, errs)
		}
	})

	t.Run("models", func(t *testing.T) {
		t.Parallel()
		var out, errb bytes.Buffer
		if err := seriesModels([]string{addr, "rb/h"}, &out, &errb); err != nil {
			t.Fatal(err)
		}
		if want := "MODEL  LAST ORIGIN           BASELINE\n" +
			"m      2026-01-01T01:00:00Z  -\n" +
			"other  2026-01-01T05:00:00Z  -\n"; out.String() != want {
			t.Errorf("series models:\n%s\nwant\n%s", out.String(), want)
		}
		out.Reset()
		if err := seriesModels([]string{"--format", "json", "rb/h", addr}, &out, &errb); err != nil {
			t.Fatal(err)
		}
		var mj struct {
			Series string `json:"series"`
			Models []struct {
				Model           string `json:"model"`
				LastOriginTime  string `json:"last_origin_time"`
				BaselineVersion int32  `json:"baseline_version"`
			} `json:"models"`
		}
		dec := json.NewDecoder(&out)
		dec.DisallowUnknownFields()
		if err := dec.Decode(&mj); err != nil || mj.Series != "rb/h" || len(mj.Models) != 2 || mj.Models[1].Model != "other" ||
			mj.Models[1].LastOriginTime != "2026-01-01T05:00:00Z" || mj.Models[0].BaselineVersion != 0 {
			t.Errorf("series models --format json: %+v %v", mj, err)
		}
	})

	t.Run("unknown series", func(t *testing.T) {
		t.Parallel()
		for _, args := range [][]string{
			{"forecasts", addr, "--series", "x", "--model", "m"},
			{"forecasts", addr, "--series", "x", "--model", "m", "--format", "json"},
			{"actuals", addr, "--series", "x"},
		} {
			if out, _, err := stored(args...); err == nil || err.Error() != `series "x" not found` || out != "" {
				t.Errorf("stored %q: %v, stdout %q; want series \"x\" not found and no output", args, err, out)
			}
		}
		var out, errb bytes.Buffer
		if err := seriesModels([]string{addr, "x"}, &out, &errb); err == nil || err.Error() != `series "x" not found` {
			t.Errorf("series models x: %v", err)
		}
	})
}

// Bad command lines are refused before anything is asked of the service:
// with the usage (exit status 2) for a missing flag or an unparsable one,
// with a message for values that cannot be right.
func TestStoredUsage(t *testing.T) {
	t.Parallel()
	const addr = "--addr=127.0.0.1:1" // nothing is ever dialled
	for _, c := range []struct {
		args []string
		want string // "": usage
	}{
		{args: []string{}},
		{args: []string{"nope"}},
		{args: []string{"forecasts", addr, "--model", "m"}},
		{args: []string{"forecasts", addr, "--series", "s"}},
		{args: []string{"actuals", addr}},
		{args: []string{"actuals", addr, "--series", "s", "extra"}},
		{args: []string{"actuals", addr, "--series", "s", "--from", "2026-01-01"}},
		{args: []string{"forecasts", addr, "--series", "s", "--model", "m", "--to", "yesterday"}},
		{[]string{"actuals", addr, "--series", "s", "--from", "2026-01-02T00:00:00Z", "--to", "2026-01-01T00:00:00Z"},
			"--to 2026-01-01T00:00:00Z: must be after --from 2026-01-02T00:00:00Z"},
		{[]string{"actuals", addr, "--series", "s", "--format", "table"}, `--format "table": want csv or json`},
		{[]string{"forecasts", addr, "--series", "s", "--model", "m", "--page-size", "0"}, "--page-size 0: want 1 to 1000"},
		{[]string{"actuals", addr, "--series", "s", "--page-size", "10001"}, "--page-size 10001: want 1 to 10000"},
		{[]string{"forecasts", addr, "--series", "s", "--model", "m\xff"}, `--model "m\xff": not valid UTF-8`},
	} {
		out, errs, err := stored(c.args...)
		switch {
		case c.want == "" && !errors.Is(err, errUsage):
			t.Errorf("stored %q: %v, want the usage", c.args, err)
		case c.want == "" && !strings.Contains(errs, "usage: aftercast stored"):
			t.Errorf("stored %q printed no usage: %q", c.args, errs)
		case c.want != "" && (err == nil || err.Error() != c.want):
			t.Errorf("stored %q: %v, want %s", c.args, err, c.want)
		}
		if out != "" {
			t.Errorf("stored %q wrote %q", c.args, out)
		}
	}
	if _, errs, err := stored("forecasts", "-h"); !errors.Is(err, flag.ErrHelp) || strings.Contains(errs, "`") ||
		!strings.Contains(errs, "-page-size int\n") || !strings.Contains(errs, "-from value\n") {
		t.Errorf("help: %v\n%s", err, errs)
	}
	var out, errb bytes.Buffer
	if err := seriesModels([]string{addr}, &out, &errb); !errors.Is(err, errUsage) {
		t.Errorf("series models without a key: %v", err)
	}
	if err := seriesModels([]string{addr, "k\xff"}, &out, &errb); err == nil || err.Error() != `series key "k\xff": not valid UTF-8` {
		t.Errorf("series models with a key that is not UTF-8: %v", err)
	}
}

// Pages: a daily series across a DST change is read back in pages of a
// few vectors, and every page size gives the same bytes: the rows pushed,
// with targets one local day apart.
func TestStoredPages(t *testing.T) {
	t.Parallel()
	addr := storedServer(t)
	storedCLI(t, "series", "create", addr, "--step", "1d", "--horizon", "4", "--tz", "Europe/Brussels",
		"--grid-anchor", "2000-01-01T05:00:00+01:00", "pg/daily")
	bru, err := time.LoadLocation("Europe/Brussels")
	if err != nil {
		t.Fatal(err)
	}
	r := rand.New(rand.NewPCG(3, 4))
	t0 := time.Date(2026, 3, 20, 5, 0, 0, 0, bru)
	var frows, arows []string // what stored should print, up to the push columns
	flines := []string{"series,origin_time,target_time,forecast,issued_at"}
	for k := range 23 {
		o := t0.AddDate(0, 0, k)
		issued, issuedUTC := "", ""
		if k%2 == 0 {
			at := o.Add(17*time.Minute + 250*time.Microsecond)
			issued, issuedUTC = at.Format(time.RFC3339Nano), at.UTC().Format(time.RFC3339Nano)
		}
		for h := 1; h <= 4; h++ {
			v := 50 + 7*r.NormFloat64() // all 17 digits
			tg := o.AddDate(0, 0, h)
			flines = append(flines, fmt.Sprintf("pg/daily,%s,%s,%s,%s", o.Format(time.RFC3339), tg.Format(time.RFC3339), storedNumber(v), issued))
			frows = append(frows, fmt.Sprintf("pg/daily,%s,%s,%s,%s", o.UTC().Format(time.RFC3339), tg.UTC().Format(time.RFC3339), storedNumber(v), issuedUTC))
		}
	}
	alines := []string{"series,time,value"}
	for k := range 27 {
		tm := t0.AddDate(0, 0, k)
		v := 50 + 7*r.NormFloat64()
		alines = append(alines, fmt.Sprintf("pg/daily,%s,%s", tm.Format(time.RFC3339), storedNumber(v)))
		arows = append(arows, fmt.Sprintf("pg/daily,%s,%s", tm.UTC().Format(time.RFC3339), storedNumber(v)))
	}
	// Actuals after the forecasts, so that none is late.
	storedCLI(t, "push", "forecasts", addr, "--model", "m", writeTemp(t, strings.Join(flines, "\n")+"\n"))
	storedCLI(t, "push", "actuals", addr, writeTemp(t, strings.Join(alines, "\n")+"\n"))

	whole, _, err := stored("forecasts", addr, "--series", "pg/daily", "--model", "m")
	if err != nil {
		t.Fatal(err)
	}
	rows := readCSV(t, whole)
	if len(rows) != 1+len(frows) {
		t.Fatalf("%d rows, want %d:\n%s", len(rows)-1, len(frows), whole)
	}
	for i, w := range frows {
		got := rows[1+i]
		if strings.HasSuffix(w, ",") { // no issue time sent: the vector's receive time stands in
			w += got[8]
		}
		if g := strings.Join(got[:5], ","); g != w {
			t.Errorf("row %d: %s\nwant   %s", i+1, g, w)
		}
	}
	for _, size := range []string{"1", "3", "1000"} {
		if got, _, err := stored("forecasts", addr, "--series", "pg/daily", "--model", "m", "--page-size", size); err != nil || got != whole {
			t.Errorf("--page-size %s (%v):\n%s\nwant\n%s", size, err, got, whole)
		}
		for _, format := range []string{"csv", "json"} {
			a, _, err := stored("actuals", addr, "--series", "pg/daily", "--format", format)
			if err != nil {
				t.Fatal(err)
			}
			if got, _, err := stored("actuals", addr, "--series", "pg/daily", "--format", format, "--page-size", size); err != nil || got != a {
				t.Errorf("actuals --format %s --page-size %s (%v):\n%s\nwant\n%s", format, size, err, got, a)
			}
		}
	}
	ja, _, err := stored("forecasts", addr, "--series", "pg/daily", "--model", "m", "--format", "json")
	if err != nil {
		t.Fatal(err)
	}
	if jp, _, err := stored("forecasts", addr, "--series", "pg/daily", "--model", "m", "--format", "json", "--page-size", "2"); err != nil || jp != ja {
		t.Errorf("json in pages of 2 (%v):\n%s\nwant\n%s", err, jp, ja)
	}
	var decoded struct {
		Forecasts []storedForecastJSON `json:"forecasts"`
	}
	if err := json.Unmarshal([]byte(ja), &decoded); err != nil || len(decoded.Forecasts) != 23 {
		t.Errorf("json: %d vectors, %v", len(decoded.Forecasts), err)
	}

	aout, _, err := stored("actuals", addr, "--series", "pg/daily", "--page-size", "4")
	if err != nil {
		t.Fatal(err)
	}
	got := readCSV(t, aout)
	if len(got) != 1+len(arows) {
		t.Fatalf("%d actuals, want %d", len(got)-1, len(arows))
	}
	for i, w := range arows {
		if g := strings.Join(got[1+i][:4], ","); g != w+",0" {
			t.Errorf("actual %d: %s, want %s,0", i+1, g, w)
		}
	}
	if out := storedCLI(t, "push", "forecasts", addr, "--model", "m", writeTemp(t, whole)); !strings.Contains(out, "accepted 0, duplicate 92, late 0, rejected 0") {
		t.Errorf("pushed again:\n%s", out)
	}
}

// A page of the longest vectors, every lead with a late re-issue, fits in
// a message a gRPC client accepts.
func TestStoredForecastPageFitsAMessage(t *testing.T) {
	t.Parallel()
	for _, horizon := range []int{1, 48, 1000, 10000} {
		ts := timestamppb.New(time.Date(2199, 12, 31, 23, 59, 59, 999999000, time.UTC))
		f := &aftercastv1.StoredForecast{OriginTime: ts, IssueTime: ts, FirstReceiveTime: ts, ReceiveTime: ts}
		for h := 1; h <= horizon; h++ {
			reissue := -math.MaxFloat64
			f.Points = append(f.Points, &aftercastv1.StoredPoint{Lead: int32(h), Value: math.SmallestNonzeroFloat64, Late: true, LateReissue: &reissue})
		}
		size := forecastPageSize(maxForecastPage, horizon)
		page := &aftercastv1.ListForecastsResponse{NextPageToken: strings.Repeat("t", 64)}
		for range size {
			page.Forecasts = append(page.Forecasts, f)
		}
		if n := proto.Size(page); n > 4<<20 || size < 1 {
			t.Errorf("horizon %d: %d vectors a page take %d bytes, over 4 MiB", horizon, size, n)
		}
		if horizon <= 48 && size != maxForecastPage {
			t.Errorf("horizon %d: %d vectors a page, want %d", horizon, size, maxForecastPage)
		}
	}
}

// Quantiles pushed through the API come back in JSON per point; a lead
// the quantiles' push did not cover has none.
func TestStoredQuantiles(t *testing.T) {
	t.Parallel()
	addr := storedServer(t)
	storedCLI(t, "series", "create", addr, "--step", "1h", "--horizon", "3", "rb/q")
	conn, err := grpc.NewClient(strings.TrimPrefix(addr, "--addr="), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	origin := timestamppb.New(time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC))
	fs := []*aftercastv1.Forecast{
		{Series: "rb/q", Model: "m", OriginTime: origin, Values: &aftercastv1.Forecast_Dense{Dense: &aftercastv1.DenseValues{Values: []float64{1, 2}}},
			Quantiles: []*aftercastv1.QuantileValues{{Level: 0.1, Values: []float64{0.5, 1.5}}, {Level: 0.9, Values: []float64{1.5, 2.5}}}},
		{Series: "rb/q", Model: "m", OriginTime: origin, Values: &aftercastv1.Forecast_Sparse{
			Sparse: &aftercastv1.SparseValues{Points: []*aftercastv1.LeadValue{{Lead: 3, Value: 3}}}}},
	}
	if _, err := aftercastv1.NewForecastServiceClient(conn).PushForecasts(t.Context(), &aftercastv1.PushForecastsRequest{Forecasts: fs}); err != nil {
		t.Fatal(err)
	}
	out, _, err := stored("forecasts", addr, "--series", "rb/q", "--model", "m", "--format", "json")
	if err != nil {
		t.Fatal(err)
	}
	var fj struct {
		Forecasts []storedForecastJSON `json:"forecasts"`
	}
	if err := json.Unmarshal([]byte(out), &fj); err != nil || len(fj.Forecasts) != 1 || len(fj.Forecasts[0].Points) != 3 {
		t.Fatalf("stored forecasts --format json: %v\n%s", err, out)
	}
	want := [][]storedQuantileJSON{{{0.1, 0.5}, {0.9, 1.5}}, {{0.1, 1.5}, {0.9, 2.5}}, nil}
	for i, p := range fj.Forecasts[0].Points {
		if !slices.Equal(p.Quantiles, want[i]) {
			t.Errorf("lead %d: quantiles %v, want %v", p.Lead, p.Quantiles, want[i])
		}
	}
}
