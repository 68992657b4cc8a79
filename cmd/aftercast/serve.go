package main

import (
	"context"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"syscall"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"

	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/store"
)

func runServe(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("serve", "", stderr)
	var cfg server.Config
	var logFormat, logLevel string
	fs.StringVar(&cfg.Listen, "listen", "127.0.0.1:7410", "gRPC listen address")
	fs.StringVar(&cfg.MetricsListen, "metrics-listen", "127.0.0.1:7411", "HTTP address for /metrics, /healthz and /readyz (\"-\" to disable)")
	fs.StringVar(&cfg.DatabaseURL, "database-url", os.Getenv("AFTERCAST_DATABASE_URL"), "PostgreSQL URL (env AFTERCAST_DATABASE_URL); empty: start a private PostgreSQL in --data-dir")
	fs.StringVar(&cfg.DataDir, "data-dir", "", "data directory of the private PostgreSQL (default $XDG_STATE_HOME/aftercast/pgdata, /var/lib/aftercast/pgdata for root)")
	fs.BoolVar(&cfg.SkipMigrate, "skip-migrate", false, "do not apply schema migrations at start (run 'aftercast migrate' instead)")
	fs.StringVar(&cfg.WebConfigFile, "web.config.file", "", "exporter-toolkit web config (TLS, basic auth) for the HTTP listener; empty: plain HTTP")
	fs.DurationVar(&cfg.Retention, "retention", 0, "delete forecasts and actuals older than this, e.g. 8760h (0 keeps everything)")
	fs.IntVar(&cfg.Limits.MaxHorizon, "max-horizon", store.DefaultLimits.MaxHorizon, "largest horizon a series may have")
	fs.IntVar(&cfg.Limits.MaxBatch, "max-batch", store.DefaultLimits.MaxBatch, "most forecast vectors or actuals in one message")
	fs.IntVar(&cfg.MaxMessageBytes, "max-message-bytes", 16<<20, "largest gRPC message accepted")
	fs.IntVar(&cfg.DBMaxConns, "db-max-conns", 0, fmt.Sprintf("PostgreSQL connections in the pool (default: the URL's pool_max_conns, else %d here)", server.DefaultDBMaxConns()))
	fs.DurationVar(&cfg.ShutdownTimeout, "shutdown-timeout", 10*time.Second, "how long to drain RPCs at shutdown before cutting them")
	fs.StringVar(&cfg.MetricsLeads, "metrics-leads", "decision", "leads with per-lead metric families: decision (each series' decision leads), all, or a list such as 1-24,48")
	fs.IntVar(&cfg.MetricsMaxSeries, "metrics-max-series", 2000, "at most this many (series, model) pairs get per-lead metric families, in key order (-1: no cap; 0: the default)")
	fs.StringVar(&logFormat, "log-format", "json", "log format: json or text")
	fs.StringVar(&logLevel, "log-level", "info", "log level: debug, info, warn or error")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	log, err := newLogger(stderr, logFormat, logLevel)
	if err != nil {
		return err
	}
	cfg.Logger = log
	cfg.Registry = prometheus.NewRegistry()
	cfg.Registry.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	srv, err := server.New(cfg)
	if err != nil {
		return err
	}
	return srv.Run(ctx)
}

func runMigrate(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("migrate", "", stderr)
	url := fs.String("database-url", os.Getenv("AFTERCAST_DATABASE_URL"), "PostgreSQL URL (env AFTERCAST_DATABASE_URL)")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *url == "" {
		return fmt.Errorf("--database-url (or AFTERCAST_DATABASE_URL) is required; 'aftercast serve' without one migrates its private database itself")
	}
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	pool, err := pgxpool.New(ctx, *url)
	if err != nil {
		return fmt.Errorf("database URL: %w", err)
	}
	defer pool.Close()
	applied, err := store.Migrate(ctx, pool, nil)
	if err != nil {
		return err
	}
	if len(applied) == 0 {
		fmt.Fprintln(stdout, "schema is up to date")
		return nil
	}
	fmt.Fprintf(stdout, "applied migrations %v\n", applied)
	return nil
}

func newLogger(w io.Writer, format, level string) (*slog.Logger, error) {
	var lv slog.Level
	if err := lv.UnmarshalText([]byte(level)); err != nil {
		return nil, fmt.Errorf("--log-level %q: want debug, info, warn or error", level)
	}
	opts := &slog.HandlerOptions{Level: lv}
	switch format {
	case "json":
		return slog.New(slog.NewJSONHandler(w, opts)), nil
	case "text":
		return slog.New(slog.NewTextHandler(w, opts)), nil
	}
	return nil, fmt.Errorf("--log-format %q: want json or text", format)
}
