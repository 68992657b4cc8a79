package server

import (
	"context"
	"net/http"
	"os"
	"path/filepath"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus/promhttp"

	"github.com/aftercast/aftercast/server/web"
)

// httpHandler serves /metrics, /healthz (the process is up) and /readyz
// (the database answers).
func (s *Server) httpHandler() http.Handler {
	mux := http.NewServeMux()
	// A scrape reads every drift state from PostgreSQL: a few at a time. A
	// failed read fails the scrape (HTTP 500, up = 0) and is counted in
	// promhttp_metric_handler_errors_total{cause="gathering"}.
	mux.Handle("GET /metrics", promhttp.HandlerFor(s.cfg.Registry, promhttp.HandlerOpts{
		ErrorLog: slogPrinter{s}, Registry: s.cfg.Registry, MaxRequestsInFlight: 4}))
	mux.HandleFunc("GET /healthz", func(w http.ResponseWriter, _ *http.Request) {
		w.Write([]byte("ok\n"))
	})
	mux.HandleFunc("GET /readyz", func(w http.ResponseWriter, r *http.Request) {
		if err := s.ready.check(r.Context()); err != nil {
			http.Error(w, "database unavailable", http.StatusServiceUnavailable)
			return
		}
		w.Write([]byte("ok\n"))
	})
	// Everything else is the status page.
	mux.Handle("/", web.New(s.store, s.drift, s.log))
	return mux
}

type slogPrinter struct{ s *Server }

func (p slogPrinter) Println(v ...any) { p.s.log.Error("metrics exposition", "err", v) }

// readiness caches the database ping for a second, so that a probe storm
// does not become a query storm. A request that finds the database gone
// drops the cache (lost), so that a success is never served across it.
type readiness struct {
	srv  *Server
	mu   sync.Mutex
	at   time.Time
	last error
}

// lost forgets the cached result: the next probe pings again.
func (r *readiness) lost() {
	r.mu.Lock()
	r.at = time.Time{}
	r.mu.Unlock()
}

func (r *readiness) check(ctx context.Context) error {
	r.mu.Lock()
	defer r.mu.Unlock()
	if time.Since(r.at) < time.Second {
		return r.last
	}
	ctx, cancel := context.WithTimeout(ctx, 2*time.Second)
	defer cancel()
	r.last, r.at = r.srv.pool.Ping(ctx), time.Now()
	return r.last
}

// stateDir is $XDG_STATE_HOME, else ~/.local/state; for root it is
// /var/lib, because the private cluster runs as the postgres user, which
// cannot reach into /root.
func stateDir() (string, error) {
	if os.Geteuid() == 0 {
		return "/var/lib", nil
	}
	if d := os.Getenv("XDG_STATE_HOME"); d != "" {
		return d, nil
	}
	home, err := os.UserHomeDir()
	if err != nil {
		return "", err
	}
	return filepath.Join(home, ".local", "state"), nil
}
