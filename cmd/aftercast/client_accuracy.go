package main

import (
	"cmp"
	"flag"
	"fmt"
	"io"
	"strings"
	"text/tabwriter"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/driftreport"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/export"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/report"
	"github.com/aftercast/aftercast/scoring"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"
)

func runAccuracy(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("accuracy", "", stderr)
	cf := addClientFlags(fs)
	sel := addSelectionFlags(fs)
	format := fs.String("format", "table", "output: table, json or csv")
	if err := sel.parse(fs, args); err != nil {
		return err
	}
	if !validFormat(*format) {
		return fmt.Errorf("--format %q: want table, json or csv", *format)
	}
	req, err := sel.request()
	if err != nil {
		return err
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	ctx, cancel := cf.call()
	defer cancel()
	resp, err := aftercastv1.NewAccuracyServiceClient(conn).GetAccuracy(ctx,
		&aftercastv1.GetAccuracyRequest{Series: sel.series, Model: sel.model, Selection: req})
	if err != nil {
		return sel.rpcError(cf, conn, err)
	}
	r := accuracyResult(resp)
	r.Series, r.Model = cmp.Or(r.Series, sel.series), cmp.Or(r.Model, sel.model)
	if err := report.Write(stdout, *format, []report.Result{r}); err != nil {
		return err
	}
	if *format != "table" {
		return nil
	}
	if n := resp.GetOverallLateCount(); n > 0 {
		fmt.Fprintf(stdout, "%d late pairs not scored (their forecast arrived after the actual was known)\n", n)
	}
	return writeAgainstBaseline(stdout, resp)
}

// writeAgainstBaseline prints each lead's MAE beside what the baseline
// expects of that many origins at these forecast levels (method.md §4a):
// the level-adjusted expectation, 95% band and alarm limit, with the
// plain backtest MAE and the level scale that adjusted it.
func writeAgainstBaseline(w io.Writer, resp *aftercastv1.GetAccuracyResponse) error {
	var rows []*aftercastv1.LeadAccuracy
	for _, l := range resp.GetLeads() {
		if l.GetBaseline().GetMae() != nil && l.GetMetrics().Mae != nil {
			rows = append(rows, l)
		}
	}
	if len(rows) == 0 {
		return nil
	}
	fmt.Fprintf(w, "\nagainst baseline version %d: MAE beside what the backtest promises for that many origins at these forecast levels\n",
		rows[0].GetBaseline().GetBaselineVersion())
	fmt.Fprintln(w, "(level scale ≠ 1: errors grow with the level, and the expectation is the backtest's scaled to it; backtest MAE is the plain average)")
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "LEAD\tN\tMAE\tEXPECTED\t95% BAND\tALARM\tBACKTEST MAE\tLEVEL SCALE\tSTATE")
	for _, l := range rows {
		b := l.GetBaseline()
		m := b.GetMae()
		fmt.Fprintf(tw, "%d\t%d\t%.4g\t%.4g\t[%.4g, %.4g]\t%.4g\t%.4g\t%.3g\t%s\n", l.GetLead(), b.GetWindowN(), l.GetMetrics().GetMae(),
			m.GetExpected(), m.GetBandLower(), m.GetBandUpper(), m.GetAlarmUpper(), b.GetBacktestMae(), b.GetLevelScale(),
			driftreport.StateName(b.GetState()))
	}
	return tw.Flush()
}

// accuracyResult is a GetAccuracy response in the shape `aftercast
// evaluate` reports, so that both print the same table and JSON. Absent
// (undefined) metrics become NaN, as scoring.Metrics has them.
func accuracyResult(resp *aftercastv1.GetAccuracyResponse) report.Result {
	t := scoring.Table{Overall: report.FromProto(resp.GetOverall()), Leads: make([]scoring.LeadMetrics, 0, len(resp.GetLeads()))}
	late := &report.Late{ByLead: make(map[int]int64, len(resp.GetLeads())), Overall: resp.GetOverallLateCount()}
	for _, l := range resp.GetLeads() {
		t.Leads = append(t.Leads, scoring.LeadMetrics{Lead: int(l.GetLead()), Metrics: report.FromProto(l.GetMetrics())})
		late.ByLead[int(l.GetLead())] = l.GetLateCount()
	}
	return report.Result{Series: resp.GetSeries(), Model: resp.GetModel(), Step: resp.GetStep(), Table: t, Late: late}
}

