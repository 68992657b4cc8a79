package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"os"
	"os/signal"
	"syscall"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"google.golang.org/grpc"
	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/demo"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/driftreport"
	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/pglocal"
)

// The demo runs the service in-process on a throwaway PostgreSQL and is
// its first client: it sends the invented scenario of package demo through
// the public gRPC API as a producer would, then reports what the service
// judged. Only the generation is the demo's own; every number in the
// report comes back from the service.

// demoRPCTimeout bounds each call and each wait on a stream.
const demoRPCTimeout = 2 * time.Minute

// demoBatch is the most actuals or vectors in one stream message: a whole
// day fits in one.
const demoBatch = 1000

func runDemo(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("demo", "", stderr)
	once := fs.Bool("once", false, "print the report and exit, instead of serving until interrupted")
	format := fs.String("format", "table", "report: table, or json (exactly what 'aftercast drift --format json' prints once every push is judged)")
	listen := fs.String("listen", "", "gRPC address to serve on (default 127.0.0.1:7410; with --once a free port)")
	metricsListen := fs.String("metrics-listen", "", "HTTP address for the status page, /metrics and health (default 127.0.0.1:7411; with --once a free port; - for none)")
	speed := fs.Float64("speed", 0, "production days streamed per second of wall time; 0 streams them as fast as the service takes them")
	seed := fs.Uint64("seed", demo.DefaultSeed, "seed of the invented data")
	errorScale := aftercastv1.ErrorScale_ERROR_SCALE_AUTO
	fs.Func("error-scale", errorScaleHelp+" (default auto); the report ends with what it did to the healthy substations", func(v string) (err error) {
		errorScale, err = parseErrorScale(v)
		return err
	})
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 0 {
		fs.Usage()
		return errUsage
	}
	if err := tableOrJSON(*format); err != nil {
		return err
	}
	if *speed < 0 {
		return fmt.Errorf("--speed %v: want 0 or more days per second", *speed)
	}
	addr, metrics := *listen, *metricsListen
	switch {
	case addr == "" && *once:
		addr = "127.0.0.1:0"
	case addr == "":
		addr = defaultAddr
	}
	switch {
	case metrics == "" && *once:
		metrics = "127.0.0.1:0"
	case metrics == "":
		metrics = "127.0.0.1:7411"
	}

	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	began := time.Now()
	sc, err := demo.Generate(*seed)
	if err != nil {
		return err
	}

	// A throwaway cluster: no fsync, removed by Stop, and stopped by the
	// kernel should this process die first.
	log := slog.New(slog.NewTextHandler(stderr, &slog.HandlerOptions{Level: slog.LevelWarn}))
	fmt.Fprintln(stderr, "aftercast demo: starting a throwaway PostgreSQL and the service ...")
	cluster, err := pglocal.Start(ctx, pglocal.Options{Logger: log})
	if err != nil {
		if errors.Is(err, pglocal.ErrNoBinaries) {
			return fmt.Errorf("%w\nthe demo runs its own throwaway PostgreSQL and needs its server binaries", err)
		}
		return fmt.Errorf("starting PostgreSQL: %w", err)
	}
	defer func() {
		sctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 30*time.Second)
		defer cancel()
		if err := cluster.Stop(sctx); err != nil {
			fmt.Fprintf(stderr, "aftercast demo: stopping PostgreSQL: %v\n", err)
		}
	}()
	srv, err := server.New(server.Config{Listen: addr, MetricsListen: metrics, DatabaseURL: cluster.URL("postgres"),
		Logger: log, Registry: prometheus.NewRegistry()})
	if err != nil {
		return err
	}
	if err := srv.Start(ctx); err != nil {
		return err
	}
	defer func() {
		sctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 30*time.Second)
		defer cancel()
		if err := srv.Stop(sctx); err != nil {
			fmt.Fprintf(stderr, "aftercast demo: stopping the service: %v\n", err)
		}
	}()

	cf := &clientFlags{addr: srv.GRPCAddr(), timeout: demoRPCTimeout}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	if !*once {
		printEndpoints(ctx, stderr, srv)
	}
	p := &producer{cf: cf, conn: conn, sc: sc, stderr: stderr, errorScale: errorScale}
	err = p.setUp(ctx)
	if err == nil {
		err = p.stream(ctx, *speed)
	}
	if ctx.Err() != nil {
		return errors.New("interrupted")
	}
	if err != nil {
		return err
	}
	states, events, err := p.results(ctx)
	if ctx.Err() != nil {
		return errors.New("interrupted")
	}
	if err != nil {
		return err
	}
	fmt.Fprintf(stderr, "aftercast demo: %d production days streamed and judged; report after %.1fs\n", demo.ProductionDays, time.Since(began).Seconds())
	if *format == "json" {
		err = driftreport.WriteJSON(stdout, driftreport.ToStates(states))
	} else {
		sc.WriteHeader(stdout)
		err = sc.WriteReport(stdout, states, events, p.scale)
	}
	if err != nil || *once {
		return err
	}
	printEndpoints(ctx, stderr, srv)
	fmt.Fprintln(stderr, "aftercast demo: serving until interrupted (Ctrl-C); everything is deleted at exit")
	<-ctx.Done()
	fmt.Fprintln(stderr, "aftercast demo: stopping")
	return nil
}

