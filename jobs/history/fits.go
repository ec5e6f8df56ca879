package history

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"strings"
	"time"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/jackc/pgx/v5"
)

// Window is the span of a source's time column over a fit's rows.
type Window struct {
	First, Last time.Time
}

// Overlaps reports whether the two closed intervals share an instant (the
// rule fit.Compare uses for time windows).
func (w Window) Overlaps(o Window) bool {
	return !w.First.After(o.Last) && !o.First.After(w.Last)
}

// FitRecord is a fit to record.
type FitRecord struct {
	Model string
	// Slot is the scheduled slot the refit ran for; zero for a manual run.
	Slot time.Time
	// Started and Finished bound the refit, pull included.
	Started, Finished time.Time
	// Window is the span of the time column over the rows used; nil when
	// unknown.
	Window *Window
	// Document is the fit. The fit's status is succeeded when its PIRLS
	// converged (Document.Convergence.Converged) and unconverged otherwise.
	Document *fit.Document
	// Watermark, when not zero, advances the model's watermark (see
	// AdvanceWatermark) in the same transaction.
	Watermark time.Time
}

// StoredFit is a row of the fits table.
type StoredFit struct {
	ID     int64
	Model  string
	Status Status
	// Reason says why a failed refit failed.
	Reason string
	// Slot is zero for a manual run.
	Slot              time.Time
	Started, Finished time.Time
	Duration          time.Duration
	// Window is nil when unknown.
	Window *Window
	// The fit's figures: zero on a failure.
	RowsRead, RowsUsed                    int64
	Deviance, DevianceExplained, EDFTotal float64
	Scale                                 float64
	Converged                             bool
	// Document is the fit document; nil for a failure and in the
	// summaries that Fits returns.
	Document *fit.Document
}

// RecordFit stores a fit and its curve grid points in one transaction and
// returns the fit's id. When rec.Slot already has a succeeded fit it
// records nothing and returns a *SlotDoneError (errors.Is ErrSlotDone).
func (s *Store) RecordFit(ctx context.Context, rec FitRecord) (int64, error) {
	var id int64
	err := s.InTx(ctx, func(tx pgx.Tx) error {
		var err error
		id, err = s.RecordFitTx(ctx, tx, rec)
		return err
	})
	return id, err
}

// RecordFitTx is RecordFit inside the caller's transaction. On
// ErrSlotDone nothing was written and tx remains usable.
func (s *Store) RecordFitTx(ctx context.Context, tx pgx.Tx, rec FitRecord) (int64, error) {
	id, err := recordFit(ctx, tx, rec)
	if err != nil && !errors.Is(err, ErrSlotDone) {
		return 0, fmt.Errorf("history: record fit of model %q: %w", rec.Model, err)
	}
	return id, err
}

