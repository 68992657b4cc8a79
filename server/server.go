// Package server is the aftercast service: the gRPC API over the store,
// the HTTP listener for /metrics and health, and their lifecycle. It never
// touches OS signals, so tests embed it on port 0; cmd/aftercast wires
// flags and signals to it.
package server

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"path/filepath"
	"runtime"
	"strings"
	"sync"
	"time"

	"github.com/grpc-ecosystem/go-grpc-middleware/v2/interceptors/logging"
	"github.com/grpc-ecosystem/go-grpc-middleware/v2/interceptors/recovery"
	"github.com/jackc/pgx/v5/pgxpool"
	"github.com/prometheus/client_golang/prometheus"
	toolkitweb "github.com/prometheus/exporter-toolkit/web"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/health"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/keepalive"
	"google.golang.org/grpc/reflection"
	"google.golang.org/grpc/status"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server/drift"
	"github.com/aftercast/aftercast/server/pglocal"
	"github.com/aftercast/aftercast/server/store"
)

// Config is the service's configuration. Zero values are the documented
// defaults.
type Config struct {
	Listen        string // gRPC address; default 127.0.0.1:7410
	MetricsListen string // HTTP address for /metrics, /healthz, /readyz; default 127.0.0.1:7411; "-" disables it
	// DatabaseURL is the PostgreSQL URL. Empty: start a private cluster
	// with pglocal in DataDir.
	DatabaseURL string
	DataDir     string // for the private cluster; default under the user's state directory
	SkipMigrate bool   // do not apply migrations at start (run `aftercast migrate` instead)
	// DBMaxConns is the size of the PostgreSQL pool. Zero: the URL's
	// pool_max_conns when it sets one, else DefaultDBMaxConns.
	DBMaxConns int

	// Retention deletes forecasts and actuals older than this, checked
	// hourly. Zero keeps everything.
	Retention time.Duration

	// WebConfigFile is an exporter-toolkit web configuration (TLS, basic
	// auth) for the HTTP listener: Prometheus' --web.config.file
	// convention. Empty serves plain HTTP.
	WebConfigFile string

	Limits          store.Limits
	MaxMessageBytes int           // largest gRPC message received; default 16 MiB
	ShutdownTimeout time.Duration // bound on draining RPCs at stop; default 10s

	// MetricsLeads selects the leads that get per-lead metric families:
	// "decision" (each series' decision leads; the default when empty),
	// "all", or a lead list such as "1-24,48".
	MetricsLeads string
	// MetricsMaxSeries caps the (series, model) pairs that get per-lead
	// metric families, in key order; the rest are counted in
	// aftercast_metrics_series_dropped_total. Zero means 2000, a negative
	// value no cap.
	MetricsMaxSeries int

	Logger *slog.Logger // default: discard
	// Registry receives the service's metrics; default: a new registry.
	// It must not be shared with another Server.
	Registry *prometheus.Registry
}

func (c *Config) defaults() {
	if c.Listen == "" {
		c.Listen = "127.0.0.1:7410"
	}
	if c.MetricsListen == "" {
		c.MetricsListen = "127.0.0.1:7411"
	}
	if c.MaxMessageBytes <= 0 {
		c.MaxMessageBytes = 16 << 20
	}
	if c.ShutdownTimeout <= 0 {
		c.ShutdownTimeout = 10 * time.Second
	}
	if c.Logger == nil {
		c.Logger = slog.New(slog.DiscardHandler)
	}
	if c.Registry == nil {
		c.Registry = prometheus.NewRegistry()
	}
}

// Server is a running or startable aftercast service.
type Server struct {
	cfg Config
	log *slog.Logger

	metrics  *metrics
	cluster  *pglocal.Cluster
	pool     *pgxpool.Pool
	store    *store.Store
	drift    *drift.Evaluator
	api      *api
	grpc     *grpc.Server
	health   *health.Server
	http     *http.Server
	grpcLis  net.Listener
	httpLis  net.Listener
	serveErr chan error
	ready    *readiness
	stopOnce sync.Once
	bg       sync.WaitGroup
	bgStop   context.CancelFunc
}

