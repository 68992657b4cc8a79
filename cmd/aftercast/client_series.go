package main

import (
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"text/tabwriter"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/scoring"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/fieldmaskpb"
	"google.golang.org/protobuf/types/known/timestamppb"
)

func runSeries(args []string, stdout, stderr io.Writer) error {
	return subcommand("series", args, stderr,
		sub{"create", func(args []string) error { return seriesCreate(args, stdout, stderr) }},
		sub{"get", func(args []string) error { return seriesGet(args, stdout, stderr) }},
		sub{"list", func(args []string) error { return seriesList(args, stdout, stderr) }},
		sub{"models", func(args []string) error { return seriesModels(args, stdout, stderr) }},
		sub{"update", func(args []string) error { return seriesUpdate(args, stdout, stderr) }},
	)
}

func seriesCreate(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("series create", "KEY", stderr)
	cf := addClientFlags(fs)
	var (
		s         aftercastv1.Series
		horizon   int
		season    int
		decisions string
	)
	fs.StringVar(&s.Step, "step", "", "sampling interval (required): 15m, 30m, 1h, 24h, or calendar 1d, 1w, 1mo, 1y")
	fs.IntVar(&horizon, "horizon", 0, "largest lead accepted, in steps (required)")
	fs.IntVar(&season, "season", 0, "season m in steps, for the MASE scale (0: none)")
	fs.StringVar(&s.Unit, "unit", "", "unit of the values, such as MW (informational)")
	fs.StringVar(&s.TimeZone, "tz", "UTC", "IANA time zone whose calendar the calendar steps follow")
	fs.StringVar(&decisions, "decision-leads", "", "leads the business acts on, e.g. 25-48 (default all)")
	fs.Func("error-scale", errorScaleHelp+" (default auto)", func(v string) (err error) {
		s.ErrorScale, err = parseErrorScale(v)
		return err
	})
	fs.Func("grid-anchor", "an RFC 3339 time the series' grid starts from; origins and actual times must be that plus whole steps "+
		"(default: local midnight of 2000-01-01, a Monday 2000-01-03 for week steps)", func(v string) error {
		t, err := time.Parse(time.RFC3339Nano, v)
		if err != nil {
			return fmt.Errorf("want an RFC 3339 time such as 2000-01-01T05:00:00+01:00")
		}
		s.GridAnchorTime = timestamppb.New(t)
		return nil
	})
	key, err := keyArgs(fs, args, stderr, func() bool { return s.Step != "" && horizon != 0 }, "--step and --horizon are required")
	if err != nil {
		return err
	}
	s.Key = key
	s.Horizon, s.Season = int32(horizon), int32(season)
	leads, err := scoring.ParseLeads(decisions)
	if err != nil {
		return fmt.Errorf("--decision-leads: %w", err)
	}
	for _, h := range leads {
		s.DecisionLeads = append(s.DecisionLeads, int32(h))
	}

	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	ctx, cancel := cf.call()
	defer cancel()
	resp, err := aftercastv1.NewSeriesServiceClient(conn).CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &s})
	if status.Code(err) == codes.AlreadyExists {
		return fmt.Errorf("series %s already exists with different settings: step, horizon, zone and grid never change in place (use another key); `aftercast series update` changes the error scale and decision leads", s.Key)
	}
	if err != nil {
		return cf.rpcError(err, "")
	}
	if resp.GetCreated() {
		fmt.Fprintf(stdout, "created series %s\n", s.Key)
	} else {
		fmt.Fprintf(stdout, "series %s already exists with the same settings\n", s.Key)
	}
	return nil
}

// keyArgs parses the flags and the one KEY of a command whose required
// flags ready says are given, saying what is missing (need) when not.
func keyArgs(fs *flag.FlagSet, args []string, stderr io.Writer, ready func() bool, need string) (string, error) {
	pos, err := parseArgs(fs, args)
	if err != nil {
		return "", err
	}
	if len(pos) != 1 || !ready() {
		if len(pos) == 1 {
			fmt.Fprintf(stderr, "%s: %s\n", fs.Name(), need)
		}
		fs.Usage()
		return "", errUsage
	}
	return pos[0], textArg("KEY", pos[0])
}

