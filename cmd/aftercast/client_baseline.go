package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/backtest"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/driftreport"
	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
)

func runBaseline(args []string, stdout, stderr io.Writer) error {
	return subcommand("baseline", args, stderr,
		sub{"import", func(args []string) error { return baselineImport(args, stdout, stderr) }},
		sub{"show", func(args []string) error { return baselineShow(args, stdout, stderr) }},
	)
}

func baselineImport(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("baseline import", "FILE.csv (columns series,origin_time,target_time,forecast,actual; - for stdin)", stderr)
	cf := addStreamFlags(fs)
	model := fs.String("model", "", "model the backtest is of (required)")
	history := fs.String("history", "", "training actuals `FILE` (columns series,time,value) for the MASE scale")
	batch := fs.Int("batch", 5000, "backtest rows or training actuals per stream message")
	format := fs.String("format", "table", "output: table or json")
	file, err := pushArgs(fs, args, batch)
	if err != nil {
		return err
	}
	if *model == "" {
		fmt.Fprintln(stderr, "aftercast baseline import: --model is required")
		fs.Usage()
		return errUsage
	}
	if err := tableOrJSON(*format); err != nil {
		return err
	}
	if file == "-" && *history == "-" {
		return errors.New("--history -: standard input is the backtest file already")
	}

	// The import is atomic, so nothing is sent unless every row reads.
	var im backtest.Import
	err = readFile(file, im.ReadBacktest)
	if *history != "" {
		err = errors.Join(err, readFile(*history, im.ReadTraining))
	}
	if err != nil {
		return fmt.Errorf("%w\nnothing was sent", err)
	}

	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	client := aftercastv1.NewBaselineServiceClient(conn)
	info, err := cf.serverInfo(conn)
	if err != nil {
		return err
	}
	limit := messageBytes(info)
	// An import is idempotent: when an attempt that failed had committed
	// after all, the next finds its rows equal to the active version,
	// makes nothing new and answers with that version.
	var resp *aftercastv1.ImportBaselineResponse
	err = cf.retry(context.Background(), "baseline import", func() error {
		prog := newProgress(stderr, "rows")
		defer prog.done()
		total, sent := int64(im.Rows()+im.TrainingActuals()), int64(0)
		var err error
		resp, err = streamBatches(client.ImportBaseline, cf.timeout, batching{items: 1, bytes: limit},
			im.Messages(*model, *batch, limit),
			func(reqs []*aftercastv1.ImportBaselineRequest) *aftercastv1.ImportBaselineRequest {
				sent += int64(len(reqs[0].GetRows()) + len(reqs[0].GetTrainingActuals()))
				return reqs[0]
			},
			func() { prog.update(total, sent) })
		return err
	})
	if err != nil {
		return importError(cf, &im, err)
	}
	if *format == "json" {
		return driftreport.WriteJSON(stdout, driftreport.ToImport(resp))
	}
	fmt.Fprintf(stdout, "sent %d backtest rows and %d training actuals of %d series\n", im.Rows(), im.TrainingActuals(), im.Series())
	return driftreport.WriteImport(stdout, resp)
}

// readFile opens file ("-" is standard input) for read.
func readFile(file string, read func(r io.Reader, name string) error) error {
	if file == "-" {
		return read(os.Stdin, inputName(file))
	}
	f, err := os.Open(file)
	if err != nil {
		return err
	}
	defer f.Close()
	return read(f, file)
}

// importError reports a refused import by the file lines of the rows the
// service names ("rows[1234].target_time" is a line of the backtest file).
func importError(cf *clientFlags, im *backtest.Import, err error) error {
	st, ok := status.FromError(err)
	if !ok || st.Code() != codes.InvalidArgument {
		return cf.rpcError(err, "")
	}
	var lines []string
	for _, d := range st.Details() {
		if br, ok := d.(*errdetails.BadRequest); ok {
			for _, v := range br.GetFieldViolations() {
				lines = append(lines, im.Describe(v.GetField(), v.GetDescription()))
			}
		}
	}
	if len(lines) == 0 {
		return fmt.Errorf("import refused, nothing stored: %s", st.Message())
	}
	return fmt.Errorf("import refused, nothing stored:\n  %s", strings.Join(lines, "\n  "))
}

func baselineShow(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("baseline show", "", stderr)
	cf := addClientFlags(fs)
	series := fs.String("series", "", "key of the series (required)")
	model := fs.String("model", "", "model of the baseline (required)")
	version := fs.Int("version", 0, "baseline version (0: the active one)")
	window := fs.Int("window", 0, "live window size n, in origins, for the bands and limits (0: the service's default, 30)")
	format := fs.String("format", "table", "output: table or json")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return err
	}
	if len(pos) != 0 || *series == "" || *model == "" {
		if len(pos) == 0 {
			fmt.Fprintln(stderr, "aftercast baseline show: --series and --model are required")
		}
		fs.Usage()
		return errUsage
	}
	if err := tableOrJSON(*format); err != nil {
		return err
	}
	req := &aftercastv1.GetBaselineRequest{Series: *series, Model: *model}
	switch {
	case *version < 0:
		return fmt.Errorf("--version %d: want 0 (active) or a version number", *version)
	case *version > 0:
		v := int32(*version)
		req.Version = &v
	}
	switch {
	case *window < 0:
		return fmt.Errorf("--window %d: want 0 (default) or a number of origins", *window)
	case *window > 0:
		n := int32(*window)
		req.WindowN = &n
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	ctx, cancel := cf.call()
	defer cancel()
	resp, err := aftercastv1.NewBaselineServiceClient(conn).GetBaseline(ctx, req)
	if err != nil {
		return baselineNotFound(cf, conn, req, err)
	}
	if *format == "json" {
		return driftreport.WriteJSON(stdout, driftreport.ToBaseline(resp))
	}
	return driftreport.WriteBaseline(stdout, resp)
}

// baselineNotFound tells a missing series from a missing baseline, which
// the service both reports as NOT_FOUND.
func baselineNotFound(cf *clientFlags, conn grpc.ClientConnInterface, req *aftercastv1.GetBaselineRequest, err error) error {
	if status.Code(err) == codes.NotFound {
		ctx, cancel := cf.call()
		defer cancel()
		_, serr := aftercastv1.NewSeriesServiceClient(conn).GetSeries(ctx, &aftercastv1.GetSeriesRequest{Key: req.GetSeries()})
		if serr == nil {
			if req.Version != nil {
				return fmt.Errorf("series %s has no baseline version %d of model %s", req.GetSeries(), req.GetVersion(), req.GetModel())
			}
			return fmt.Errorf("model %s has no baseline for series %s: import one with `aftercast baseline import`", req.GetModel(), req.GetSeries())
		}
	}
	return cf.rpcError(err, "series "+req.GetSeries())
}