// New validates cfg and returns a Server that Start will bring up.
func New(cfg Config) (*Server, error) {
	cfg.defaults()
	leads, err := parseLeadSelection(cfg.MetricsLeads)
	if err != nil {
		return nil, err
	}
	s := &Server{cfg: cfg, log: cfg.Logger, serveErr: make(chan error, 2),
		metrics: newMetrics(cfg.Registry, cfg.Logger, leads, cfg.MetricsMaxSeries)}
	s.ready = &readiness{srv: s}
	return s, nil
}

// DefaultDBMaxConns is the pool size unless configured: pgx's own default
// is max(4, CPUs), which left 16 concurrent producers queueing for 4
// connections on two cores (a push waited seconds for one). A push holds a
// connection for one transaction at a time; 16 lets that many producers and
// the evaluator's workers proceed at once, far below PostgreSQL's default
// max_connections of 100.
func DefaultDBMaxConns() int32 { return int32(max(16, 4*runtime.NumCPU())) }

// DefaultDataDir is where `aftercast serve` keeps its private cluster when
// no database URL is given.
func DefaultDataDir() (string, error) {
	dir, err := stateDir()
	if err != nil {
		return "", err
	}
	return filepath.Join(dir, "aftercast", "pgdata"), nil
}

// Start opens the database (starting a private cluster if needed),
// migrates it, and starts serving gRPC and HTTP. On error everything
// started so far is stopped.
func (s *Server) Start(ctx context.Context) (err error) {
	defer func() {
		if err != nil {
			_ = s.Stop(context.WithoutCancel(ctx))
		}
	}()
	url := s.cfg.DatabaseURL
	if url == "" {
		dir := s.cfg.DataDir
		if dir == "" {
			if dir, err = DefaultDataDir(); err != nil {
				return err
			}
		}
		s.log.Info("no database URL given: starting a private PostgreSQL", "data_dir", dir)
		s.cluster, err = pglocal.Start(ctx, pglocal.Options{DataDir: dir, Logger: s.log})
		if err != nil {
			if errors.Is(err, pglocal.ErrNoBinaries) {
				return fmt.Errorf("%w\nor pass --database-url (or AFTERCAST_DATABASE_URL)", err)
			}
			return fmt.Errorf("starting the private PostgreSQL: %w", err)
		}
		url = s.cluster.URL("postgres")
		s.log.Info("private PostgreSQL is up", "data_dir", s.cluster.DataDir())
	}
	pcfg, err := pgxpool.ParseConfig(url)
	if err != nil {
		return fmt.Errorf("database URL: %w", err) // pgconn redacts the password
	}
	switch {
	case s.cfg.DBMaxConns > 0:
		pcfg.MaxConns = int32(s.cfg.DBMaxConns)
	case !strings.Contains(url, "pool_max_conns"):
		pcfg.MaxConns = DefaultDBMaxConns()
	}
	if s.pool, err = pgxpool.NewWithConfig(ctx, pcfg); err != nil {
		return fmt.Errorf("opening database pool: %w", err)
	}
	pingCtx, cancel := context.WithTimeout(ctx, 30*time.Second)
	err = s.pool.Ping(pingCtx)
	cancel()
	if err != nil {
		return fmt.Errorf("connecting to the database: %w", err)
	}
	if !s.cfg.SkipMigrate {
		if _, err := store.Migrate(ctx, s.pool, s.log); err != nil {
			return err
		}
	}
	s.store = store.New(s.pool, s.cfg.Limits)
	s.metrics.store.Store(s.store)
	s.drift = drift.New(s.store, drift.Config{Logger: s.log, OnEvents: s.announced})
	bgCtx, cancel := context.WithCancel(context.WithoutCancel(ctx))
	s.bgStop = cancel
	// Marks left by an earlier process (or another replica) are drained
	// from the start.
	s.bg.Go(func() { s.drift.Run(bgCtx) })

	var lc net.ListenConfig
	if s.grpcLis, err = lc.Listen(ctx, "tcp", s.cfg.Listen); err != nil {
		return fmt.Errorf("gRPC listener: %w", err)
	}
	s.grpc = s.newGRPC()
	go func() { s.serveErr <- s.grpc.Serve(s.grpcLis) }()

	if s.cfg.MetricsListen != "-" {
		if s.httpLis, err = lc.Listen(ctx, "tcp", s.cfg.MetricsListen); err != nil {
			return fmt.Errorf("metrics listener: %w", err)
		}
		s.http = &http.Server{Handler: s.httpHandler(), ReadHeaderTimeout: 10 * time.Second}
		webCfg := &toolkitweb.FlagConfig{WebConfigFile: &s.cfg.WebConfigFile, WebSystemdSocket: new(bool), WebListenAddresses: &[]string{}}
		go func() {
			if err := toolkitweb.Serve(s.httpLis, s.http, webCfg, s.log); !errors.Is(err, http.ErrServerClosed) {
				s.serveErr <- err
			}
		}()
	}
	if s.cfg.Retention > 0 {
		s.bg.Go(func() { s.retain(bgCtx) })
	}
	s.log.Info("aftercast serving", "grpc", s.GRPCAddr(), "metrics", s.MetricsAddr())
	return nil
}