func recordFit(ctx context.Context, tx pgx.Tx, rec FitRecord) (int64, error) {
	doc := rec.Document
	if doc == nil {
		return 0, errors.New("no fit document (record a failure with RecordFailure)")
	}
	if rec.Started.IsZero() || rec.Finished.Before(rec.Started) {
		return 0, fmt.Errorf("started %v, finished %v: need a start and a finish no earlier", rec.Started, rec.Finished)
	}
	if rec.Window != nil && rec.Window.Last.Before(rec.Window.First) {
		return 0, fmt.Errorf("window ends (%v) before it starts (%v)", rec.Window.Last, rec.Window.First)
	}
	points, err := curvePoints(doc)
	if err != nil {
		return 0, err
	}
	body, err := json.Marshal(doc)
	if err != nil {
		return 0, fmt.Errorf("encode the fit document: %w", err)
	}
	status := StatusSucceeded
	if !doc.Convergence.Converged {
		status = StatusUnconverged
	}
	var first, last *time.Time
	if rec.Window != nil {
		first, last = &rec.Window.First, &rec.Window.Last
	}
	if err := ensureModel(ctx, tx, rec.Model); err != nil {
		return 0, err
	}
	// A slot that already has a succeeded fit takes no other fit. The
	// partial unique index makes this hold under concurrency for
	// succeeded fits: ON CONFLICT waits for a concurrent insert of the
	// same slot to commit or roll back, then skips the row.
	var id int64
	err = tx.QueryRow(ctx, `
		INSERT INTO fits (model, status, slot, started_at, finished_at, window_first, window_last,
			rows_read, rows_used, deviance, deviance_explained, edf_total, scale, converged, document)
		SELECT $1::text, $2::text, $3::timestamptz, $4::timestamptz, $5::timestamptz, $6::timestamptz, $7::timestamptz,
			$8::bigint, $9::bigint, $10::float8, $11::float8, $12::float8, $13::float8, $14::boolean, $15::jsonb
		WHERE $3::timestamptz IS NULL OR NOT EXISTS (
			SELECT 1 FROM fits WHERE model = $1 AND slot = $3 AND status = 'succeeded')
		ON CONFLICT (model, slot) WHERE status = 'succeeded' AND slot IS NOT NULL DO NOTHING
		RETURNING id`,
		rec.Model, status, nullTime(rec.Slot), rec.Started, rec.Finished, first, last,
		doc.Data.RowsRead, doc.Data.RowsUsed, doc.Deviance, doc.DevianceExplained, doc.EDFTotal, doc.Scale,
		doc.Convergence.Converged, body).Scan(&id)
	if errors.Is(err, pgx.ErrNoRows) {
		done := &SlotDoneError{Model: rec.Model, Slot: rec.Slot}
		if err := tx.QueryRow(ctx, `SELECT id FROM fits WHERE model = $1 AND slot = $2 AND status = 'succeeded'`,
			rec.Model, rec.Slot).Scan(&done.FitID); err != nil {
			return 0, fmt.Errorf("find the fit that holds slot %v: %w", rec.Slot, err)
		}
		return 0, done
	}
	if err != nil {
		return 0, err
	}
	if err := insertCurves(ctx, tx, id, points); err != nil {
		return 0, err
	}
	if !rec.Watermark.IsZero() {
		if err := advanceWatermark(ctx, tx, rec.Model, rec.Watermark); err != nil {
			return 0, err
		}
	}
	return id, nil
}

// insertCurves stores the fit's curve grids, one fit_curves row per
// curve, in one statement (one round trip however many curves).
func insertCurves(ctx context.Context, tx pgx.Tx, fitID int64, points []curveGrid) error {
	if len(points) == 0 {
		return nil
	}
	var sql strings.Builder
	sql.WriteString(`INSERT INTO fit_curves (fit_id, term, x, fit, se) VALUES `)
	args := []any{fitID}
	terms := make([]string, len(points))
	for i, c := range points {
		if i > 0 {
			sql.WriteString(", ")
		}
		n := len(args)
		fmt.Fprintf(&sql, "($1, $%d, $%d::float8[], $%d::float8[], $%d::float8[])", n+1, n+2, n+3, n+4)
		args = append(args, c.term, c.x, c.fit, c.se)
		terms[i] = fmt.Sprintf("%q", c.term)
	}
	if _, err := tx.Exec(ctx, sql.String(), args...); err != nil {
		return fmt.Errorf("store the grids of curves %s: %w", strings.Join(terms, ", "), err)
	}
	return nil
}

// curveGrid is one curve's grid, as stored in fit_curves.
type curveGrid struct {
	term       string
	x, fit, se []float64
}

// curvePoints lists the grids of the document's curves (the view
// fit_curve_points shows them a row per point). Surfaces stay in the
// document.
func curvePoints(doc *fit.Document) ([]curveGrid, error) {
	var out []curveGrid
	for _, t := range doc.Terms {
		if t.Kind != fit.Curve || t.Grid == nil {
			continue
		}
		g := t.Grid
		if len(g.Fit) != len(g.X) || len(g.SE) != len(g.X) {
			return nil, fmt.Errorf("term %q: grid has %d x, %d fit and %d se values", t.Name, len(g.X), len(g.Fit), len(g.SE))
		}
		out = append(out, curveGrid{term: t.Name, x: g.X, fit: g.Fit, se: g.SE})
	}
	return out, nil
}

