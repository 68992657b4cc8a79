// Package web is aftercast's status pages for people: an overview of every
// (series, model) with its drift state, drifted leads and freshness, and a
// page per (series, model) with the lead-step chart against the backtest
// band, one lead's windowed MAE over origins, the drift events and a
// filterable, paged table of pairs.
//
// Pages are rendered on the server with html/template — which escapes
// every series key, model name and query parameter — with inline CSS and
// inline SVG charts; there is no script and nothing is loaded from
// elsewhere, so the pages work offline and under a Content-Security-Policy
// that forbids scripts. Every choice is a GET form or link.
//
// The package only reads, through server/store; it owns no state beyond
// its parsed templates, and it does not choose where it is mounted: the
// server mounts the handler New returns.
package web

import (
	"bytes"
	"context"
	"embed"
	"errors"
	"html/template"
	"log/slog"
	"net/http"
	"strings"
	"time"

	"github.com/aftercast/aftercast/server/drift"
	"github.com/aftercast/aftercast/server/store"
)

// requestTimeout bounds the store calls behind one page.
const requestTimeout = 10 * time.Second

//go:embed templates/*.html
var templateFS embed.FS

// templates are parsed once; each page is the layout plus its content.
var templates = struct {
	overview, series, message *template.Template
}{
	overview: parsePage("templates/overview.html"),
	series:   parsePage("templates/series.html"),
	message:  parsePage("templates/message.html"),
}

func parsePage(file string) *template.Template {
	return template.Must(template.New("layout.html").ParseFS(templateFS, "templates/layout.html", "templates/parts.html", file))
}

// handler serves the pages.
type handler struct {
	st  *store.Store
	ev  *drift.Evaluator
	log *slog.Logger
	now func() time.Time
}

// New returns the handler of the status pages: "/" (overview) and
// "/series?series=S&model=M" (one series and model), GET and HEAD only;
// any other path is a 404 page. Links are relative, so the handler may
// also be mounted under a prefix with http.StripPrefix.
func New(st *store.Store, ev *drift.Evaluator, log *slog.Logger) http.Handler {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	return &handler{st: st, ev: ev, log: log, now: time.Now}
}

func (h *handler) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	hdr := w.Header()
	// No script runs on these pages, so none may: a guard should escaping
	// ever fail. Styles are inline; forms submit only to this origin.
	hdr.Set("Content-Security-Policy", "default-src 'none'; style-src 'unsafe-inline'; img-src data:; form-action 'self'; base-uri 'none'; frame-ancestors 'none'")
	hdr.Set("X-Content-Type-Options", "nosniff")
	hdr.Set("Referrer-Policy", "no-referrer")
	hdr.Set("Cache-Control", "no-store")
	var known bool
	switch r.URL.Path {
	case "/", "/series":
		known = true
	}
	if !known {
		h.message(w, r, http.StatusNotFound, "Page not found", "There is no page at this address.")
		return
	}
	if r.Method != http.MethodGet && r.Method != http.MethodHead {
		hdr.Set("Allow", "GET, HEAD")
		h.message(w, r, http.StatusMethodNotAllowed, "Method not allowed", "These pages only answer GET.")
		return
	}
	ctx, cancel := context.WithTimeout(r.Context(), requestTimeout)
	defer cancel()
	switch r.URL.Path {
	case "/":
		p, err := h.overview(ctx)
		if err != nil {
			h.fail(w, r, err)
			return
		}
		h.render(w, r, http.StatusOK, templates.overview, p)
	case "/series":
		p, status, err := h.series(ctx, r.URL.Query())
		if err != nil {
			h.fail(w, r, err)
			return
		}
		h.render(w, r, status, templates.series, p)
	}
}

// layout is what every page hands the layout template.
type layout struct {
	Title string
	Now   stamp
	Home  bool   // the overview itself: no link back
	Root  string // relative URL of the overview, "./" but for unknown deeper paths
}

// messagePage is a page that only says something: not found, bad request,
// failure.
type messagePage struct {
	layout
	Heading, Text string
}

func (h *handler) message(w http.ResponseWriter, r *http.Request, status int, heading, text string) {
	p := &messagePage{layout: h.layout(heading), Heading: heading, Text: text}
	if d := strings.Count(r.URL.Path, "/"); d > 1 {
		p.Root = strings.Repeat("../", d-1)
	}
	h.render(w, r, status, templates.message, p)
}

func (h *handler) layout(title string) layout {
	now := h.now()
	return layout{Title: title, Now: stampOf(now, time.UTC, now, false), Root: "./"}
}

// userError is a request the pages cannot serve as asked; its message is
// for the person who asked.
type userError struct {
	status  int
	heading string
	text    string
}

func (e *userError) Error() string { return e.text }

// fail answers an error: the store's not-found and invalid-request errors
// and userErrors with their message, anything else with a generic page and
// the cause in the log.
func (h *handler) fail(w http.ResponseWriter, r *http.Request, err error) {
	var ue *userError
	var inv *store.InvalidError
	switch {
	case errors.As(err, &ue):
		h.message(w, r, ue.status, ue.heading, ue.text)
	case errors.Is(err, store.ErrNotFound):
		h.message(w, r, http.StatusNotFound, "Not found", err.Error())
	case errors.As(err, &inv):
		h.message(w, r, http.StatusBadRequest, "Bad request", inv.Error())
	case errors.Is(err, context.DeadlineExceeded):
		h.log.Error("status page timed out", "path", r.URL.Path, "err", err)
		h.message(w, r, http.StatusServiceUnavailable, "Timed out", "The database did not answer in time; try again.")
	default:
		h.log.Error("status page", "path", r.URL.Path, "err", err)
		h.message(w, r, http.StatusInternalServerError, "Something went wrong", "The page could not be built; the cause is in the service log.")
	}
}

// render executes a page into a buffer first, so that a template error
// gives a clean 500 rather than half a page.
func (h *handler) render(w http.ResponseWriter, r *http.Request, status int, t *template.Template, data any) {
	var buf bytes.Buffer
	if err := t.Execute(&buf, data); err != nil {
		h.log.Error("rendering status page", "path", r.URL.Path, "err", err)
		http.Error(w, "internal error rendering the page", http.StatusInternalServerError)
		return
	}
	w.Header().Set("Content-Type", "text/html; charset=utf-8")
	w.WriteHeader(status)
	if r.Method != http.MethodHead {
		_, _ = w.Write(buf.Bytes())
	}
}