// retain applies the retention setting now and then every hour.
func (s *Server) retain(ctx context.Context) {
	tick := time.NewTicker(time.Hour)
	defer tick.Stop()
	for {
		cutoff := time.Now().Add(-s.cfg.Retention)
		runCtx, cancel := context.WithTimeout(ctx, 30*time.Minute)
		f, a, err := s.store.DeleteBefore(runCtx, cutoff)
		cancel()
		switch {
		case ctx.Err() != nil:
			return
		case err != nil:
			s.log.Error("retention", "err", err)
		case f+a > 0:
			s.log.Info("retention removed old inputs", "before", cutoff, "forecasts", f, "actuals", a)
		}
		select {
		case <-ctx.Done():
			return
		case <-tick.C:
		}
	}
}

func (s *Server) newGRPC() *grpc.Server {
	logOpts := []logging.Option{logging.WithLogOnEvents(logging.FinishCall)}
	recoverOpt := recovery.WithRecoveryHandlerContext(func(ctx context.Context, p any) error {
		s.log.ErrorContext(ctx, "panic in RPC handler", "panic", fmt.Sprint(p))
		return status.Error(codes.Internal, "internal error")
	})
	srv := grpc.NewServer(
		grpc.MaxRecvMsgSize(s.cfg.MaxMessageBytes),
		grpc.MaxConcurrentStreams(256),
		grpc.KeepaliveParams(keepalive.ServerParameters{MaxConnectionAge: 30 * time.Minute, MaxConnectionAgeGrace: time.Minute}),
		grpc.ChainUnaryInterceptor(
			s.metrics.grpc.UnaryServerInterceptor(),
			logging.UnaryServerInterceptor(slogAdapter(s.log), logOpts...),
			recovery.UnaryServerInterceptor(recoverOpt),
			unaryNames,
		),
		grpc.ChainStreamInterceptor(
			s.metrics.grpc.StreamServerInterceptor(),
			logging.StreamServerInterceptor(slogAdapter(s.log), logOpts...),
			recovery.StreamServerInterceptor(recoverOpt),
			streamNames,
		),
	)
	api := &api{store: s.store, drift: s.drift, log: s.log, m: s.metrics, stopping: make(chan struct{}), dbLost: s.ready.lost}
	s.api = api
	aftercastv1.RegisterSeriesServiceServer(srv, &seriesService{api: api})
	aftercastv1.RegisterForecastServiceServer(srv, &forecastService{api: api})
	aftercastv1.RegisterActualServiceServer(srv, &actualService{api: api})
	aftercastv1.RegisterAccuracyServiceServer(srv, &accuracyService{api: api})
	aftercastv1.RegisterBaselineServiceServer(srv, &baselineService{api: api})
	aftercastv1.RegisterDriftServiceServer(srv, &driftService{api: api})
	aftercastv1.RegisterInfoServiceServer(srv, &infoService{api: api, maxMessageBytes: s.cfg.MaxMessageBytes})
	s.health = health.NewServer()
	healthpb.RegisterHealthServer(srv, s.health)
	for name := range srv.GetServiceInfo() {
		s.health.SetServingStatus(name, healthpb.HealthCheckResponse_SERVING)
	}
	reflection.Register(srv)
	s.metrics.grpc.InitializeMetrics(srv)
	return srv
}