// printEndpoints says where the running demo can be reached.
func printEndpoints(ctx context.Context, w io.Writer, srv *server.Server) {
	fmt.Fprintf(w, "aftercast demo: gRPC at %s (try: aftercast drift --addr %[1]s; aftercast events --follow --addr %[1]s)\n", srv.GRPCAddr())
	if m := srv.MetricsAddr(); m != "" {
		if statusPage(ctx, m) {
			fmt.Fprintf(w, "aftercast demo: status page at http://%s/\n", m)
		}
		fmt.Fprintf(w, "aftercast demo: metrics at http://%s/metrics\n", m)
	}
}

// statusPage reports whether the service serves a status page at "/",
// asking for up to 5 seconds.
func statusPage(ctx context.Context, addr string) bool {
	ctx, cancel := context.WithTimeout(ctx, 5*time.Second)
	defer cancel()
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, "http://"+addr+"/", nil)
	if err != nil {
		return false
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return false
	}
	resp.Body.Close()
	return resp.StatusCode == http.StatusOK
}

// producer sends the scenario to the service as the utility's forecasting
// job and meter feed would.
type producer struct {
	cf         *clientFlags
	conn       *grpc.ClientConn
	sc         *demo.Scenario
	stderr     io.Writer
	errorScale aftercastv1.ErrorScale // of every series created
	scale      demo.ErrorScale        // as the service reports it, set by setUp
}

// next hands out the items of a slice one at a time, as streamBatches
// reads them.
func next[T any](items []T) func() (T, error) {
	i := 0
	return func() (T, error) {
		if i == len(items) {
			var zero T
			return zero, io.EOF
		}
		i++
		return items[i-1], nil
	}
}

