package daemon

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"
	"github.com/riverqueue/river"
	"github.com/riverqueue/river/riverdriver/riverpgxv5"
	"github.com/riverqueue/river/rivermigrate"

	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/curvewatch/curvewatch/migrations"
)

// bringUp brings the database side up, retrying with backoff until it is
// up or ctx is cancelled. base is the context River runs in (Stop stops
// River itself).
func (a *App) bringUp(ctx, base context.Context) {
	defer close(a.upDone)
	wait := a.opts.RetryMin
	for attempt := 1; ; attempt++ {
		err := a.up(ctx, base)
		if err == nil {
			a.isReady.Store(true)
			close(a.ready)
			a.log.Info("ready", "schema", a.cfg.Schema, "models", len(a.names))
			return
		}
		if ctx.Err() != nil {
			return
		}
		msg := a.scrub(err.Error())
		a.setNotReady(msg)
		// Full jitter, so that replicas do not retry in step.
		d := wait/2 + rand.N(wait/2+1)
		a.log.Warn("database side not up; retrying", "attempt", attempt, "retry_in", d.Round(time.Millisecond), "error", msg)
		select {
		case <-ctx.Done():
			return
		case <-time.After(d):
		}
		wait = min(2*wait, a.opts.RetryMax)
	}
}

// up runs the bring-up steps; each is safe to repeat after a failure.
func (a *App) up(ctx, base context.Context) error {
	dsn, schema := a.cfg.Database.Reveal(), a.cfg.Schema
	pool, store := a.resources()
	if pool == nil {
		p, err := a.connect(ctx, dsn)
		if err != nil {
			return err
		}
		a.mu.Lock()
		a.pool, pool = p, p
		a.mu.Unlock()
	}
	if err := migrations.Up(ctx, dsn, schema); err != nil {
		return err
	}
	if err := migrateRiver(ctx, pool, schema, a.riverLogger()); err != nil {
		return err
	}
	if store == nil {
		s, err := history.Open(ctx, dsn, schema)
		if err != nil {
			return err
		}
		a.mu.Lock()
		a.store, store = s, s
		a.mu.Unlock()
		a.metrics.setFleet(s)
		a.web.SetStore(s)
	}
	if a.delivery == nil {
		d := a.newDelivery(store)
		if err := d.start(a, store); err != nil {
			return fmt.Errorf("start the alert dispatcher: %w", err)
		}
		a.mu.Lock()
		a.delivery = d
		a.mu.Unlock()
	}
	for _, name := range a.names {
		if err := store.UpsertModel(ctx, name, a.models[name].Spec); err != nil {
			return fmt.Errorf("record model %q: %w", name, err)
		}
	}
	if a.client == nil {
		c, err := a.newClient(pool, schema)
		if err != nil {
			return err
		}
		a.mu.Lock()
		a.client = c
		a.mu.Unlock()
	}
	if err := a.catchUp(ctx, pool, schema); err != nil {
		return err
	}
	if !a.riverStarted {
		if err := a.client.Start(base); err != nil {
			return fmt.Errorf("start River: %w", err)
		}
		a.mu.Lock()
		a.riverStarted = true
		a.mu.Unlock()
		go a.catchUpLoop(a.loops, pool, schema)
	}
	return nil
}

// catchUpLoop repeats catchUp while the daemon runs: River's periodic
// enqueuer does not retry an insert that failed while the database was
// down, so without it a slot due during an outage would be lost. Errors
// (the database still down) are logged and tried again next time.
func (a *App) catchUpLoop(ctx context.Context, pool *pgxpool.Pool, schema string) {
	every := a.opts.CatchUpEvery
	if every <= 0 {
		every = time.Minute
	}
	tick := time.NewTicker(every)
	defer tick.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-tick.C:
			if err := a.catchUp(ctx, pool, schema); err != nil && ctx.Err() == nil {
				a.log.Warn("looking for missed slots failed; trying again later", "error", a.scrub(err.Error()))
			}
		}
	}
}

// connect opens the pool and checks that the database answers.
func (a *App) connect(ctx context.Context, dsn string) (*pgxpool.Pool, error) {
	cfg, err := pgxpool.ParseConfig(dsn)
	if err != nil {
		return nil, errors.New("the database URL does not parse")
	}
	// River's producer, notifier, elector and maintenance services, plus
	// per running refit (2 × Workers) a lock connection and the source
	// query.
	cfg.MaxConns = max(cfg.MaxConns, int32(4*a.opts.Workers+10))
	pool, err := pgxpool.NewWithConfig(ctx, cfg)
	if err != nil {
		return nil, fmt.Errorf("connect: %w", err)
	}
	pctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	if err := pool.Ping(pctx); err != nil {
		pool.Close()
		return nil, fmt.Errorf("cannot reach the database at %s:%d: %w", cfg.ConnConfig.Host, cfg.ConnConfig.Port, err)
	}
	return pool, nil
}

