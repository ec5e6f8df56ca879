package daemon

import (
	"context"
	"fmt"
	"net/http"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/migrations"
)

// Handler is the App's HTTP handler (what Start serves on the config's
// listen address), for tests and for mounting elsewhere.
func (a *App) Handler() http.Handler { return a.handler }

// routes registers the App's endpoints. Later endpoints (/metrics, /api/…,
// the dashboard) are added here.
func (a *App) routes(mux *http.ServeMux) {
	mux.HandleFunc("GET /healthz", a.healthz)
	mux.HandleFunc("GET /readyz", a.readyz)
	mux.Handle("GET /metrics", a.metrics.handler())
	a.web.Register(mux)
}

// healthz answers 200 while the process runs: a liveness probe.
func (a *App) healthz(w http.ResponseWriter, r *http.Request) {
	w.Header().Set("Content-Type", "text/plain; charset=utf-8")
	fmt.Fprintln(w, "ok")
}

// readyzTimeout bounds the database check of one /readyz request.
const readyzTimeout = 2 * time.Second

// readyz answers 200 when the daemon can do its work: the database side is
// up, the database answers now, and the schema is at (or past) the newest
// migration this binary knows and not dirty. Otherwise 503 with the reason.
func (a *App) readyz(w http.ResponseWriter, r *http.Request) {
	w.Header().Set("Content-Type", "text/plain; charset=utf-8")
	w.Header().Set("Cache-Control", "no-store")
	notReady := func(why string) {
		w.WriteHeader(http.StatusServiceUnavailable)
		fmt.Fprintf(w, "not ready: %s\n", why)
	}
	if a.stopping.Load() {
		notReady("stopping")
		return
	}
	if !a.isReady.Load() {
		notReady(*a.lastErr.Load())
		return
	}
	pool, _ := a.resources()
	ctx, cancel := context.WithTimeout(r.Context(), readyzTimeout)
	defer cancel()
	var version int64
	var dirty bool
	err := pool.QueryRow(ctx, `SELECT version, dirty FROM `+pgx.Identifier{a.cfg.Schema, "schema_migrations"}.Sanitize()).Scan(&version, &dirty)
	switch {
	case err != nil:
		notReady("database unreachable: " + a.scrub(err.Error()))
	case dirty:
		notReady(fmt.Sprintf("migration %d of schema %s failed part-way (dirty)", version, a.cfg.Schema))
	case version < int64(migrations.Latest()):
		notReady(fmt.Sprintf("schema %s is at migration %d of %d", a.cfg.Schema, version, migrations.Latest()))
	default:
		fmt.Fprintln(w, "ok")
	}
}
