// Package daemon is curvewatch's long-running service: it refits every
// configured model on its schedule, through River (a PostgreSQL-backed job
// queue), so that several replicas can share one database, and serves the
// health endpoints over HTTP.
//
// An App is built with New, started with Start and stopped with Stop.
// Start returns once the HTTP listener is bound; the database side comes up
// in the background, retried with backoff while the database is down, and
// /readyz says when it is up:
//
//  1. connect (pgxpool) and check the connection;
//  2. apply curvewatch's migrations (migrations.Up) and River's
//     (rivermigrate) to the config's schema, each under an advisory lock so
//     that replicas starting together migrate once;
//  3. open the history store and record each model's spec;
//  4. enqueue each model's latest slot when the history has no refit for it
//     (after downtime a missed slot runs once, not once per missed slot);
//  5. start the River client: one periodic job per model, and up to
//     Options.Workers refits at once.
//
// Slots, uniqueness and leases: see schedule.go and worker.go, and the
// field comments of Options.
package daemon

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"runtime"
	"sync"
	"sync/atomic"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/riverqueue/river"

	"github.com/curvewatch/curvewatch/daemon/config"
	"github.com/curvewatch/curvewatch/daemon/web"
	"github.com/curvewatch/curvewatch/jobs"
	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/curvewatch/curvewatch/jobs/source"
)

// Defaults for Options left at zero.
const (
	DefaultJobTimeout = 10 * time.Minute
	DefaultBusyRetry  = 5 * time.Second
	DefaultRetryMin   = time.Second
	DefaultRetryMax   = 30 * time.Second
)

// periodicLead is how far ahead of the clock a periodic job's constructor
// looks for its slot. River's periodic enqueuer fires up to 100 ms before a
// run time, and its constructor is not told the run time, so the slot is
// the latest one at or before now + periodicLead. It must stay below the
// shortest schedule interval (1 s, the @every minimum).
const periodicLead = 250 * time.Millisecond

// ErrStopped is returned by Start on an App that has been stopped: make a
// new one instead.
var ErrStopped = errors.New("daemon: the app has been stopped; make a new one with New")

// Options tune an App. The zero value is usable.
type Options struct {
	// Logger receives the daemon's log (default: discard). River's own
	// messages go to it too, at warning level and above unless the
	// logger is enabled for debug.
	Logger *slog.Logger
	// CPUs is how many cores the daemon may use (default: GOMAXPROCS when
	// New runs, which follows a container's CPU limit; serve reads it
	// before it raises GOMAXPROCS, see ServeRuntime). Workers defaults to
	// it, and each fit gets CPUs / Workers goroutines.
	CPUs int
	// Workers is the most refits this process computes at once (default:
	// CPUs). Twice as many run at once, so that while some read rows or
	// write the history the others keep the cores busy; the fits,
	// comparisons and predictive checks — the work of the cores — are
	// bounded to Workers at a time (jobs.Slots).
	Workers int
	// JobTimeout bounds one refit (default 10 minutes). A refit that
	// overruns it is cancelled, rolled back and recorded as failed.
	JobTimeout time.Duration
	// RescueAfter is the lease of a running refit (default twice
	// JobTimeout; at least JobTimeout + 1 s): a job still marked running
	// this long after it started is taken to belong to a dead replica, and
	// River's leader makes it available again for another replica.
	RescueAfter time.Duration
	// BusyRetry is how long a refit waits before trying again when
	// another refit of the same model is running (default 5 s).
	BusyRetry time.Duration
	// CatchUpEvery is how often, once running, the daemon looks for a
	// model whose latest slot has no refit (a slot whose periodic insert
	// failed while the database was unreachable) and enqueues it once
	// (default 1 minute).
	CatchUpEvery time.Duration
	// RetryMin and RetryMax bound the backoff between attempts to bring
	// the database side up (defaults 1 s and 30 s; it doubles each time).
	RetryMin, RetryMax time.Duration
	// SoftStop is how long Stop lets the refits in flight finish before
	// it cancels them (default: half the time left on Stop's context, or 5
	// s when it has no deadline).
	SoftStop time.Duration
	// DeliveryRetryMin is the first wait before a failed alert delivery is
	// tried again (default 5 s; it doubles per attempt up to 10 minutes).
	DeliveryRetryMin time.Duration
	// Registry receives the daemon's metrics, served on /metrics
	// (default: a new registry of the App's own; never the global one).
	Registry *prometheus.Registry
}

