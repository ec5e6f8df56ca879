// Package jobs runs one refit of one model: pull a window of rows from the
// source table, fit, compare with the model's reference fit, and record it
// all in the history tables in one transaction.
package jobs

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"runtime/debug"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/curvewatch/curvewatch/jobs/source"
)

// Model is what a refit needs to know about one configured model.
type Model struct {
	Name  string
	Spec  *fit.Spec
	Table source.Table
	// Time is the window and watermark column; Where an optional trusted
	// predicate.
	Time, Where string
	// Window is the rolling window fitted each run.
	Window time.Duration
	// Against is "baseline" (a pinned fit; the first successful fit is
	// pinned automatically) or "previous" (the latest earlier fit whose
	// window does not overlap).
	Against   string
	Tolerance fit.Tolerance
}

// Runner runs refits. The zero values of its optional fields are usable.
type Runner struct {
	// Source is the pool of the database holding the source tables.
	Source *pgxpool.Pool
	// Store records the history.
	Store *history.Store
	// Logger receives a record per refit (default: discard).
	Logger *slog.Logger
	// StatementTimeout bounds each source query (default 5 minutes).
	StatementTimeout time.Duration
	// Now gives the time for manual runs (default time.Now).
	Now func() time.Time
	// FitWorkers is how many goroutines one fit uses (default: one per
	// CPU). A daemon that runs a refit per CPU sets 1, so that concurrent
	// refits do not contend for the cores.
	FitWorkers int
	// OnRecord, when set, runs inside the transaction that records the
	// refit (a fit or a failure), after the rows are written and
	// Result.FitID is set: the daemon updates the model's alert states
	// there, so that they change exactly when the refit is recorded. An
	// error rolls the whole record back and Run returns it.
	OnRecord func(ctx context.Context, tx pgx.Tx, res *Result) error
	// Slots, when set, bounds the refits computing at once: a refit holds
	// one while it fits and compares, not while it reads rows or writes
	// the history (see Slots).
	Slots Slots
	// Catalog, when set, remembers the source tables' columns between
	// refits, so that a run need not read the catalogue first. A refit
	// whose read fails describes its table afresh, so its reason still
	// names a column that changed.
	Catalog *source.Catalog
}

// Status of a refit.
const (
	StatusSucceeded   = "succeeded"
	StatusUnconverged = "unconverged"
	StatusFailed      = "failed"
	// StatusSlotDone: another run already recorded a successful fit for
	// this slot; nothing was written.
	StatusSlotDone = "slot done"
)

// Result describes one refit.
type Result struct {
	Model  string
	Slot   time.Time
	Status string
	// Reason says why a refit failed.
	Reason       string
	FitID        int64
	Document     *fit.Document
	ReferenceID  int64
	Report       *fit.ShiftReport
	ComparisonID int64
	// CompareNote says why no comparison was made, when none was.
	CompareNote string
	Duration    time.Duration
	// Newest is the newest time-column value among the rows read (zero
	// when none was read).
	Newest time.Time
}