const errorScaleHelp = "how errors are scaled before they are judged: auto (divided by a power of the forecast level " +
	"fitted to each baseline, so a high season is judged against what the backtest promised at such levels) or absolute (as they are)"

func parseErrorScale(v string) (aftercastv1.ErrorScale, error) {
	switch v {
	case "auto":
		return aftercastv1.ErrorScale_ERROR_SCALE_AUTO, nil
	case "absolute":
		return aftercastv1.ErrorScale_ERROR_SCALE_ABSOLUTE, nil
	}
	return 0, errors.New("want auto or absolute")
}

// errorScaleName is the CLI's name of a mode.
func errorScaleName(e aftercastv1.ErrorScale) string {
	if e == aftercastv1.ErrorScale_ERROR_SCALE_ABSOLUTE {
		return "absolute"
	}
	return "auto"
}

// seriesUpdate changes the settings that only decide how the stored data
// is judged; the service then replays the production period.
func seriesUpdate(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("series update", "KEY", stderr)
	cf := addClientFlags(fs)
	var (
		s    aftercastv1.Series
		mask []string
	)
	fs.Func("error-scale", errorScaleHelp, func(v string) (err error) {
		s.ErrorScale, err = parseErrorScale(v)
		mask = append(mask, "error_scale")
		return err
	})
	fs.Func("decision-leads", "leads the business acts on, e.g. 25-48, or all", func(v string) error {
		s.DecisionLeads = nil
		if v != "all" {
			leads, err := scoring.ParseLeads(v)
			if err != nil {
				return err
			}
			for _, h := range leads {
				s.DecisionLeads = append(s.DecisionLeads, int32(h))
			}
		}
		mask = append(mask, "decision_leads")
		return nil
	})
	key, err := keyArgs(fs, args, stderr, func() bool { return len(mask) > 0 }, "give --error-scale or --decision-leads")
	if err != nil {
		return err
	}
	s.Key = key
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	ctx, cancel := cf.call()
	defer cancel()
	resp, err := aftercastv1.NewSeriesServiceClient(conn).UpdateSeries(ctx, &aftercastv1.UpdateSeriesRequest{Series: &s,
		UpdateMask: &fieldmaskpb.FieldMask{Paths: mask}})
	if err != nil {
		return cf.rpcError(err, fmt.Sprintf("series %s", s.Key))
	}
	got := resp.GetSeries()
	if !resp.GetChanged() {
		fmt.Fprintf(stdout, "series %s already has error scale %s and decision leads %s: nothing changed\n",
			s.Key, errorScaleName(got.GetErrorScale()), decisionLeads(got))
		return nil
	}
	fmt.Fprintf(stdout, "series %s: error scale %s, decision leads %s; its production period is being re-judged "+
		"(events with cause baseline; `aftercast drift` shows when it is done)\n", s.Key, errorScaleName(got.GetErrorScale()), decisionLeads(got))
	return nil
}

