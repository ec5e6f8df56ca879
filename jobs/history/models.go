package history

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"time"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/jackc/pgx/v5"
)

// Who pinned a baseline, as in baselines.pinned_by.
const (
	// PinnedAuto: the daemon pinned the model's first successful fit.
	PinnedAuto = "auto"
	// PinnedOperator: pinned by hand (curvewatch baseline pin).
	PinnedOperator = "operator"
)

// UpsertModel records the model's spec, inserting the model or replacing
// the spec it had.
func (s *Store) UpsertModel(ctx context.Context, name string, spec *fit.Spec) error {
	if spec == nil {
		return fmt.Errorf("history: model %q: no spec", name)
	}
	if name == "" {
		return errors.New("history: a model needs a name")
	}
	body, err := json.Marshal(spec)
	if err != nil {
		return fmt.Errorf("history: model %q: encode the spec: %w", name, err)
	}
	_, err = s.pool.Exec(ctx, `
		INSERT INTO models (name, spec) VALUES ($1, $2)
		ON CONFLICT (name) DO UPDATE SET spec = EXCLUDED.spec, updated_at = now()`, name, body)
	if err != nil {
		return fmt.Errorf("history: model %q: store the spec: %w", name, err)
	}
	return nil
}

// PinBaseline makes fit fitID, a succeeded fit of the model, its baseline.
// by is PinnedOperator, which replaces any baseline, or PinnedAuto, which
// pins only a model that has none (so the daemon may offer every
// successful fit and the first one stays).
func (s *Store) PinBaseline(ctx context.Context, model string, fitID int64, by string) error {
	return s.InTx(ctx, func(tx pgx.Tx) error { return s.PinBaselineTx(ctx, tx, model, fitID, by) })
}

// PinBaselineTx is PinBaseline inside the caller's transaction.
func (s *Store) PinBaselineTx(ctx context.Context, tx pgx.Tx, model string, fitID int64, by string) error {
	if by != PinnedAuto && by != PinnedOperator {
		return fmt.Errorf("history: pin baseline of model %q: pinned by %q: want %q or %q", model, by, PinnedAuto, PinnedOperator)
	}
	var status Status
	err := tx.QueryRow(ctx, `SELECT status FROM fits WHERE id = $1 AND model = $2`, fitID, model).Scan(&status)
	if errors.Is(err, pgx.ErrNoRows) {
		return fmt.Errorf("history: pin baseline of model %q: fit %d is not a fit of this model: %w", model, fitID, ErrNoFit)
	}
	if err != nil {
		return fmt.Errorf("history: pin baseline of model %q: %w", model, err)
	}
	if status != StatusSucceeded {
		return fmt.Errorf("history: pin baseline of model %q: fit %d is %s; only a succeeded fit can be a baseline", model, fitID, status)
	}
	_, err = tx.Exec(ctx, `
		INSERT INTO baselines (model, fit_id, pinned_by) VALUES ($1, $2, $3)
		ON CONFLICT (model) DO UPDATE
		SET fit_id = EXCLUDED.fit_id, pinned_at = now(), pinned_by = EXCLUDED.pinned_by
		WHERE EXCLUDED.pinned_by = 'operator'`, model, fitID, by)
	if err != nil {
		return fmt.Errorf("history: pin baseline of model %q to fit %d: %w", model, fitID, err)
	}
	return nil
}

// Baseline returns the model's pinned fit; ok is false when none is pinned.
func (s *Store) Baseline(ctx context.Context, model string) (fitID int64, ok bool, err error) {
	err = s.pool.QueryRow(ctx, `SELECT fit_id FROM baselines WHERE model = $1`, model).Scan(&fitID)
	if errors.Is(err, pgx.ErrNoRows) {
		return 0, false, nil
	}
	if err != nil {
		return 0, false, fmt.Errorf("history: baseline of model %q: %w", model, err)
	}
	return fitID, true, nil
}

// Watermark returns the newest source time a committed refit of the model
// has read; ok is false before the first.
func (s *Store) Watermark(ctx context.Context, model string) (ts time.Time, ok bool, err error) {
	err = s.pool.QueryRow(ctx, `SELECT last_seen FROM watermarks WHERE model = $1`, model).Scan(&ts)
	if errors.Is(err, pgx.ErrNoRows) {
		return time.Time{}, false, nil
	}
	if err != nil {
		return time.Time{}, false, fmt.Errorf("history: watermark of model %q: %w", model, err)
	}
	return ts, true, nil
}

// AdvanceWatermark moves the model's watermark to ts inside tx, so that it
// moves only if tx commits. It never moves backwards: an older ts leaves
// it where it is. PostgreSQL keeps microseconds; finer digits are dropped.
func (s *Store) AdvanceWatermark(ctx context.Context, tx pgx.Tx, model string, ts time.Time) error {
	if err := advanceWatermark(ctx, tx, model, ts); err != nil {
		return fmt.Errorf("history: advance the watermark of model %q: %w", model, err)
	}
	return nil
}

func advanceWatermark(ctx context.Context, tx pgx.Tx, model string, ts time.Time) error {
	if ts.IsZero() {
		return errors.New("zero time")
	}
	if err := ensureModel(ctx, tx, model); err != nil {
		return err
	}
	_, err := tx.Exec(ctx, `
		INSERT INTO watermarks (model, last_seen) VALUES ($1, $2)
		ON CONFLICT (model) DO UPDATE
		SET last_seen = GREATEST(watermarks.last_seen, EXCLUDED.last_seen), updated_at = now()`, model, ts)
	return err
}