// Run refits model m for slot (zero for a manual run: the window then
// ends now). Bad data, a bad spec or a panic in the fit fail this refit
// alone: the failure is recorded with its reason and Run returns a Result
// with StatusFailed and a nil error. Run returns an error only when the
// history cannot be written (the caller retries later; nothing partial
// was committed).
func (r *Runner) Run(ctx context.Context, m Model, slot time.Time) (res *Result, err error) {
	log := r.Logger
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	now := time.Now
	if r.Now != nil {
		now = r.Now
	}
	started := now()
	end := slot
	if end.IsZero() {
		end = started
	}
	res = &Result{Model: m.Name, Slot: slot}
	fail := func(reason string) (*Result, error) {
		finished := now()
		res.Status, res.Reason, res.Duration = StatusFailed, reason, finished.Sub(started)
		res.Document, res.Report, res.ReferenceID = nil, nil, 0
		err := r.Store.InTx(ctx, func(tx pgx.Tx) error {
			id, err := r.Store.RecordFailureTx(ctx, tx, m.Name, slot, reason, started, finished)
			if err != nil {
				return err
			}
			res.FitID = id
			return r.onRecord(ctx, tx, res)
		})
		if err != nil {
			return res, fmt.Errorf("model %q: record the failed refit (%s): %w", m.Name, reason, err)
		}
		log.Warn("refit failed", "model", m.Name, "slot", slot, "reason", reason)
		return res, nil
	}
	defer func() {
		if p := recover(); p != nil {
			log.Error("refit panicked", "model", m.Name, "panic", p, "stack", string(debug.Stack()))
			res, err = fail(fmt.Sprintf("internal error (panic): %v", p))
		}
	}()

	cols, reason, cached, err := r.checkColumns(ctx, m)
	if err != nil {
		if ctx.Err() != nil {
			return res, ctx.Err()
		}
		return fail(err.Error())
	} else if reason != "" {
		return fail(reason)
	}
	// readFailed explains a failed read or fit: when the columns were
	// checked against a remembered description, the table may have changed
	// since, and a fresh check says how.
	readFailed := func(err error) (*Result, error) {
		if ctx.Err() != nil {
			return res, ctx.Err()
		}
		if cached {
			r.Catalog.Forget(m.Table.String())
			if _, reason, _, cerr := r.checkColumns(ctx, m); cerr == nil && reason != "" {
				return fail(reason)
			}
		}
		return fail(err.Error())
	}
	// A small window is read whole before the fit (see Query.Prefetch),
	// so that the fit holds its slot only while it computes.
	numeric, text := m.Spec.Columns()
	rows, err := source.Open(ctx, r.Source, source.Query{Table: m.Table, Time: m.Time, Where: m.Where,
		From: end.Add(-m.Window), To: end, StatementTimeout: r.StatementTimeout,
		Prefetch: fit.Need{Numeric: numeric, Text: text}, Columns: columnNames(cols)})
	if err != nil {
		return readFailed(err)
	}
	// The rows stay open (one snapshot) for the predictive check below.
	defer rows.Close()
	held := false
	hold := func() error {
		if err := r.Slots.acquire(ctx); err != nil {
			return err
		}
		held = true
		return nil
	}
	let := func() {
		if held {
			r.Slots.release()
			held = false
		}
	}
	defer let()
	if err := hold(); err != nil {
		return res, err
	}
	doc, fitErr := fit.Fit(ctx, m.Spec, rows, fit.Options{TimeColumn: m.Time, Workers: r.FitWorkers})
	let()
	newest := rows.Newest
	res.Newest = newest
	if fitErr != nil && !errors.Is(fitErr, fit.ErrNotConverged) {
		return readFailed(fitErr)
	}
	res.Document = doc
	var window *history.Window
	if w := doc.Data.Window; w != nil {
		window = &history.Window{First: epoch(w.First), Last: epoch(w.Last)}
	}

	// The reference, and the comparison with it.
	var refID int64
	pinFirst := false
	if doc.Convergence.Converged {
		switch m.Against {
		case "previous":
			if window != nil {
				prev, err := r.Store.PreviousDisjoint(ctx, m.Name, math.MaxInt64, *window)
				switch {
				case err == nil:
					refID = prev.ID
				case errors.Is(err, history.ErrNoFit):
					res.CompareNote = "no earlier fit with a disjoint window yet"
				default:
					return res, fmt.Errorf("model %q: find the previous fit: %w", m.Name, err)
				}
			}
		default:
			id, ok, err := r.Store.Baseline(ctx, m.Name)
			if err != nil {
				return res, fmt.Errorf("model %q: read the baseline: %w", m.Name, err)
			}
			if ok {
				refID = id
			} else {
				pinFirst = true
				res.CompareNote = "no baseline yet: this fit becomes the baseline"
			}
		}
	} else {
		res.CompareNote = "the fit did not converge, so it is not compared"
	}
	if refID != 0 {
		ref, err := r.Store.Fit(ctx, refID)
		if err != nil {
			return res, fmt.Errorf("model %q: read reference fit %d: %w", m.Name, refID, err)
		}
		if err := hold(); err != nil {
			return res, err
		}
		rep, err := fit.Compare(ref.Document, doc, m.Tolerance)
		if err != nil {
			res.CompareNote = "not compared: " + err.Error()
			refID = 0
		} else {
			// How well the reference predicts this window's rows, against
			// this fit's own optimism-corrected deviance.
			deg, err := fit.PredictiveDegradation(ctx, ref.Document, doc, rows, rep.Tolerance, false)
			switch {
			case err == nil:
				rep.Degradation = deg
				rep.Breach = rep.Breach || deg.Breach
			case ctx.Err() != nil:
				return res, ctx.Err()
			default:
				rep.Warnings = append(rep.Warnings, "no predictive check: "+err.Error())
			}
			res.Report, res.ReferenceID = rep, refID
		}
		let()
	}

	finished := now()
	res.Duration = finished.Sub(started)
	err = r.Store.InTx(ctx, func(tx pgx.Tx) error {
		id, err := r.Store.RecordFitTx(ctx, tx, history.FitRecord{Model: m.Name, Slot: slot, Started: started, Finished: finished,
			Window: window, Document: doc, Watermark: newest})
		if err != nil {
			return err
		}
		res.FitID = id
		if res.Report != nil {
			cid, err := r.Store.RecordComparisonTx(ctx, tx, m.Name, refID, id, res.Report)
			if err != nil {
				return err
			}
			res.ComparisonID = cid
		}
		if pinFirst {
			if err := r.Store.PinBaselineTx(ctx, tx, m.Name, id, "auto"); err != nil {
				return err
			}
		}
		res.Status = StatusSucceeded
		if !doc.Convergence.Converged {
			res.Status = StatusUnconverged
		}
		return r.onRecord(ctx, tx, res)
	})
	var done *history.SlotDoneError
	switch {
	case errors.As(err, &done):
		res.Status, res.FitID, res.Report, res.ComparisonID = StatusSlotDone, done.FitID, nil, 0
		return res, nil
	case err != nil:
		return res, fmt.Errorf("model %q: record the fit: %w", m.Name, err)
	}
	log.Info("refit", "model", m.Name, "slot", slot, "status", res.Status, "rows", doc.N,
		"deviance_explained", doc.DevianceExplained, "breach", res.Report != nil && res.Report.Breach, "seconds", res.Duration.Seconds())
	return res, nil
}

