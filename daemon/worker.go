package daemon

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"
	"github.com/riverqueue/river"
	"github.com/riverqueue/river/rivertype"

	"github.com/curvewatch/curvewatch/jobs"
)

// Queue is the River queue refits run in.
const Queue = "curvewatch"

// RefitArgs is the River job of one scheduled refit: model Model for slot
// Slot (UTC, whole seconds). Jobs are unique by their args, so each
// (model, slot) is enqueued once however many replicas, retries or
// catch-ups try.
type RefitArgs struct {
	Model string    `json:"model"`
	Slot  time.Time `json:"slot"`
}

// Kind is the River job kind.
func (RefitArgs) Kind() string { return "curvewatch_refit" }

// InsertOpts makes every insert of a refit unique by its args (in River's
// default unique states: pending, scheduled, available, running, retryable
// and completed, the last kept for River's completed-job retention of 24
// hours; after that the worker's history check makes a repeat harmless).
func (RefitArgs) InsertOpts() river.InsertOpts {
	return river.InsertOpts{Queue: Queue, UniqueOpts: river.UniqueOpts{ByArgs: true}}
}

// newRefitArgs normalises the slot so that the same instant always encodes
// to the same JSON (River hashes the encoded args for uniqueness).
func newRefitArgs(model string, slot time.Time) RefitArgs {
	return RefitArgs{Model: model, Slot: slot.UTC().Truncate(time.Second)}
}

// refitWorker runs RefitArgs jobs.
type refitWorker struct {
	river.WorkerDefaults[RefitArgs]
	app *App
}

// Work runs one refit. A model never runs twice at once: the worker holds
// a PostgreSQL session advisory lock on (schema, model) for the whole
// refit, which excludes other workers of this process and of every other
// replica; a job that finds the lock taken is snoozed (River does not count
// a snooze as an attempt) and tried again after Options.BusyRetry. A replica
// that dies loses its session, so its lock goes with it.
func (w *refitWorker) Work(ctx context.Context, job *river.Job[RefitArgs]) error {
	a := w.app
	args := job.Args
	log := a.log.With("model", args.Model, "slot", args.Slot, "job", job.ID, "attempt", job.Attempt)
	m, ok := a.models[args.Model]
	if !ok {
		// The model was removed from the config since the job was queued.
		log.Warn("refit job for a model not in the config; cancelled")
		return river.JobCancel(fmt.Errorf("model %q is not in the config", args.Model))
	}
	pool, store := a.resources()
	if pool == nil || store == nil {
		return errors.New("the daemon is not connected to the database yet")
	}
	release, ok, err := lockModel(ctx, pool, store.Schema(), args.Model)
	if err != nil {
		return fmt.Errorf("model %q: lock: %w", args.Model, err)
	}
	if !ok {
		log.Debug("model busy with another refit; snoozed", "retry_in", a.opts.BusyRetry)
		return river.JobSnooze(a.opts.BusyRetry)
	}
	defer release()

	// A slot already recorded (a re-enqueue after River forgot the
	// completed job, or a repeat of a slot that failed for bad data) is
	// not run again.
	done, err := slotDone(ctx, pool, store.Schema(), args.Model, args.Slot)
	if err != nil {
		return fmt.Errorf("model %q: read the history: %w", args.Model, err)
	}
	if done {
		log.Debug("slot already has a recorded refit; skipped")
		return nil
	}

	d := a.alerting()
	// The refits at once share the cores: each fit gets its share.
	runner := &jobs.Runner{Source: pool, Store: store, Logger: a.log, FitWorkers: max(1, a.opts.CPUs/a.opts.Workers),
		Slots: a.slots, Catalog: a.catalog}
	if d != nil {
		runner.OnRecord = d.alerter.onRecord
	}
	res, err := runner.Run(ctx, m, args.Slot)
	if err == nil && res.Status != jobs.StatusSlotDone {
		a.metrics.observeRefit(args.Model, res.Status, res.Duration)
		d.kick()
	}
	switch {
	case err == nil:
		log.Debug("refit job done", "status", res.Status, "fit", res.FitID)
		return nil
	case errors.Is(ctx.Err(), context.DeadlineExceeded):
		// River's job timeout: record the refit as failed, so that the
		// history says why, and do not retry (it would time out again;
		// the next slot tries afresh).
		reason := fmt.Sprintf("timed out after %s (the daemon's job timeout)", a.opts.JobTimeout)
		rctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 30*time.Second)
		defer cancel()
		now := time.Now()
		started := now
		if job.AttemptedAt != nil {
			started = *job.AttemptedAt
		}
		// Recorded as every failure is, alert states included (a model
		// whose refits keep timing out fires refit_failing).
		rerr := store.InTx(rctx, func(tx pgx.Tx) error {
			id, err := store.RecordFailureTx(rctx, tx, args.Model, args.Slot, reason, started, now)
			if err != nil || runner.OnRecord == nil {
				return err
			}
			return runner.OnRecord(rctx, tx, &jobs.Result{Model: args.Model, Slot: args.Slot, Status: jobs.StatusFailed,
				Reason: reason, FitID: id, Duration: now.Sub(started)})
		})
		if rerr != nil {
			return fmt.Errorf("model %q: %s, and recording that failed: %w", args.Model, reason, rerr)
		}
		d.kick()
		a.metrics.observeRefit(args.Model, jobs.StatusFailed, now.Sub(started))
		log.Warn("refit timed out", "timeout", a.opts.JobTimeout)
		return nil
	case ctx.Err() != nil:
		// The daemon is stopping: the refit's transaction rolled back.
		// Snooze 0 makes the job available again at once, to another
		// replica or to this one when it restarts, without spending an
		// attempt.
		log.Info("refit interrupted by shutdown; rolled back, to be run again")
		return river.JobSnooze(0)
	default:
		// The history could not be written (the database is down?):
		// River retries with backoff.
		return err
	}
}