// RecordFailure records a refit that produced no fit, with its reason, and
// returns the fit row's id. slot is zero for a manual run. A failure is
// recorded even when the slot already has a succeeded fit: it is the
// history of attempts.
func (s *Store) RecordFailure(ctx context.Context, model string, slot time.Time, reason string, started, finished time.Time) (int64, error) {
	var id int64
	err := s.InTx(ctx, func(tx pgx.Tx) error {
		var err error
		id, err = s.RecordFailureTx(ctx, tx, model, slot, reason, started, finished)
		return err
	})
	return id, err
}

// RecordFailureTx is RecordFailure inside the caller's transaction (so
// that a failed refit's alert states and deliveries commit with it). A
// failure is never refused for its details: an empty reason is stored as
// "unknown", a missing start as the finish (or now, with neither), and a
// finish before the start as the start.
func (s *Store) RecordFailureTx(ctx context.Context, tx pgx.Tx, model string, slot time.Time, reason string, started, finished time.Time) (int64, error) {
	if reason == "" {
		reason = "unknown"
	}
	if started.IsZero() {
		started = finished
	}
	if started.IsZero() {
		started = time.Now()
	}
	if finished.Before(started) {
		finished = started
	}
	id, err := recordFailure(ctx, tx, model, slot, reason, started, finished)
	if err != nil {
		return 0, fmt.Errorf("history: record failed refit of model %q: %w", model, err)
	}
	return id, nil
}

func recordFailure(ctx context.Context, tx pgx.Tx, model string, slot time.Time, reason string, started, finished time.Time) (int64, error) {
	if err := ensureModel(ctx, tx, model); err != nil {
		return 0, err
	}
	var id int64
	err := tx.QueryRow(ctx, `
		INSERT INTO fits (model, status, reason, slot, started_at, finished_at)
		VALUES ($1, 'failed', $2, $3, $4, $5) RETURNING id`,
		model, reason, nullTime(slot), started, finished).Scan(&id)
	return id, err
}

const summaryColumns = `id, model, status, reason, slot, started_at, finished_at, duration_seconds,
	window_first, window_last, rows_read, rows_used, deviance, deviance_explained, edf_total, scale, converged`

// scanFit reads summaryColumns, and the document when withDoc.
func scanFit(row pgx.Row, withDoc bool) (*StoredFit, error) {
	var (
		f                        StoredFit
		reason                   *string
		slot, first, last        *time.Time
		duration                 float64
		rowsRead, rowsUsed       *int64
		dev, devExpl, edf, scale *float64
		converged                *bool
		doc                      []byte
	)
	dest := []any{&f.ID, &f.Model, &f.Status, &reason, &slot, &f.Started, &f.Finished, &duration,
		&first, &last, &rowsRead, &rowsUsed, &dev, &devExpl, &edf, &scale, &converged}
	if withDoc {
		dest = append(dest, &doc)
	}
	if err := row.Scan(dest...); err != nil {
		return nil, err
	}
	f.Reason = deref(reason)
	f.Slot = deref(slot)
	f.Duration = time.Duration(duration * float64(time.Second))
	if first != nil && last != nil {
		f.Window = &Window{First: *first, Last: *last}
	}
	f.RowsRead, f.RowsUsed = deref(rowsRead), deref(rowsUsed)
	f.Deviance, f.DevianceExplained, f.EDFTotal, f.Scale = deref(dev), deref(devExpl), deref(edf), deref(scale)
	f.Converged = deref(converged)
	if doc != nil {
		f.Document = new(fit.Document)
		if err := json.Unmarshal(doc, f.Document); err != nil {
			return nil, fmt.Errorf("decode the document of fit %d: %w", f.ID, err)
		}
	}
	return &f, nil
}