// setUp creates the series with the producer's error scale and imports
// the backtest, with the training actuals, as baseline version 1 of every
// series; it keeps the error scale the service reports for the baselines.
func (p *producer) setUp(ctx context.Context) error {
	series := aftercastv1.NewSeriesServiceClient(p.conn)
	for _, s := range p.sc.Substations {
		cctx, cancel := p.cf.within(ctx)
		_, err := series.CreateSeries(cctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: s.Key,
			Step: demo.Step, Horizon: demo.Horizon, Season: demo.Season, Unit: demo.Unit, TimeZone: demo.Zone,
			DecisionLeads: demo.DecisionLeads(), ErrorScale: p.errorScale}})
		cancel()
		if err != nil {
			return fmt.Errorf("creating series %s: %w", s.Key, p.cf.rpcError(err, ""))
		}
	}

	const perMessage = 5000
	var msgs []*aftercastv1.ImportBaselineRequest
	for i := 0; i < len(p.sc.Backtest); i += perMessage {
		m := &aftercastv1.ImportBaselineRequest{Model: demo.Model}
		for _, r := range p.sc.Backtest[i:min(i+perMessage, len(p.sc.Backtest))] {
			m.Rows = append(m.Rows, &aftercastv1.BacktestRow{Series: r.Series, OriginTime: timestamppb.New(r.Origin),
				TargetTime: timestamppb.New(r.Target), Forecast: r.Forecast, Actual: r.Actual})
		}
		msgs = append(msgs, m)
	}
	for i := 0; i < len(p.sc.Training); i += perMessage {
		m := &aftercastv1.ImportBaselineRequest{}
		for _, a := range p.sc.Training[i:min(i+perMessage, len(p.sc.Training))] {
			m.TrainingActuals = append(m.TrainingActuals, &aftercastv1.TrainingActual{Series: a.Series,
				Time: timestamppb.New(a.Time), Value: a.Value})
		}
		msgs = append(msgs, m)
	}
	baselines := aftercastv1.NewBaselineServiceClient(p.conn)
	resp, err := streamBatches(baselines.ImportBaseline, p.cf.timeout, batching{items: 1, bytes: defaultMessageBytes}, next(msgs),
		func(reqs []*aftercastv1.ImportBaselineRequest) *aftercastv1.ImportBaselineRequest { return reqs[0] }, func() {})
	if err != nil {
		return fmt.Errorf("importing the backtest: %w", p.cf.rpcError(err, ""))
	}
	fmt.Fprintf(p.stderr, "aftercast demo: baselines imported: %d backtest rows and %d training actuals of %d series\n",
		len(p.sc.Backtest), len(p.sc.Training), len(resp.GetBaselines()))
	for _, b := range resp.GetBaselines() {
		for _, w := range b.GetVersion().GetWarnings() {
			// Usability is checked below, as the series' error scale
			// judges it; the import's own lead warning is of the plain
			// errors whatever the mode.
			if w.GetKind() == aftercastv1.BaselineWarningKind_BASELINE_WARNING_KIND_LEAD_NOT_USABLE {
				continue
			}
			fmt.Fprintf(p.stderr, "aftercast demo: warning: %s: %s\n", b.GetVersion().GetSeries(), w.GetMessage())
		}
	}

	// Every decision lead, and the pooled quantity the series level pages
	// on, must be usable (method.md §4: K ≥ 180, K_eff ≥ 30).
	p.scale = demo.ErrorScale{Exponents: map[string]float64{}}
	for _, s := range p.sc.Substations {
		cctx, cancel := p.cf.within(ctx)
		b, err := baselines.GetBaseline(cctx, &aftercastv1.GetBaselineRequest{Series: s.Key, Model: demo.Model})
		cancel()
		if err != nil {
			return fmt.Errorf("reading the baseline of %s: %w", s.Key, p.cf.rpcError(err, ""))
		}
		p.scale.Mode = b.GetErrorScale()
		p.scale.Exponents[s.Key] = b.GetPooled().GetErrorScaleExponent()
		for _, l := range append(b.GetLeads(), b.GetPooled()) {
			if !l.GetUsable() {
				fmt.Fprintf(p.stderr, "aftercast demo: warning: %s lead %d (0 = pooled): %s\n", s.Key, l.GetLead(), l.GetUnusableReason())
			}
		}
	}
	return nil
}

// stream sends the production days in order: each day the meter readings
// that arrived since the previous origin, then the day's forecasts. With
// speed > 0 it paces the days at that many per second.
func (p *producer) stream(ctx context.Context, speed float64) error {
	actuals := aftercastv1.NewActualServiceClient(p.conn)
	forecasts := aftercastv1.NewForecastServiceClient(p.conn)
	prog := newDemoProgress(p.stderr)
	start := time.Now()
	for i, day := range p.sc.Days {
		if speed > 0 {
			due := start.Add(time.Duration(float64(i) / speed * float64(time.Second)))
			select {
			case <-ctx.Done():
				return ctx.Err()
			case <-time.After(time.Until(due)):
			}
		}
		if err := ctx.Err(); err != nil {
			return err
		}
		as := make([]*aftercastv1.Actual, len(day.Actuals))
		for j, a := range day.Actuals {
			as[j] = &aftercastv1.Actual{Series: a.Series, Time: timestamppb.New(a.Time), Value: a.Value}
		}
		ar, err := streamBatches(actuals.StreamActuals, p.cf.timeout, batching{items: demoBatch, bytes: defaultMessageBytes}, next(as),
			func(as []*aftercastv1.Actual) *aftercastv1.StreamActualsRequest {
				return &aftercastv1.StreamActualsRequest{Actuals: as}
			}, func() {})
		if err != nil {
			return fmt.Errorf("day %d: pushing actuals: %w", day.N, p.cf.rpcError(err, ""))
		}
		if s := ar.GetSummary(); s.GetRejected() > 0 {
			return fmt.Errorf("day %d: %d actuals rejected, first: %s", day.N, s.GetRejected(), s.GetRejections()[0].GetReason())
		}
		if len(day.Forecasts) > 0 {
			fs := make([]*aftercastv1.Forecast, len(day.Forecasts))
			for j, f := range day.Forecasts {
				fs[j] = &aftercastv1.Forecast{Series: f.Series, Model: demo.Model, OriginTime: timestamppb.New(f.Origin),
					Values: &aftercastv1.Forecast_Dense{Dense: &aftercastv1.DenseValues{Values: f.Values}}}
			}
			fr, err := streamBatches(forecasts.StreamForecasts, p.cf.timeout, batching{items: demoBatch, bytes: defaultMessageBytes}, next(fs),
				func(fs []*aftercastv1.Forecast) *aftercastv1.StreamForecastsRequest {
					return &aftercastv1.StreamForecastsRequest{Forecasts: fs}
				}, func() {})
			if err != nil {
				return fmt.Errorf("day %d: pushing forecasts: %w", day.N, p.cf.rpcError(err, ""))
			}
			if s := fr.GetSummary(); s.GetRejected()+s.GetLate() > 0 {
				return fmt.Errorf("day %d: %d forecast points rejected and %d late", day.N, s.GetRejected(), s.GetLate())
			}
		}
		prog.day(day.N, len(p.sc.Days), day.Origin.In(p.sc.Location))
	}
	prog.done()
	return nil
}