// onRecord runs the OnRecord hook, when set.
func (r *Runner) onRecord(ctx context.Context, tx pgx.Tx, res *Result) error {
	if r.OnRecord == nil {
		return nil
	}
	if err := r.OnRecord(ctx, tx, res); err != nil {
		return fmt.Errorf("after recording: %w", err)
	}
	return nil
}

// epoch converts seconds since 1970 to a time.
func epoch(s float64) time.Time {
	sec := int64(s)
	return time.Unix(sec, int64((s-float64(sec))*1e9)).UTC()
}

// checkColumns compares the spec's columns with the source table's
// catalogue before any row is read, so that a column of the wrong type
// fails with a reason naming it (not a cast error from the database). It
// returns the table's columns and that reason, or an error when the
// catalogue cannot be read; cached says the description came from
// r.Catalog.
func (r *Runner) checkColumns(ctx context.Context, m Model) (cols []source.Column, reason string, cached bool, err error) {
	if r.Catalog != nil {
		cols, cached, err = r.Catalog.Describe(ctx, r.Source, m.Table.String())
	} else {
		cols, err = source.Describe(ctx, r.Source, m.Table.String())
	}
	if err != nil {
		return nil, "", false, err
	}
	return cols, columnProblem(cols, m), cached, nil
}

// columnNames lists the columns' names, in order.
func columnNames(cols []source.Column) []string {
	names := make([]string, len(cols))
	for i, c := range cols {
		names[i] = c.Name
	}
	return names
}

// columnProblem says what is wrong with the table's columns for model m,
// or "".
func columnProblem(cols []source.Column, m Model) string {
	byName := make(map[string]source.Column, len(cols))
	for _, c := range cols {
		byName[c.Name] = c
	}
	numeric, text := m.Spec.Columns()
	for _, name := range numeric {
		c, ok := byName[name]
		if !ok {
			return fmt.Sprintf("column %q is not in table %s", name, m.Table)
		}
		if num, _, tm := c.Usable(); !num && !(tm && name == m.Time) {
			return fmt.Sprintf("column %q of table %s is %s, but the spec uses it as a number (response, weights, offset, curve, surface or linear term)", name, m.Table, c.Type)
		}
	}
	for _, name := range text {
		c, ok := byName[name]
		if !ok {
			return fmt.Sprintf("column %q is not in table %s", name, m.Table)
		}
		if _, txt, _ := c.Usable(); !txt {
			return fmt.Sprintf("column %q of table %s is %s, but the spec uses it as a factor (text or integer levels)", name, m.Table, c.Type)
		}
	}
	if c, ok := byName[m.Time]; !ok {
		return fmt.Sprintf("time column %q is not in table %s", m.Time, m.Table)
	} else if _, _, tm := c.Usable(); !tm {
		return fmt.Sprintf("time column %q of table %s is %s, not a timestamp or date", m.Time, m.Table, c.Type)
	}
	return ""
}