func deref[T any](p *T) T {
	var zero T
	if p == nil {
		return zero
	}
	return *p
}

// Fit returns the fit with the given id, its document decoded (nil for a
// failure). It returns ErrNoFit when there is none.
func (s *Store) Fit(ctx context.Context, id int64) (*StoredFit, error) {
	f, err := scanFit(s.pool.QueryRow(ctx, `SELECT `+summaryColumns+`, document FROM fits WHERE id = $1`, id), true)
	if errors.Is(err, pgx.ErrNoRows) {
		err = ErrNoFit
	}
	if err != nil {
		return nil, fmt.Errorf("history: fit %d: %w", id, err)
	}
	return f, nil
}

// LatestFit returns the model's latest succeeded fit with its document,
// or ErrNoFit when it has none.
func (s *Store) LatestFit(ctx context.Context, model string) (*StoredFit, error) {
	f, err := scanFit(s.pool.QueryRow(ctx, `
		SELECT `+summaryColumns+`, document FROM fits
		WHERE model = $1 AND status = 'succeeded' ORDER BY id DESC LIMIT 1`, model), true)
	if errors.Is(err, pgx.ErrNoRows) {
		err = ErrNoFit
	}
	if err != nil {
		return nil, fmt.Errorf("history: latest fit of model %q: %w", model, err)
	}
	return f, nil
}

// PreviousDisjoint returns the latest succeeded fit of the model recorded
// before fit id `before` whose window does not overlap window (closed
// intervals, as fit.Compare has it), with its document, or ErrNoFit. Fits
// with no window are never chosen: their rows cannot be shown disjoint.
func (s *Store) PreviousDisjoint(ctx context.Context, model string, before int64, window Window) (*StoredFit, error) {
	f, err := scanFit(s.pool.QueryRow(ctx, `
		SELECT `+summaryColumns+`, document FROM fits
		WHERE model = $1 AND status = 'succeeded' AND id < $2
		  AND window_first IS NOT NULL AND (window_last < $3 OR window_first > $4)
		ORDER BY id DESC LIMIT 1`, model, before, window.First, window.Last), true)
	if errors.Is(err, pgx.ErrNoRows) {
		err = ErrNoFit
	}
	if err != nil {
		return nil, fmt.Errorf("history: previous disjoint fit of model %q before fit %d: %w", model, before, err)
	}
	return f, nil
}

// DefaultPage is the number of fits Fits returns when limit is not above 0;
// MaxPage is the most it returns.
const (
	DefaultPage = 50
	MaxPage     = 1000
)

// pageLimit is a page size as the paged reads take it: DefaultPage for 0
// or less, at most MaxPage.
func pageLimit(limit int) int {
	if limit <= 0 {
		return DefaultPage
	}
	return min(limit, MaxPage)
}

// Fits returns a page of the model's fits of every status, newest first,
// without documents: those with id below beforeID, or the newest when
// beforeID is 0. The next page starts before the last one returned.
func (s *Store) Fits(ctx context.Context, model string, limit int, beforeID int64) ([]StoredFit, error) {
	limit = pageLimit(limit)
	rows, err := s.pool.Query(ctx, `
		SELECT `+summaryColumns+` FROM fits
		WHERE model = $1 AND ($2::bigint = 0 OR id < $2::bigint)
		ORDER BY id DESC LIMIT $3`, model, beforeID, limit)
	if err != nil {
		return nil, fmt.Errorf("history: fits of model %q: %w", model, err)
	}
	defer rows.Close()
	var out []StoredFit
	for rows.Next() {
		f, err := scanFit(rows, false)
		if err != nil {
			return nil, fmt.Errorf("history: fits of model %q: %w", model, err)
		}
		out = append(out, *f)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("history: fits of model %q: %w", model, err)
	}
	return out, nil
}
