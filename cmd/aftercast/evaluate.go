package main

import (
	"fmt"
	"io"
	"time"

	"github.com/aftercast/aftercast/cmd/aftercast/internal/evaluate"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/report"
	"github.com/aftercast/aftercast/scoring"
)

func runEvaluate(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("evaluate", "FILE.csv", stderr)
	var (
		opt                evaluate.Options
		tz, leads, history string
		format             string
		times              = map[string]*time.Time{
			"origin-from": &opt.OriginFrom, "origin-to": &opt.OriginTo,
			"target-from": &opt.TargetFrom, "target-to": &opt.TargetTo,
		}
	)
	fs.StringVar(&opt.Step, "step", "", "series step: 15m, 30m, 1h, 24h or calendar 1d, 1w, 1mo, 1y (default: inferred per series, reported on stderr)")
	fs.StringVar(&tz, "tz", "UTC", "IANA time zone of calendar steps")
	fs.IntVar(&opt.Season, "season", 1, "season m in steps for the MASE scale")
	fs.StringVar(&history, "history", "", "training actuals `FILE` (CSV columns series,time,value), for the MASE scale")
	fs.StringVar(&format, "format", "table", "output: table, json or csv")
	fs.StringVar(&leads, "leads", "", "leads to keep, e.g. 1-24,48 (default all)")
	for name, p := range times {
		bound := "inclusive"
		if name[len(name)-2:] == "to" {
			bound = "exclusive"
		}
		fs.Func(name, fmt.Sprintf("RFC 3339 time, %s", bound), func(s string) error {
			t, err := time.Parse(time.RFC3339Nano, s)
			if err != nil {
				return fmt.Errorf("want an RFC 3339 time such as 2026-01-31T05:00:00Z")
			}
			*p = t
			return nil
		})
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		fs.Usage()
		return errUsage
	}
	if !validFormat(format) {
		return fmt.Errorf("--format %q: want table, json or csv", format)
	}
	var err error
	if opt.Location, err = time.LoadLocation(tz); err != nil {
		return fmt.Errorf("--tz %q: %w", tz, err)
	}
	if opt.Leads, err = scoring.ParseLeads(leads); err != nil {
		return fmt.Errorf("--leads: %w", err)
	}
	if opt.Season < 1 {
		return fmt.Errorf("--season %d: want a whole number ≥ 1", opt.Season)
	}
	opt.Notes = stderr
	rs, err := evaluate.File(fs.Arg(0), history, opt)
	if err != nil {
		return err
	}
	return report.Write(stdout, format, rs)
}

func validFormat(f string) bool {
	for _, g := range report.Formats {
		if f == g {
			return true
		}
	}
	return false
}
