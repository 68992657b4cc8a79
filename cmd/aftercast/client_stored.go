package main

import (
	"bufio"
	"encoding/csv"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"math"
	"strconv"
	"text/tabwriter"
	"time"
	"unicode/utf8"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/scoring"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// `aftercast stored forecasts|actuals` read back what the service stores,
// writing each page as it arrives. Their CSV starts with the columns the
// matching push command reads, so that the output can be pushed again
// (every row a duplicate), and goes on with what the service knows of each
// value, in columns push ignores. `aftercast series models` lists the
// models of a series.

// storedForecastColumns is the CSV header of `stored forecasts`: the
// columns of `push forecasts` (push.ForecastColumns, then issued_at), then
// columns it ignores.
var storedForecastColumns = []string{"series", "origin_time", "target_time", "forecast", "issued_at",
	"lead", "late", "late_reissue", "first_received_at", "received_at"}

// storedActualColumns is the CSV header of `stored actuals`: the columns
// of `push actuals` (push.ActualColumns), then columns it ignores.
var storedActualColumns = []string{"series", "time", "value", "revisions", "first_received_at", "received_at"}

// The largest page sizes the service honours (ListForecasts, ListActuals);
// it caps larger requests.
const (
	maxForecastPage = 1000
	maxActualPage   = 10000
)

// maxPageBytes bounds the encoded size of one page of stored forecasts,
// well under the 4 MiB that a gRPC client accepts in one message by
// default.
const maxPageBytes = 3 << 20

func runStored(args []string, stdout, stderr io.Writer) error {
	return subcommand("stored", args, stderr,
		sub{"forecasts", func(args []string) error { return storedForecasts(args, stdout, stderr) }},
		sub{"actuals", func(args []string) error { return storedActuals(args, stdout, stderr) }},
	)
}

// storedFlags are the flags `stored forecasts` and `stored actuals` share.
type storedFlags struct {
	cf       *clientFlags
	series   string
	from, to time.Time
	format   string
	pageSize int
}

// addStoredFlags adds the shared flags. what names the times --from and
// --to bound ("origins"); pageHelp is the help of --page-size.
func addStoredFlags(fs *flag.FlagSet, what, pageHelp string, maxPage int) *storedFlags {
	q := &storedFlags{cf: addClientFlags(fs)}
	fs.StringVar(&q.series, "series", "", "key of the series (required)")
	fs.Func("from", "only "+what+" at or after this RFC 3339 time (default: from the first)", timeFlag(&q.from))
	fs.Func("to", "only "+what+" before this RFC 3339 time (default: to the last)", timeFlag(&q.to))
	fs.StringVar(&q.format, "format", "csv", "output: csv or json")
	fs.IntVar(&q.pageSize, "page-size", maxPage, pageHelp)
	return q
}

// parse parses the command line, which takes no positional arguments, and
// checks the shared flags. model is the --model flag, which is then
// required too; nil when the command has none.
func (q *storedFlags) parse(fs *flag.FlagSet, args []string, maxPage int, model *string) error {
	if _, err := parseExactly(fs, args, 0); err != nil {
		return err
	}
	switch {
	case model != nil && (q.series == "" || *model == ""):
		fmt.Fprintf(fs.Output(), "%s: --series and --model are required\n", fs.Name())
		fs.Usage()
		return errUsage
	case q.series == "":
		fmt.Fprintf(fs.Output(), "%s: --series is required\n", fs.Name())
		fs.Usage()
		return errUsage
	}
	if q.format != "csv" && q.format != "json" {
		return fmt.Errorf("--format %q: want csv or json", q.format)
	}
	if q.pageSize < 1 || q.pageSize > maxPage {
		return fmt.Errorf("--page-size %d: want 1 to %d", q.pageSize, maxPage)
	}
	if !q.from.IsZero() && !q.to.IsZero() && !q.from.Before(q.to) {
		return fmt.Errorf("--to %s: must be after --from %s", q.to.Format(time.RFC3339Nano), q.from.Format(time.RFC3339Nano))
	}
	return nil
}

// bounds are --from and --to as the request's optional timestamps.
func (q *storedFlags) bounds() (from, to *timestamppb.Timestamp) {
	if !q.from.IsZero() {
		from = timestamppb.New(q.from)
	}
	if !q.to.IsZero() {
		to = timestamppb.New(q.to)
	}
	return from, to
}

// inRange is " in the range" when --from or --to was given.
func (q *storedFlags) inRange() string {
	if q.from.IsZero() && q.to.IsZero() {
		return ""
	}
	return " in the range"
}

// notFound is what a NOT_FOUND of the series is reported as.
func (q *storedFlags) notFound() string { return fmt.Sprintf("series %q", q.series) }

func storedForecasts(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("stored forecasts", "", stderr)
	fs.Usage = func() {
		fmt.Fprint(stderr, "usage: aftercast stored forecasts --series KEY --model NAME [flags]\n\n"+
			"The stored forecast values of one series and model, by origin, one CSV row per lead. The first\n"+
			"columns are those push forecasts reads (series,origin_time,target_time,forecast,issued_at), so the\n"+
			"output can be pushed again: every row counts as a duplicate. Then: lead; late (true: the value arrived\n"+
			"after its target's actual and is never scored); late_reissue (a late value stored beside this one,\n"+
			"which it did not replace; empty when none); first_received_at and received_at (when the vector's\n"+
			"first and last values were committed). Times are RFC 3339 in UTC, numbers exactly as stored.\n"+
			"--format json prints {\"forecasts\":[...]}, one object per forecast vector.\n\nflags:\n")
		fs.PrintDefaults()
	}
	q := addStoredFlags(fs, "origins", fmt.Sprintf("forecast vectors per request, 1 to %d "+
		"(fewer for a long horizon, so that a page stays under 3 MiB)", maxForecastPage), maxForecastPage)
	model := fs.String("model", "", "the model whose forecasts are read (required)")
	if err := q.parse(fs, args, maxForecastPage, model); err != nil {
		return err
	}
	cf := q.cf
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()

	ctx, cancel := cf.call()
	sr, err := aftercastv1.NewSeriesServiceClient(conn).GetSeries(ctx, &aftercastv1.GetSeriesRequest{Key: q.series})
	cancel()
	if err != nil {
		return cf.rpcError(err, q.notFound())
	}
	info, err := seriesInfo(sr.GetSeries())
	if err != nil {
		return err
	}

	out, err := newStoredWriter(stdout, q.format, "forecasts", storedForecastColumns)
	if err != nil {
		return err
	}
	client := aftercastv1.NewForecastServiceClient(conn)
	req := &aftercastv1.ListForecastsRequest{Series: q.series, Model: *model,
		PageSize: forecastPageSize(q.pageSize, info.Horizon)}
	req.OriginFromTime, req.OriginToTime = q.bounds()
	vectors := 0
	for {
		ctx, cancel := cf.call()
		resp, err := client.ListForecasts(ctx, req)
		cancel()
		if err != nil {
			return cf.rpcError(err, q.notFound())
		}
		for _, f := range resp.GetForecasts() {
			if err := out.forecast(q.series, *model, info.Step, f); err != nil {
				return err
			}
		}
		vectors += len(resp.GetForecasts())
		if req.PageToken = resp.GetNextPageToken(); req.PageToken == "" {
			break
		}
		if err := out.flush(); err != nil {
			return err
		}
	}
	if err := out.close(); err != nil {
		return err
	}
	if vectors == 0 {
		fmt.Fprintf(stderr, "aftercast stored forecasts: no forecasts of model %s stored for series %s%s\n", *model, q.series, q.inRange())
	}
	return nil
}

// forecastPageSize is want, made smaller for a long horizon so that a
// page of vectors whose every lead has a value and a late re-issue stays
// under maxPageBytes.
func forecastPageSize(want, horizon int) int32 {
	// A point is at most 25 bytes encoded (lead, value, late, late
	// re-issue and its own tag and length); a vector's four times and
	// framing take less than 64.
	perVector := 64 + 25*max(horizon, 1)
	return int32(max(1, min(want, maxPageBytes/perVector)))
}

func storedActuals(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("stored actuals", "", stderr)
	fs.Usage = func() {
		fmt.Fprint(stderr, "usage: aftercast stored actuals --series KEY [flags]\n\n"+
			"The stored actuals of one series, by time: the newest value of each time. The first columns are\n"+
			"those push actuals reads (series,time,value), so the output can be pushed again: every row counts\n"+
			"as a duplicate. Then: revisions (how often a changed value replaced the stored one);\n"+
			"first_received_at (when the first value for the time arrived; the hindsight guard compares\n"+
			"forecasts with it) and received_at (when the newest value was committed). Times are RFC 3339 in UTC,\n"+
			"numbers exactly as stored. --format json prints {\"actuals\":[...]}.\n\nflags:\n")
		fs.PrintDefaults()
	}
	q := addStoredFlags(fs, "times", fmt.Sprintf("actuals per request, 1 to %d", maxActualPage), maxActualPage)
	if err := q.parse(fs, args, maxActualPage, nil); err != nil {
		return err
	}
	cf := q.cf
	out, err := newStoredWriter(stdout, q.format, "actuals", storedActualColumns)
	if err != nil {
		return err
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	client := aftercastv1.NewActualServiceClient(conn)
	req := &aftercastv1.ListActualsRequest{Series: q.series, PageSize: int32(q.pageSize)}
	req.TimeFrom, req.TimeTo = q.bounds()
	n := 0
	for {
		ctx, cancel := cf.call()
		resp, err := client.ListActuals(ctx, req)
		cancel()
		if err != nil {
			return cf.rpcError(err, q.notFound())
		}
		for _, a := range resp.GetActuals() {
			if err := out.actual(q.series, a); err != nil {
				return err
			}
		}
		n += len(resp.GetActuals())
		if req.PageToken = resp.GetNextPageToken(); req.PageToken == "" {
			break
		}
		if err := out.flush(); err != nil {
			return err
		}
	}
	if err := out.close(); err != nil {
		return err
	}
	if n == 0 {
		fmt.Fprintf(stderr, "aftercast stored actuals: no actuals stored for series %s%s\n", q.series, q.inRange())
	}
	return nil
}

// storedWriter writes CSV rows, or the objects of one JSON document
// {"<key>":[...]}, as they come.
type storedWriter struct {
	csv  *csv.Writer
	json *bufio.Writer
	n    int
}

func newStoredWriter(w io.Writer, format, key string, header []string) (*storedWriter, error) {
	switch format {
	case "csv":
		s := &storedWriter{csv: csv.NewWriter(w)}
		return s, s.csv.Write(header)
	case "json":
		s := &storedWriter{json: bufio.NewWriter(w)}
		_, err := fmt.Fprintf(s.json, "{%q:[", key)
		return s, err
	}
	return nil, fmt.Errorf("--format %q: want csv or json", format)
}

// storedForecastJSON is one vector in `stored forecasts --format json`.
type storedForecastJSON struct {
	Series          string            `json:"series"`
	Model           string            `json:"model"`
	OriginTime      string            `json:"origin_time"`
	IssuedAt        string            `json:"issued_at"`
	FirstReceivedAt string            `json:"first_received_at"`
	ReceivedAt      string            `json:"received_at"`
	Points          []storedPointJSON `json:"points"`
}

// storedPointJSON is one lead of a vector in JSON.
type storedPointJSON struct {
	Lead        int32    `json:"lead"`
	TargetTime  string   `json:"target_time"`
	Forecast    float64  `json:"forecast"`
	Late        bool     `json:"late"`
	LateReissue *float64 `json:"late_reissue"` // null: none
	// The quantile forecasts stored for this lead, by level; absent when
	// the vector has none.
	Quantiles []storedQuantileJSON `json:"quantiles,omitempty"`
}

type storedQuantileJSON struct {
	Level float64 `json:"level"`
	Value float64 `json:"value"`
}

// storedActualJSON is one actual in `stored actuals --format json`.
type storedActualJSON struct {
	Series          string  `json:"series"`
	Time            string  `json:"time"`
	Value           float64 `json:"value"`
	Revisions       int32   `json:"revisions"`
	FirstReceivedAt string  `json:"first_received_at"`
	ReceivedAt      string  `json:"received_at"`
}

// forecast writes one stored vector: a CSV row per lead, or one JSON
// object. The target of a lead is its origin plus lead steps of step.
func (s *storedWriter) forecast(series, model string, step scoring.Step, f *aftercastv1.StoredForecast) error {
	origin := f.GetOriginTime().AsTime()
	issued, first, last := storedStamp(f.GetIssueTime()), storedStamp(f.GetFirstReceiveTime()), storedStamp(f.GetReceiveTime())
	target := func(p *aftercastv1.StoredPoint) string {
		return step.Add(origin, int(p.GetLead())).UTC().Format(time.RFC3339Nano)
	}
	if s.csv != nil {
		for _, p := range f.GetPoints() {
			reissue := ""
			if p.LateReissue != nil {
				reissue = storedNumber(p.GetLateReissue())
			}
			err := s.csv.Write([]string{series, storedStamp(f.GetOriginTime()), target(p), storedNumber(p.GetValue()), issued,
				strconv.Itoa(int(p.GetLead())), strconv.FormatBool(p.GetLate()), reissue, first, last})
			if err != nil {
				return err
			}
		}
		return nil
	}
	o := storedForecastJSON{Series: series, Model: model, OriginTime: storedStamp(f.GetOriginTime()), IssuedAt: issued,
		FirstReceivedAt: first, ReceivedAt: last, Points: make([]storedPointJSON, 0, len(f.GetPoints()))}
	for k, p := range f.GetPoints() {
		pt := storedPointJSON{Lead: p.GetLead(), TargetTime: target(p), Forecast: p.GetValue(), Late: p.GetLate(), LateReissue: p.LateReissue}
		for _, q := range f.GetQuantiles() {
			// The API sends a value per point, NaN where the quantiles'
			// push did not cover the lead; JSON has no NaN, so it is left out.
			if k < len(q.GetValues()) && !math.IsNaN(q.GetValues()[k]) {
				pt.Quantiles = append(pt.Quantiles, storedQuantileJSON{q.GetLevel(), q.GetValues()[k]})
			}
		}
		o.Points = append(o.Points, pt)
	}
	return s.object(o)
}

// actual writes one stored actual.
func (s *storedWriter) actual(series string, a *aftercastv1.StoredActual) error {
	first, last := storedStamp(a.GetFirstReceiveTime()), storedStamp(a.GetReceiveTime())
	if s.csv != nil {
		return s.csv.Write([]string{series, storedStamp(a.GetTime()), storedNumber(a.GetValue()),
			strconv.Itoa(int(a.GetRevisions())), first, last})
	}
	return s.object(storedActualJSON{Series: series, Time: storedStamp(a.GetTime()), Value: a.GetValue(),
		Revisions: a.GetRevisions(), FirstReceivedAt: first, ReceivedAt: last})
}

// object writes one element of the JSON array.
func (s *storedWriter) object(v any) error {
	b, err := json.Marshal(v)
	if err != nil {
		return fmt.Errorf("encoding JSON: %w", err)
	}
	sep := ",\n  "
	if s.n == 0 {
		sep = "\n  "
	}
	s.n++
	if _, err := s.json.WriteString(sep); err != nil {
		return err
	}
	_, err = s.json.Write(b)
	return err
}

// flush writes out what is buffered, so that each page is seen as it
// arrives.
func (s *storedWriter) flush() error {
	if s.csv != nil {
		s.csv.Flush()
		return s.csv.Error()
	}
	return s.json.Flush()
}

// close ends the JSON document, and flushes.
func (s *storedWriter) close() error {
	if s.json != nil {
		end := "]}\n"
		if s.n > 0 {
			end = "\n]}\n"
		}
		if _, err := s.json.WriteString(end); err != nil {
			return err
		}
	}
	return s.flush()
}

// storedStamp is a time in RFC 3339 (UTC, with the fraction it has), ""
// when unset.
func storedStamp(ts *timestamppb.Timestamp) string {
	if ts == nil {
		return ""
	}
	return ts.AsTime().Format(time.RFC3339Nano)
}

// storedNumber is x in the shortest form that reads back to the same
// float64.
func storedNumber(x float64) string { return strconv.FormatFloat(x, 'g', -1, 64) }

// seriesModels is `aftercast series models KEY`: the models with forecasts
// or a baseline for a series.
func seriesModels(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("series models", "KEY", stderr)
	cf := addClientFlags(fs)
	format := fs.String("format", "table", "output: table or json")
	pos, err := parseExactly(fs, args, 1)
	if err != nil {
		return err
	}
	if err := tableOrJSON(*format); err != nil {
		return err
	}
	key := pos[0]
	if !utf8.ValidString(key) {
		return fmt.Errorf("series key %q: not valid UTF-8", key)
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	ctx, cancel := cf.call()
	defer cancel()
	resp, err := aftercastv1.NewSeriesServiceClient(conn).ListModels(ctx, &aftercastv1.ListModelsRequest{Series: key})
	if err != nil {
		return cf.rpcError(err, fmt.Sprintf("series %q", key))
	}
	type modelJSON struct {
		Model           string `json:"model"`
		LastOriginTime  string `json:"last_origin_time"` // "": no forecasts
		BaselineVersion int32  `json:"baseline_version"` // 0: no baseline
	}
	models := make([]modelJSON, 0, len(resp.GetModels()))
	for _, m := range resp.GetModels() {
		models = append(models, modelJSON{Model: m.GetModel(), LastOriginTime: storedStamp(m.GetLastOriginTime()),
			BaselineVersion: m.GetBaselineVersion()})
	}
	if *format == "json" {
		return writeJSON(stdout, struct {
			Series string      `json:"series"`
			Models []modelJSON `json:"models"`
		}{key, models})
	}
	if len(models) == 0 {
		fmt.Fprintf(stdout, "series %s has no models: no forecasts and no baseline\n", key)
		return nil
	}
	tw := tabwriter.NewWriter(stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "MODEL\tLAST ORIGIN\tBASELINE")
	for _, m := range models {
		baseline := "-"
		if m.BaselineVersion > 0 {
			baseline = fmt.Sprintf("version %d", m.BaselineVersion)
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\n", m.Model, orDash(m.LastOriginTime), baseline)
	}
	return tw.Flush()
}