func (o Options) withDefaults() Options {
	o.Logger = cmp.Or(o.Logger, slog.New(slog.DiscardHandler))
	o.CPUs = cmp.Or(o.CPUs, runtime.GOMAXPROCS(0))
	o.Workers = cmp.Or(o.Workers, o.CPUs)
	o.JobTimeout = cmp.Or(o.JobTimeout, DefaultJobTimeout)
	o.RescueAfter = cmp.Or(o.RescueAfter, 2*o.JobTimeout)
	o.RescueAfter = max(o.RescueAfter, o.JobTimeout+time.Second)
	o.BusyRetry = cmp.Or(o.BusyRetry, DefaultBusyRetry)
	o.RetryMin = cmp.Or(o.RetryMin, DefaultRetryMin)
	o.RetryMax = max(cmp.Or(o.RetryMax, DefaultRetryMax), o.RetryMin)
	return o
}

// App is the daemon. Its methods are safe for concurrent use.
type App struct {
	cfg     *config.Config
	opts    Options
	log     *slog.Logger
	models  map[string]jobs.Model
	names   []string // model names in config order
	sched   map[string]schedule
	handler http.Handler
	reg     *prometheus.Registry
	metrics *metrics
	web     *web.Server
	// slots bounds the refits computing at once; catalog remembers the
	// source tables' columns between refits.
	slots   jobs.Slots
	catalog *source.Catalog

	ready    chan struct{} // closed when the database side is up
	isReady  atomic.Bool
	stopping atomic.Bool
	lastErr  atomic.Pointer[string] // why the database side is not up yet

	mu       sync.Mutex
	state    int // stateNew, stateStarted, stateStopped
	listener net.Listener
	server   *http.Server
	cancel   context.CancelFunc // stops the bring-up
	// loops is cancelled by stopLoops when the App stops: the background
	// loops (the catch-up of missed slots) run under it.
	loops     context.Context
	stopLoops context.CancelFunc
	upDone    chan struct{} // closed when the bring-up goroutine ends
	stopped   chan struct{} // closed when Stop has finished
	stopErr   error
	// The database side, set by the bring-up.
	pool         *pgxpool.Pool
	store        *history.Store
	client       *river.Client[pgx.Tx]
	riverStarted bool
	delivery     *delivery // alert states and their delivery
}

const (
	stateNew = iota
	stateStarted
	stateStopped
)

