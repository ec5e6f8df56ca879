// Package web is curvewatch's HTTP JSON API and dashboard.
//
// The API lives under /api/v1 and is described by the OpenAPI 3.1 document
// it serves at /api/v1/openapi.json. Every answer is JSON, errors included:
// {"error": "..."} saying what was wrong and what to do about it. Reads
// come from the history tables (package history); the one write, pinning a
// model's baseline, needs the configured bearer token, and with no token
// configured the API is read-only.
//
// The dashboard is two pages, the fleet (GET /) and one model
// (GET /models/{model}), plain HTML, CSS and JavaScript embedded in the
// binary: the pages fetch the API and draw their charts as SVG, with no
// request leaving the daemon.
package web

import (
	"cmp"
	"context"
	"crypto/sha256"
	"crypto/subtle"
	"errors"
	"fmt"
	"log/slog"
	"net/http"
	"strings"
	"sync/atomic"
	"time"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs/history"
)

// Model is a configured model as the API and the dashboard show it.
type Model struct {
	// Name is the model's name (models[].name).
	Name string
	// Schedule is the schedule as written in the config.
	Schedule string
	// Table is the source table or view.
	Table string
	// Window is the rolling span of time fitted each run.
	Window time.Duration
	// Against is "baseline" or "previous": what new fits are compared with.
	Against string
	// Tolerance holds the watch tolerances.
	Tolerance fit.Tolerance
	// ConfirmRuns is watch.confirm_runs; 0 when not known.
	ConfirmRuns int
	// MaxAge is max_age; 0 when off.
	MaxAge time.Duration
}

// Config configures a Server.
type Config struct {
	// Store reads and writes the history. It may be nil until the
	// database side is up (see SetStore): the API then answers 503.
	Store *history.Store
	// Models are the configured models, in the order the fleet page lists
	// them by default. Names must be distinct and not empty.
	Models []Model
	// Token is the bearer token that allows writes; "" makes the API
	// read-only (the default).
	Token string
	// Logger receives request failures and writes; nil discards them.
	Logger *slog.Logger
	// Now is the clock (default time.Now).
	Now func() time.Time
}

// Server serves the API and the dashboard. It is safe for concurrent use.
type Server struct {
	store  atomic.Pointer[history.Store]
	models []Model
	byName map[string]*Model
	names  []string
	// tokenHash is the SHA-256 of the token, nil when writes are off.
	tokenHash []byte
	log       *slog.Logger
	now       func() time.Time
	routes    []route
	pages     *pages
}

// requestTimeout bounds the database work of one API request.
const requestTimeout = 15 * time.Second

// New checks cfg and returns a Server.
func New(cfg Config) (*Server, error) {
	s := &Server{
		byName: make(map[string]*Model, len(cfg.Models)),
		log:    cmp.Or(cfg.Logger, slog.New(slog.DiscardHandler)),
		now:    cfg.Now,
	}
	if s.now == nil {
		s.now = time.Now
	}
	s.models = append([]Model(nil), cfg.Models...)
	for i := range s.models {
		m := &s.models[i]
		if m.Name == "" {
			return nil, fmt.Errorf("web: model %d has no name", i)
		}
		if _, dup := s.byName[m.Name]; dup {
			return nil, fmt.Errorf("web: model %q is listed twice", m.Name)
		}
		s.byName[m.Name] = m
		s.names = append(s.names, m.Name)
	}
	if cfg.Token != "" {
		h := sha256.Sum256([]byte(cfg.Token))
		s.tokenHash = h[:]
	}
	s.store.Store(cfg.Store)
	s.routes = s.apiRoutes()
	p, err := newPages()
	if err != nil {
		return nil, err
	}
	s.pages = p
	return s, nil
}

// SetStore sets (or, with nil, removes) the history store the API reads.
// It is safe to call while requests are served.
func (s *Server) SetStore(store *history.Store) { s.store.Store(store) }

// Writable reports whether the API accepts writes (a token is set).
func (s *Server) Writable() bool { return s.tokenHash != nil }

// Route is one API endpoint: a method and a ServeMux path pattern.
type Route struct {
	Method  string
	Pattern string
}

// Routes lists the API endpoints Register registers (besides the JSON
// not-found answer for other paths under /api/).
func (s *Server) Routes() []Route {
	out := make([]Route, len(s.routes))
	for i, r := range s.routes {
		out[i] = Route{Method: r.method, Pattern: r.path}
	}
	return out
}

// Register adds the API (/api/v1/…), the dashboard pages (GET / and
// GET /models/{model}) and their assets (GET /assets/…) to mux.
func (s *Server) Register(mux *http.ServeMux) {
	for _, r := range s.routes {
		mux.Handle(r.method+" "+r.path, s.api(r))
	}
	mux.HandleFunc("/api/", s.apiNotFound)
	mux.HandleFunc("GET /{$}", s.fleetPage)
	mux.HandleFunc("GET /models/{model}", s.modelPage)
	mux.Handle("GET /assets/", s.pages.assets())
}

// route is one API endpoint and its handler.
type route struct {
	method, path string
	// noStore marks the endpoints that answer without the database.
	noStore bool
	handle  func(w http.ResponseWriter, r *http.Request, st *history.Store) error
}