func seriesGet(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("series get", "KEY", stderr)
	cf := addClientFlags(fs)
	format := fs.String("format", "table", "output: table or json")
	pos, err := parseExactly(fs, args, 1)
	if err != nil {
		return err
	}
	if err := textArg("KEY", pos[0]); err != nil {
		return err
	}
	if err := tableOrJSON(*format); err != nil {
		return err
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	ctx, cancel := cf.call()
	defer cancel()
	resp, err := aftercastv1.NewSeriesServiceClient(conn).GetSeries(ctx, &aftercastv1.GetSeriesRequest{Key: pos[0]})
	if err != nil {
		return cf.rpcError(err, fmt.Sprintf("series %s", pos[0]))
	}
	s := resp.GetSeries()
	if *format == "json" {
		return writeJSON(stdout, seriesOut(s))
	}
	tw := tabwriter.NewWriter(stdout, 0, 0, 2, ' ', 0)
	o := seriesOut(s)
	fmt.Fprintf(tw, "key\t%s\nstep\t%s\ngrid from\t%s\nhorizon\t%d\nseason\t%d\nunit\t%s\ntime zone\t%s\ndecision leads\t%s\nerror scale\t%s\ncreated\t%s\n",
		o.Key, o.Step, orDash(o.GridAnchorTime), o.Horizon, o.Season, orDash(o.Unit), o.TimeZone, decisionLeads(s), o.ErrorScale, orDash(o.CreateTime))
	return tw.Flush()
}

func seriesList(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("series list", "", stderr)
	cf := addClientFlags(fs)
	format := fs.String("format", "table", "output: table or json")
	prefix := fs.String("prefix", "", "only series whose key starts with this")
	_, err := parseExactly(fs, args, 0)
	if err != nil {
		return err
	}
	if err := tableOrJSON(*format); err != nil {
		return err
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	client := aftercastv1.NewSeriesServiceClient(conn)
	var all []*aftercastv1.Series
	for token := ""; ; {
		ctx, cancel := cf.call()
		resp, err := client.ListSeries(ctx, &aftercastv1.ListSeriesRequest{PageSize: 1000, PageToken: token, KeyPrefix: *prefix})
		cancel()
		if err != nil {
			return cf.rpcError(err, "")
		}
		all = append(all, resp.GetSeries()...)
		if token = resp.GetNextPageToken(); token == "" {
			break
		}
	}
	if *format == "json" {
		out := struct {
			Series []seriesJSON `json:"series"`
		}{Series: make([]seriesJSON, 0, len(all))}
		for _, s := range all {
			out.Series = append(out.Series, seriesOut(s))
		}
		return writeJSON(stdout, out)
	}
	if len(all) == 0 {
		fmt.Fprintln(stdout, "no series")
		return nil
	}
	tw := tabwriter.NewWriter(stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "KEY\tSTEP\tHORIZON\tSEASON\tUNIT\tTIME ZONE\tDECISION LEADS\tERROR SCALE\tCREATED")
	for _, s := range all {
		o := seriesOut(s)
		fmt.Fprintf(tw, "%s\t%s\t%d\t%d\t%s\t%s\t%s\t%s\t%s\n", o.Key, o.Step, o.Horizon, o.Season, orDash(o.Unit),
			o.TimeZone, decisionLeads(s), o.ErrorScale, orDash(o.CreateTime))
	}
	return tw.Flush()
}

// seriesJSON is the JSON shape of a series in `series get` and `series
// list`.
type seriesJSON struct {
	Key            string  `json:"key"`
	Step           string  `json:"step"`
	Horizon        int32   `json:"horizon"`
	Season         int32   `json:"season"`
	Unit           string  `json:"unit"`
	TimeZone       string  `json:"time_zone"`
	DecisionLeads  []int32 `json:"decision_leads"` // empty: all leads
	GridAnchorTime string  `json:"grid_anchor_time"`
	ErrorScale     string  `json:"error_scale"` // auto or absolute
	CreateTime     string  `json:"create_time"`
}

func seriesOut(s *aftercastv1.Series) seriesJSON {
	o := seriesJSON{Key: s.GetKey(), Step: s.GetStep(), Horizon: s.GetHorizon(), Season: s.GetSeason(), Unit: s.GetUnit(),
		TimeZone: s.GetTimeZone(), DecisionLeads: append([]int32{}, s.GetDecisionLeads()...), ErrorScale: errorScaleName(s.GetErrorScale())}
	if s.GetCreateTime() != nil {
		o.CreateTime = s.GetCreateTime().AsTime().Format(time.RFC3339Nano)
	}
	if a := s.GetGridAnchorTime(); a != nil {
		loc, err := time.LoadLocation(s.GetTimeZone())
		if err != nil {
			loc = time.UTC
		}
		o.GridAnchorTime = a.AsTime().In(loc).Format(time.RFC3339Nano)
	}
	return o
}

// decisionLeads is the decision leads of a series as a lead list, "all"
// when empty.
func decisionLeads(s *aftercastv1.Series) string {
	if len(s.GetDecisionLeads()) == 0 {
		return "all"
	}
	leads := make([]int, len(s.GetDecisionLeads()))
	for i, h := range s.GetDecisionLeads() {
		leads[i] = int(h)
	}
	return scoring.FormatLeads(leads)
}

// tableOrJSON checks a --format that allows table or json.
func tableOrJSON(f string) error {
	if f != "table" && f != "json" {
		return errors.New("--format: want table or json")
	}
	return nil
}

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}