// New checks cfg and builds an App; it touches neither the network nor the
// database. cfg must be a config that config.Parse or config.Load returned
// without error.
func New(cfg *config.Config, opts Options) (*App, error) {
	if cfg == nil {
		return nil, errors.New("daemon: no config")
	}
	if cfg.Database.IsZero() {
		return nil, errors.New("daemon: the config names no database")
	}
	if len(cfg.Models) == 0 {
		return nil, errors.New("daemon: the config has no models")
	}
	if len(cfg.Schema) > config.MaxSchemaLength {
		return nil, fmt.Errorf("daemon: schema name %q is longer than %d characters, the most the job queue allows in the schema it shares", cfg.Schema, config.MaxSchemaLength)
	}
	if _, err := pgxpool.ParseConfig(cfg.Database.Reveal()); err != nil {
		// pgx's message may quote the URL, password included.
		return nil, errors.New("daemon: the database URL does not parse: give a postgres://user@host:port/database URL")
	}
	opts = opts.withDefaults()
	a := &App{
		cfg:    cfg,
		opts:   opts,
		log:    opts.Logger,
		models: map[string]jobs.Model{},
		sched:  map[string]schedule{},
		ready:  make(chan struct{}),
		slots:  jobs.NewSlots(opts.Workers),
		// A minute: a refit that then fails to read describes its table
		// afresh, so a change is still named in its reason.
		catalog: source.NewCatalog(time.Minute),
	}
	for i, m := range cfg.Models {
		switch {
		case m.Name == "":
			return nil, fmt.Errorf("daemon: models[%d] has no name", i)
		case m.Cron == nil:
			return nil, fmt.Errorf("daemon: model %q has no usable schedule (%q)", m.Name, m.Schedule)
		case m.Spec == nil:
			return nil, fmt.Errorf("daemon: model %q has no usable spec", m.Name)
		}
		if _, dup := a.models[m.Name]; dup {
			return nil, fmt.Errorf("daemon: model name %q is used twice", m.Name)
		}
		a.models[m.Name] = JobModel(&m)
		a.sched[m.Name] = newSchedule(m.Cron)
		a.names = append(a.names, m.Name)
	}
	a.reg = opts.Registry
	if a.reg == nil {
		a.reg = prometheus.NewRegistry()
	}
	a.metrics = newMetrics(a.reg, nil, a.names, a.log)
	w, err := web.New(web.Config{Models: webModels(cfg), Token: cfg.API.Token.Reveal(), Logger: a.log})
	if err != nil {
		return nil, fmt.Errorf("daemon: %w", err)
	}
	a.web = w
	mux := http.NewServeMux()
	a.routes(mux)
	a.handler = mux
	a.setNotReady("starting")
	return a, nil
}

// Start binds the HTTP listener (its error is returned: the address in use,
// say) and brings the database side up in the background, retrying with
// backoff while the database is down; Ready tells when it is up. ctx's
// values are kept, but its cancellation does not stop the App: Stop does.
// Starting a started App does nothing; a stopped App cannot be restarted.
func (a *App) Start(ctx context.Context) error {
	a.mu.Lock()
	defer a.mu.Unlock()
	switch a.state {
	case stateStarted:
		return nil
	case stateStopped:
		return ErrStopped
	}
	ln, err := net.Listen("tcp", a.cfg.Listen)
	if err != nil {
		return fmt.Errorf("daemon: listen on %s: %w", a.cfg.Listen, err)
	}
	a.listener = ln
	a.server = &http.Server{Handler: a.handler, ReadHeaderTimeout: 10 * time.Second,
		ErrorLog: slog.NewLogLogger(a.log.Handler(), slog.LevelWarn)}
	go func() {
		if err := a.server.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
			a.log.Error("HTTP server stopped", "error", err)
		}
	}()
	a.log.Info("listening", "addr", ln.Addr().String())

	base := context.WithoutCancel(ctx)
	a.loops, a.stopLoops = context.WithCancel(base)
	upCtx, cancel := context.WithCancel(base)
	a.cancel, a.upDone, a.stopped = cancel, make(chan struct{}), make(chan struct{})
	go a.bringUp(upCtx, base)
	a.state = stateStarted
	return nil
}

// Addr is the HTTP listener's address, nil before Start.
func (a *App) Addr() net.Addr {
	a.mu.Lock()
	defer a.mu.Unlock()
	if a.listener == nil {
		return nil
	}
	return a.listener.Addr()
}

// Ready is closed once the database side is up: connected, migrated, and
// the River client started.
func (a *App) Ready() <-chan struct{} { return a.ready }

// Stop stops the App, last-started first: the bring-up, River (a soft stop
// for Options.SoftStop, so that the refits in flight can finish, then a
// hard stop that cancels them, rolling their transactions back), the
// history store and the connection pool, and the HTTP server. It returns
// when all is stopped or ctx is done. Stopping an App that was never
// started does nothing; a second Stop waits for the first and returns its
// result.
func (a *App) Stop(ctx context.Context) error {
	a.mu.Lock()
	switch a.state {
	case stateNew:
		a.mu.Unlock()
		return nil
	case stateStopped:
		stopped := a.stopped
		a.mu.Unlock()
		select {
		case <-stopped:
			a.mu.Lock()
			defer a.mu.Unlock()
			return a.stopErr
		case <-ctx.Done():
			return ctx.Err()
		}
	}
	a.state = stateStopped
	a.mu.Unlock()

	err := a.stop(ctx)
	a.mu.Lock()
	a.stopErr = err
	a.mu.Unlock()
	close(a.stopped)
	return err
}