func runPairs(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("pairs", "", stderr)
	cf := addClientFlags(fs)
	sel := addSelectionFlags(fs)
	format := fs.String("format", "csv", "output: "+strings.Join(export.Formats, " or "))
	if err := sel.parse(fs, args); err != nil {
		return err
	}
	req, err := sel.request()
	if err != nil {
		return err
	}
	out, err := export.NewPairs(stdout, *format, sel.series, sel.model)
	if err != nil {
		return fmt.Errorf("--format: %w", err)
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	client := aftercastv1.NewAccuracyServiceClient(conn)
	for token := ""; ; {
		ctx, cancel := cf.call()
		resp, err := client.ListPairs(ctx, &aftercastv1.ListPairsRequest{Series: sel.series, Model: sel.model,
			Selection: req, PageSize: 1000, PageToken: token})
		cancel()
		if err != nil {
			return sel.rpcError(cf, conn, err)
		}
		for _, p := range resp.GetPairs() {
			if err := out.Write(p); err != nil {
				return err
			}
		}
		if token = resp.GetNextPageToken(); token == "" {
			break
		}
		if err := out.Flush(); err != nil {
			return err
		}
	}
	return out.Close()
}

// selectionFlags choose the pairs of `accuracy` and `pairs`.
type selectionFlags struct {
	series, model, leads string
	window               int
	origin, target       [2]time.Time // [from, to)
}

func addSelectionFlags(fs *flag.FlagSet) *selectionFlags {
	s := &selectionFlags{}
	fs.StringVar(&s.series, "series", "", "key of the series (required)")
	fs.StringVar(&s.model, "model", "", "model whose forecasts are scored (required)")
	fs.IntVar(&s.window, "window", 0, "per lead, only the pairs of the newest N origins (0: all)")
	fs.StringVar(&s.leads, "leads", "", "leads to keep, e.g. 1-24,48 (default all)")
	for _, b := range []struct {
		name string
		t    *time.Time
	}{{"origin-from", &s.origin[0]}, {"origin-to", &s.origin[1]}, {"target-from", &s.target[0]}, {"target-to", &s.target[1]}} {
		bound := "inclusive"
		if strings.HasSuffix(b.name, "-to") {
			bound = "exclusive"
		}
		fs.Func(b.name, "RFC 3339 time, "+bound, func(v string) error {
			t, err := time.Parse(time.RFC3339Nano, v)
			if err != nil {
				return fmt.Errorf("want an RFC 3339 time such as 2026-01-31T05:00:00Z")
			}
			*b.t = t
			return nil
		})
	}
	return s
}

// parse parses the command line, which takes no positional arguments.
func (s *selectionFlags) parse(fs *flag.FlagSet, args []string) error {
	pos, err := parseArgs(fs, args)
	if err != nil {
		return err
	}
	if len(pos) != 0 || s.series == "" || s.model == "" {
		if len(pos) == 0 {
			fmt.Fprintf(fs.Output(), "%s: --series and --model are required\n", fs.Name())
		}
		fs.Usage()
		return errUsage
	}
	return nil
}

func (s *selectionFlags) request() (*aftercastv1.PairSelection, error) {
	if s.window < 0 {
		return nil, fmt.Errorf("--window %d: want 0 (all) or a number of origins", s.window)
	}
	leads, err := scoring.ParseLeads(s.leads)
	if err != nil {
		return nil, fmt.Errorf("--leads: %w", err)
	}
	sel := &aftercastv1.PairSelection{OriginRange: timeRange(s.origin), TargetRange: timeRange(s.target), WindowOrigins: int32(s.window)}
	for _, h := range leads {
		sel.Leads = append(sel.Leads, int32(h))
	}
	return sel, nil
}

// rpcError is cf.rpcError, except that it tells a NOT_FOUND series from a
// NOT_FOUND model (a model without forecasts for the series), which the
// service may also report so.
func (s *selectionFlags) rpcError(cf *clientFlags, conn grpc.ClientConnInterface, err error) error {
	if status.Code(err) == codes.NotFound {
		ctx, cancel := cf.call()
		defer cancel()
		_, serr := aftercastv1.NewSeriesServiceClient(conn).GetSeries(ctx, &aftercastv1.GetSeriesRequest{Key: s.series})
		if serr == nil {
			return fmt.Errorf("model %s has no forecasts for series %s", s.model, s.series)
		}
	}
	return cf.rpcError(err, "series "+s.series)
}

// timeRange is [from, to) with zero bounds unset; nil when both are.
func timeRange(b [2]time.Time) *aftercastv1.TimeRange {
	if b[0].IsZero() && b[1].IsZero() {
		return nil
	}
	r := &aftercastv1.TimeRange{}
	if !b[0].IsZero() {
		r.StartTime = timestamppb.New(b[0])
	}
	if !b[1].IsZero() {
		r.EndTime = timestamppb.New(b[1])
	}
	return r
}