func (s *Server) apiRoutes() []route {
	return []route{
		{method: "GET", path: "/api/v1/openapi.json", noStore: true, handle: s.openAPI},
		{method: "GET", path: "/api/v1/models", handle: s.listModels},
		{method: "GET", path: "/api/v1/models/{model}", handle: s.getModel},
		{method: "GET", path: "/api/v1/models/{model}/fits", handle: s.listFits},
		{method: "GET", path: "/api/v1/models/{model}/history", handle: s.scoreHistory},
		{method: "GET", path: "/api/v1/models/{model}/comparisons", handle: s.listComparisons},
		{method: "GET", path: "/api/v1/models/{model}/alert-events", handle: s.listAlertEvents},
		{method: "POST", path: "/api/v1/models/{model}/baseline", handle: s.pinBaseline},
		{method: "GET", path: "/api/v1/fits/{id}", handle: s.getFit},
		{method: "GET", path: "/api/v1/comparisons/{id}", handle: s.getComparison},
		{method: "GET", path: "/api/v1/alerts", handle: s.listAlerts},
	}
}

// apiError is an answer other than 200: a status and a message for people.
type apiError struct {
	status int
	msg    string
}

func (e *apiError) Error() string { return e.msg }

func errorf(status int, format string, args ...any) error {
	return &apiError{status: status, msg: fmt.Sprintf(format, args...)}
}

// api wraps a route's handler: it sets the common headers, checks that the
// store is up, bounds the request's time and turns errors into JSON.
func (s *Server) api(rt route) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		apiHeaders(w)
		st := s.store.Load()
		if st == nil && !rt.noStore {
			w.Header().Set("Retry-After", "5")
			writeError(w, http.StatusServiceUnavailable, "the history database is not connected yet: the daemon is still starting or cannot reach PostgreSQL (see /readyz and the daemon's log); retry shortly")
			return
		}
		ctx, cancel := context.WithTimeout(r.Context(), requestTimeout)
		defer cancel()
		err := rt.handle(w, r.WithContext(ctx), st)
		if err == nil {
			return
		}
		var ae *apiError
		if errors.As(err, &ae) {
			if ae.status == http.StatusUnauthorized {
				w.Header().Set("WWW-Authenticate", `Bearer realm="curvewatch"`)
			}
			writeError(w, ae.status, ae.msg)
			return
		}
		if errors.Is(err, context.DeadlineExceeded) || errors.Is(err, context.Canceled) {
			s.log.Warn("api request timed out", "method", r.Method, "path", r.URL.Path, "err", err)
			writeError(w, http.StatusServiceUnavailable, fmt.Sprintf("the history database did not answer within %s; retry, and check the database if it persists", requestTimeout))
			return
		}
		s.log.Error("api request failed", "method", r.Method, "path", r.URL.Path, "err", err)
		writeError(w, http.StatusInternalServerError, "reading the history failed (the daemon's log has the details); retry, and check the database if it persists")
	})
}

// apiNotFound answers paths under /api/ that no route serves: 405 when the
// path exists with other methods, 404 otherwise.
func (s *Server) apiNotFound(w http.ResponseWriter, r *http.Request) {
	apiHeaders(w)
	var allow []string
	for _, rt := range s.routes {
		if pathMatches(rt.path, r.URL.Path) {
			allow = append(allow, rt.method)
		}
	}
	if len(allow) > 0 {
		if contains(allow, "GET") {
			allow = append(allow, "HEAD")
		}
		w.Header().Set("Allow", strings.Join(allow, ", "))
		writeError(w, http.StatusMethodNotAllowed, fmt.Sprintf("%s %s is not supported: use %s", r.Method, r.URL.Path, strings.Join(allow, " or ")))
		return
	}
	writeError(w, http.StatusNotFound, fmt.Sprintf("no API endpoint at %s: /api/v1/openapi.json lists them", r.URL.Path))
}

// pathMatches reports whether path fits pattern, whose {name} segments
// match any one non-empty segment.
func pathMatches(pattern, path string) bool {
	ps, xs := strings.Split(pattern, "/"), strings.Split(path, "/")
	if len(ps) != len(xs) {
		return false
	}
	for i := range ps {
		if strings.HasPrefix(ps[i], "{") {
			if xs[i] == "" {
				return false
			}
		} else if ps[i] != xs[i] {
			return false
		}
	}
	return true
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

// authorize checks a write request's bearer token.
func (s *Server) authorize(r *http.Request) error {
	if s.tokenHash == nil {
		return errorf(http.StatusForbidden, "the API is read-only: to allow writes, set api.token in the daemon's config (e.g. token: ${CURVEWATCH_API_TOKEN}), restart, and send the token as \"Authorization: Bearer <token>\"")
	}
	h := r.Header.Get("Authorization")
	scheme, token, ok := strings.Cut(h, " ")
	if h == "" || !ok || !strings.EqualFold(scheme, "Bearer") || strings.TrimSpace(token) == "" {
		return errorf(http.StatusUnauthorized, "this write needs the API token: send the header \"Authorization: Bearer <token>\" with the token set as api.token in the daemon's config")
	}
	got := sha256.Sum256([]byte(strings.TrimSpace(token)))
	if subtle.ConstantTimeCompare(got[:], s.tokenHash) != 1 {
		return errorf(http.StatusUnauthorized, "the bearer token is not the configured API token: check api.token in the daemon's config")
	}
	return nil
}