// migrateRiver applies River's migrations to the schema. rivermigrate
// takes no lock of its own, so replicas starting together are serialised
// with a session advisory lock held on a connection of its own while the
// migrator runs each migration in its own transaction.
func migrateRiver(ctx context.Context, pool *pgxpool.Pool, schema string, log *slog.Logger) error {
	migrator, err := rivermigrate.New(riverpgxv5.New(pool), &rivermigrate.Config{Schema: schema, Logger: log})
	if err != nil {
		return fmt.Errorf("River migrations: %w", err)
	}
	conn, err := pool.Acquire(ctx)
	if err != nil {
		return fmt.Errorf("River migrations: %w", err)
	}
	const key = `hashtext('curvewatch.rivermigrate'), hashtext($1)`
	if _, err := conn.Exec(ctx, `SELECT pg_advisory_lock(`+key+`)`, schema); err != nil {
		conn.Release()
		return fmt.Errorf("River migrations: take the migration lock: %w", err)
	}
	defer func() {
		uctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		if _, err := conn.Exec(uctx, `SELECT pg_advisory_unlock(`+key+`)`, schema); err != nil {
			conn.Conn().Close(uctx) // ends the session, and the lock with it
		}
		conn.Release()
	}()
	if _, err := migrator.Migrate(ctx, rivermigrate.DirectionUp, nil); err != nil {
		return fmt.Errorf("River migrations in schema %q: %w", schema, err)
	}
	return nil
}

// runningRefits is how many refits run at once for workers computing at
// once: twice as many, so that the cores stay busy while half of them wait
// on the database (see Options.Workers).
func runningRefits(workers int) int { return 2 * workers }

// newClient builds the River client: the refit worker, and one periodic
// job per model. River enqueues periodic jobs on its elected leader only;
// RunOnStart makes a newly elected leader enqueue each model's latest slot
// (a duplicate of a queued or recently completed job is skipped by
// uniqueness, and of a recorded one by the worker), so a slot that fell
// due while no replica led is not lost.
func (a *App) newClient(pool *pgxpool.Pool, schema string) (*river.Client[pgx.Tx], error) {
	workers := river.NewWorkers()
	if err := river.AddWorkerSafely(workers, &refitWorker{app: a}); err != nil {
		return nil, err
	}
	var periodic []*river.PeriodicJob
	for _, name := range a.names {
		s := a.sched[name]
		periodic = append(periodic, river.NewPeriodicJob(s, func() (river.JobArgs, *river.InsertOpts) {
			slot, ok := s.latest(time.Now().Add(periodicLead))
			if !ok {
				return nil, nil
			}
			return newRefitArgs(name, slot), nil
		}, &river.PeriodicJobOpts{RunOnStart: true}))
	}
	c, err := river.NewClient(riverpgxv5.New(pool), &river.Config{
		Schema:  schema,
		Queues:  map[string]river.QueueConfig{Queue: {MaxWorkers: runningRefits(a.opts.Workers)}},
		Workers: workers,
		// A fleet's slot queues hundreds of refits at once, each of them
		// tens of milliseconds for a small model: fetch the next job as
		// soon as a worker frees. River fetches at most once per cooldown,
		// so a longer cooldown (its default is 100 ms, and 20 ms before
		// this) leaves a worker idle for most of it after every refit.
		FetchCooldown:        2 * time.Millisecond,
		FetchPollInterval:    250 * time.Millisecond,
		PeriodicJobs:         periodic,
		JobTimeout:           a.opts.JobTimeout,
		RescueStuckJobsAfter: a.opts.RescueAfter,
		ErrorHandler:         errorHandler{log: a.log},
		Logger:               a.riverLogger(),
	})
	if err != nil {
		return nil, fmt.Errorf("River client: %w", err)
	}
	return c, nil
}

// catchUp enqueues, for each model, its latest slot at or before now when
// the history has no refit for it: after downtime the missed slot runs
// once, however many slots were missed.
func (a *App) catchUp(ctx context.Context, pool *pgxpool.Pool, schema string) error {
	now := time.Now()
	for _, name := range a.names {
		slot, ok := a.sched[name].latest(now)
		if !ok {
			continue
		}
		done, err := slotDone(ctx, pool, schema, name, slot)
		if err != nil {
			return fmt.Errorf("model %q: read the history: %w", name, err)
		}
		if done {
			continue
		}
		res, err := a.client.Insert(ctx, newRefitArgs(name, slot), nil)
		if err != nil {
			return fmt.Errorf("model %q: enqueue slot %s: %w", name, slot.Format(time.RFC3339), err)
		}
		if !res.UniqueSkippedAsDuplicate {
			a.log.Info("enqueued the latest slot, not yet refitted", "model", name, "slot", slot)
		}
	}
	return nil
}

// riverLogger is the logger River gets: warnings and errors, or everything
// when the daemon's logger is enabled for debug.
func (a *App) riverLogger() *slog.Logger {
	h := a.log.Handler()
	if h.Enabled(context.Background(), slog.LevelDebug) {
		return slog.New(h).With("component", "river")
	}
	return slog.New(minLevel{h, slog.LevelWarn}).With("component", "river")
}

// minLevel drops records below level.
type minLevel struct {
	slog.Handler
	level slog.Level
}

func (m minLevel) Enabled(ctx context.Context, l slog.Level) bool {
	return l >= m.level && m.Handler.Enabled(ctx, l)
}
func (m minLevel) WithAttrs(as []slog.Attr) slog.Handler {
	return minLevel{m.Handler.WithAttrs(as), m.level}
}
func (m minLevel) WithGroup(g string) slog.Handler { return minLevel{m.Handler.WithGroup(g), m.level} }

// scrub removes the database password from a message.
func (a *App) scrub(msg string) string {
	cfg, err := pgx.ParseConfig(a.cfg.Database.Reveal())
	if err != nil || cfg.Password == "" {
		return msg
	}
	return strings.ReplaceAll(msg, cfg.Password, "REDACTED")
}