// alerting returns the alert side, nil until the store is open.
func (a *App) alerting() *delivery {
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.delivery
}

// lockModel takes the per-model advisory lock on a connection of its own,
// without waiting. release unlocks it and returns the connection; when the
// unlock fails the connection is closed, which ends the session and so
// releases the lock too.
func lockModel(ctx context.Context, pool *pgxpool.Pool, schema, model string) (release func(), ok bool, err error) {
	conn, err := pool.Acquire(ctx)
	if err != nil {
		return nil, false, err
	}
	const key = `hashtext('curvewatch.refit'), hashtext($1 || '/' || $2)`
	if err := conn.QueryRow(ctx, `SELECT pg_try_advisory_lock(`+key+`)`, schema, model).Scan(&ok); err != nil || !ok {
		conn.Release()
		return nil, false, err
	}
	return func() {
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		if _, err := conn.Exec(ctx, `SELECT pg_advisory_unlock(`+key+`)`, schema, model); err != nil {
			conn.Conn().Close(ctx)
		}
		conn.Release()
	}, true, nil
}

// slotDone reports whether the history already holds a refit of the model
// for the slot, of any status.
func slotDone(ctx context.Context, q interface {
	QueryRow(context.Context, string, ...any) pgx.Row
}, schema, model string, slot time.Time) (bool, error) {
	var done bool
	err := q.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM `+pgx.Identifier{schema, "fits"}.Sanitize()+` WHERE model = $1 AND slot = $2)`,
		model, slot).Scan(&done)
	return done, err
}

// errorHandler logs River's job errors and panics with the job's model.
// Panics in a refit are recovered by jobs.Runner, which records them; one
// reaching River (a bug in the worker itself) is recovered by River, logged
// here, and the job retried by River's policy.
type errorHandler struct{ log *slog.Logger }

func (h errorHandler) HandleError(ctx context.Context, job *rivertype.JobRow, err error) *river.ErrorHandlerResult {
	h.log.Warn("refit job failed; River will retry", "job", job.ID, "attempt", job.Attempt, "args", string(job.EncodedArgs), "error", err)
	return nil
}

func (h errorHandler) HandlePanic(ctx context.Context, job *rivertype.JobRow, panicVal any, trace string) *river.ErrorHandlerResult {
	h.log.Error("refit job panicked; River will retry", "job", job.ID, "attempt", job.Attempt, "args", string(job.EncodedArgs), "panic", panicVal, "stack", trace)
	return nil
}