func (a *App) stop(ctx context.Context) error {
	a.stopping.Store(true)
	a.setNotReady("stopping")
	var errs []error
	a.cancel()
	a.stopLoops()
	select {
	case <-a.upDone:
	case <-ctx.Done():
		// Stuck in a step that does not heed its context (a migration
		// lock wait, say): the process is ending anyway; close what is
		// ours alone.
		a.server.Close()
		return fmt.Errorf("daemon: stop: the database bring-up did not end in time: %w", ctx.Err())
	}
	// The bring-up has ended, so these fields no longer change.
	if a.client != nil && a.riverStarted {
		if err := a.stopRiver(ctx); err != nil {
			errs = append(errs, err)
		}
	}
	a.metrics.setFleet(nil) // the store closes: scrapes stop reading it
	a.web.SetStore(nil)
	if a.delivery != nil {
		a.delivery.stop()
	}
	if a.store != nil {
		if !within(ctx, a.store.Close) {
			errs = append(errs, errors.New("daemon: stop: the history store's connections were not all returned in time"))
		}
	}
	if a.pool != nil {
		if !within(ctx, a.pool.Close) {
			errs = append(errs, errors.New("daemon: stop: the database connections were not all returned in time"))
		}
	}
	if err := a.server.Shutdown(ctx); err != nil {
		errs = append(errs, fmt.Errorf("daemon: stop the HTTP server: %w", err))
		a.server.Close()
	}
	a.log.Info("stopped")
	return errors.Join(errs...)
}

// stopRiver soft-stops River, then cancels the jobs still running.
func (a *App) stopRiver(ctx context.Context) error {
	soft := a.opts.SoftStop
	if soft <= 0 {
		soft = 5 * time.Second
		if d, ok := ctx.Deadline(); ok {
			soft = time.Until(d) / 2
		}
	}
	softCtx, cancel := context.WithTimeout(ctx, soft)
	defer cancel()
	a.log.Info("stopping: letting the refits in flight finish", "for", soft)
	if err := a.client.Stop(softCtx); err == nil {
		return nil
	}
	a.log.Warn("stopping: cancelling the refits still running; their transactions roll back")
	if err := a.client.StopAndCancel(ctx); err != nil {
		return fmt.Errorf("daemon: stop River: %w", err)
	}
	return nil
}

// within runs fn and waits for it until ctx is done; false means it is
// still running.
func within(ctx context.Context, fn func()) bool {
	done := make(chan struct{})
	go func() {
		defer close(done)
		fn()
	}()
	select {
	case <-done:
		return true
	case <-ctx.Done():
		return false
	}
}

// resources returns the pool and the store, nil until connected.
func (a *App) resources() (*pgxpool.Pool, *history.Store) {
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.pool, a.store
}

func (a *App) setNotReady(why string) {
	a.lastErr.Store(&why)
}

// webModels describes the configured models to the dashboard.
func webModels(cfg *config.Config) []web.Model {
	out := make([]web.Model, len(cfg.Models))
	for i, m := range cfg.Models {
		out[i] = web.Model{Name: m.Name, Schedule: m.Schedule, Table: m.Source.Table.String(), Window: m.Source.Window,
			Against: m.Watch.Against, Tolerance: m.Watch.Tolerance(), ConfirmRuns: m.Watch.ConfirmRuns, MaxAge: m.MaxAge}
	}
	return out
}

// JobModel turns a configured model into what a refit needs.
func JobModel(m *config.Model) jobs.Model {
	return jobs.Model{Name: m.Name, Spec: m.Spec, Table: m.Source.Table, Time: m.Source.Time, Where: m.Source.Where,
		Window: m.Source.Window, Against: m.Watch.Against, Tolerance: m.Watch.Tolerance()}
}