// results waits until the service has judged everything streamed, then
// reads back every drift state and event.
func (p *producer) results(ctx context.Context) (driftreport.Listing, []*aftercastv1.DriftEvent, error) {
	drift := aftercastv1.NewDriftServiceClient(p.conn)
	fmt.Fprintln(p.stderr, "aftercast demo: everything streamed; waiting for the service to judge it ...")
	if err := waitSettled(ctx, p.cf, drift, demoSettleTimeout, demoSettlePoll); err != nil {
		return driftreport.Listing{}, nil, err
	}
	states, err := listDriftStates(ctx, p.cf, drift, "", "")
	if err != nil {
		return states, nil, err
	}
	var events []*aftercastv1.DriftEvent
	err = listEvents(ctx, p.cf, drift, eventFilter{}, func(e *aftercastv1.DriftEvent) error {
		events = append(events, e)
		return nil
	})
	if err != nil {
		return states, nil, p.cf.rpcError(err, "")
	}
	return states, events, nil
}

// The demo waits at most demoSettleTimeout for the service to judge what
// was streamed, asking every demoSettlePoll.
const (
	demoSettleTimeout = 2 * time.Minute
	demoSettlePoll    = 100 * time.Millisecond
)

// waitSettled waits until the service has no drift evaluation pending
// (every push acknowledged so far is judged), asking every poll, for at
// most timeout.
func waitSettled(ctx context.Context, cf *clientFlags, drift aftercastv1.DriftServiceClient, timeout, poll time.Duration) error {
	deadline := time.Now().Add(timeout)
	for {
		cctx, cancel := cf.within(ctx)
		resp, err := drift.ListDriftStates(cctx, &aftercastv1.ListDriftStatesRequest{PageSize: 1})
		cancel()
		if err != nil {
			return fmt.Errorf("waiting for drift evaluation: %w", cf.rpcError(err, ""))
		}
		pending := resp.GetPendingEvaluations()
		if pending == 0 {
			return nil
		}
		if !time.Now().Add(poll).Before(deadline) {
			return fmt.Errorf("drift evaluation did not finish within %v of the last push: %d evaluations still pending "+
				"(the service's evaluator is behind or stuck; its log may say why)", timeout, pending)
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(poll):
		}
	}
}

// demoProgress shows the streaming on stderr: a line rewritten in place on
// a terminal, else a line every ten days.
type demoProgress struct {
	w     io.Writer
	tty   bool
	start time.Time
}

func newDemoProgress(w io.Writer) *demoProgress {
	p := &demoProgress{w: w, start: time.Now()}
	if f, ok := w.(*os.File); ok {
		if fi, err := f.Stat(); err == nil && fi.Mode()&os.ModeCharDevice != 0 {
			p.tty = true
		}
	}
	return p
}

func (p *demoProgress) day(n, of int, origin time.Time) {
	what := fmt.Sprintf("production day %d (%s)", n, origin.Format("Mon 2 Jan 2006"))
	if n > demo.ProductionDays {
		what = fmt.Sprintf("actuals of %s (scoring the last forecasts)", origin.Format("Mon 2 Jan 2006"))
	}
	elapsed := time.Since(p.start).Seconds()
	switch {
	case p.tty:
		fmt.Fprintf(p.w, "\r%d/%d %s, %.1fs\033[K", n, of, what, elapsed)
	case n%10 == 0 || n == of:
		fmt.Fprintf(p.w, "aftercast demo: streamed %s, %.1fs\n", what, elapsed)
	}
}

func (p *demoProgress) done() {
	if p.tty {
		fmt.Fprint(p.w, "\r\033[K")
	}
}