// slogAdapter sends go-grpc-middleware's call logs to slog.
func slogAdapter(l *slog.Logger) logging.Logger {
	return logging.LoggerFunc(func(ctx context.Context, lvl logging.Level, msg string, fields ...any) {
		l.Log(ctx, slog.Level(lvl), msg, fields...) //nolint:sloglint // passes on the middleware's own constant messages
	})
}

// GRPCAddr is the address gRPC listens on, once started.
func (s *Server) GRPCAddr() string {
	if s.grpcLis == nil {
		return ""
	}
	return s.grpcLis.Addr().String()
}

// MetricsAddr is the address of the HTTP listener, once started.
func (s *Server) MetricsAddr() string {
	if s.httpLis == nil {
		return ""
	}
	return s.httpLis.Addr().String()
}

// Store is the server's store, for tests and the demo.
func (s *Server) Store() *store.Store { return s.store }

// Drift is the server's drift evaluator, for tests and benchmarks.
func (s *Server) Drift() *drift.Evaluator { return s.drift }

// announced counts and logs the drift events an evaluation committed.
func (s *Server) announced(evs []store.DriftEvent) {
	s.metrics.countStateChanges(evs)
	for _, ev := range evs {
		s.log.Info("drift state changed", "series", ev.Series, "model", ev.Model, "lead", ev.Lead,
			"from", ev.Previous, "to", ev.State, "metric", ev.Metric, "onset_origin", ev.Origin, "cause", ev.Cause)
	}
}

// Run starts the server and serves until ctx is cancelled or serving
// fails, then stops it.
func (s *Server) Run(ctx context.Context) error {
	if err := s.Start(ctx); err != nil {
		return err
	}
	var err error
	select {
	case <-ctx.Done():
	case err = <-s.serveErr:
		s.log.Error("serving failed", "err", err)
	}
	stopCtx, cancel := context.WithTimeout(context.WithoutCancel(ctx), s.cfg.ShutdownTimeout+30*time.Second)
	defer cancel()
	return errors.Join(err, s.Stop(stopCtx))
}

// Stop shuts down in order: health NOT_SERVING, drain gRPC (bounded by
// ShutdownTimeout, then cut), close the pool, stop the HTTP listener, stop
// a private cluster. It is safe to call more than once.
func (s *Server) Stop(ctx context.Context) error {
	var errs []error
	s.stopOnce.Do(func() {
		if s.health != nil {
			s.health.Shutdown()
		}
		if s.api != nil {
			close(s.api.stopping)
		}
		if s.bgStop != nil {
			s.bgStop()
			s.bg.Wait()
		}
		if s.grpc != nil {
			t := time.AfterFunc(s.cfg.ShutdownTimeout, s.grpc.Stop)
			s.grpc.GracefulStop()
			t.Stop()
		}
		if s.pool != nil {
			s.pool.Close()
		}
		if s.http != nil {
			hctx, cancel := context.WithTimeout(ctx, 5*time.Second)
			errs = append(errs, s.http.Shutdown(hctx))
			cancel()
		}
		if s.cluster != nil {
			errs = append(errs, s.cluster.Stop(ctx))
		}
		s.log.Info("aftercast stopped")
	})
	return errors.Join(errs...)
}
