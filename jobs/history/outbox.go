package history

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/jackc/pgx/v5"
)

// The outbox (alert_deliveries) holds one row per alert state change per
// receiver. A refit queues its changes with EnqueueTx in its own
// transaction, so a change is queued if and only if the refit's states
// commit; dispatchers on any number of replicas take due rows with
// Store.Outbox().Claim and report each attempt's outcome.
//
// A delivery's life:
//
//	queued ──Claim (due_at = now + lease)──▶ attempt ──Delivered──▶ delivered
//	                                                  ──Retry──────▶ queued, due at next
//	                                                  ──Abandon────▶ abandoned
//
// A dispatcher that dies mid-attempt reports nothing; its lease runs out
// and the row is claimed again, its attempts unchanged.

// ErrNoDelivery: there is no delivery with that id (never queued, or
// pruned).
var ErrNoDelivery = errors.New("no such delivery")

// DeliveryState is the state of a row of the outbox.
type DeliveryState string

// Delivery states, as in alert_deliveries.state.
const (
	DeliveryQueued    DeliveryState = "queued"
	DeliveryDelivered DeliveryState = "delivered"
	DeliveryAbandoned DeliveryState = "abandoned"
)

// EnqueueTx queues alert a for each receiver inside tx. The idempotency
// key is a.IdempotencyKey(): a change already queued for a receiver
// (the same alert, state and time of change) is not queued again, so a
// repeated refit or resend queues it once. The alert's times are first
// truncated to the microsecond, the precision alert_states keeps, so an
// alert rebuilt later from the stored status has the same key.
func (s *Store) EnqueueTx(ctx context.Context, tx pgx.Tx, receivers []string, a alerts.Alert) error {
	if err := enqueue(ctx, tx, receivers, a); err != nil {
		return fmt.Errorf("history: queue alert %s of model %q: %w", a.Key, a.Model, err)
	}
	return nil
}

func enqueue(ctx context.Context, tx pgx.Tx, receivers []string, a alerts.Alert) error {
	if len(receivers) == 0 {
		return nil
	}
	for _, r := range receivers {
		if r == "" {
			return errors.New("a receiver has no name")
		}
	}
	a.StartsAt = a.StartsAt.Truncate(time.Microsecond)
	a.EndsAt = a.EndsAt.Truncate(time.Microsecond)
	a.ChangedAt = a.ChangedAt.Truncate(time.Microsecond)
	if n, ok := finiteJSON(a.Numbers).(map[string]any); ok && len(n) > 0 {
		a.Numbers = n
	}
	body, err := json.Marshal(a)
	if err != nil {
		return fmt.Errorf("encode the alert: %w", err)
	}
	if err := ensureModel(ctx, tx, a.Model); err != nil {
		return err
	}
	_, err = tx.Exec(ctx, `
		INSERT INTO alert_deliveries (receiver, idempotency_key, model, alert)
		SELECT DISTINCT r, $2::text, $3::text, $4::jsonb FROM unnest($1::text[]) AS r
		ON CONFLICT (receiver, idempotency_key) DO NOTHING`,
		receivers, a.IdempotencyKey(), a.Model, body)
	return err
}

// Outbox returns the outbox in the store's schema, for an
// alerts.Dispatcher.
func (s *Store) Outbox() alerts.Outbox { return outbox{s} }

type outbox struct{ s *Store }

// Claim takes up to limit queued deliveries whose due_at has come, in due
// order, and makes them due again only after lease: until then no other
// claimer (on this or another replica) sees them. Rows that another
// claimer is taking at the same moment are skipped, not waited for. A
// delivery waits while an earlier one of the same alert to the same
// receiver is still queued.
func (o outbox) Claim(ctx context.Context, limit int, lease time.Duration) ([]alerts.Delivery, error) {
	if limit <= 0 {
		return nil, nil
	}
	if lease <= 0 {
		return nil, fmt.Errorf("history: claim deliveries: lease %v: want a positive duration", lease)
	}
	rows, err := o.s.pool.Query(ctx, `
		WITH due AS (
			SELECT id, due_at FROM alert_deliveries q
			WHERE state = 'queued' AND due_at <= now()
			  -- A later change of an alert never overtakes an earlier
			  -- one still queued for the same receiver (a resolution
			  -- waits for its firing).
			  AND NOT EXISTS (SELECT 1 FROM alert_deliveries o
			                  WHERE o.state = 'queued' AND o.receiver = q.receiver AND o.model = q.model
			                    AND o.alert->>'term' = q.alert->>'term' AND o.alert->>'kind' = q.alert->>'kind'
			                    AND o.id < q.id)
			ORDER BY due_at, id LIMIT $1
			FOR UPDATE SKIP LOCKED
		), claimed AS (
			UPDATE alert_deliveries d SET due_at = now() + $2::bigint * interval '1 microsecond'
			FROM due WHERE d.id = due.id
			RETURNING d.id, d.receiver, d.alert, d.attempts, d.created_at, due.due_at AS was_due
		)
		SELECT id, receiver, alert, attempts, created_at FROM claimed ORDER BY was_due, id`,
		limit, lease.Microseconds())
	if err != nil {
		return nil, fmt.Errorf("history: claim deliveries: %w", err)
	}
	out, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (alerts.Delivery, error) {
		var (
			d    alerts.Delivery
			body []byte
		)
		if err := row.Scan(&d.ID, &d.Receiver, &body, &d.Attempts, &d.Created); err != nil {
			return d, err
		}
		if err := json.Unmarshal(body, &d.Alert); err != nil {
			return d, fmt.Errorf("delivery %d: decode the alert: %w", d.ID, err)
		}
		return d, nil
	})
	if err != nil {
		return nil, fmt.Errorf("history: claim deliveries: %w", err)
	}
	return out, nil
}

// Delivered marks a claimed delivery delivered, counting the attempt. A
// delivery that is no longer queued (another claimer finished it after
// this one's lease ran out) is left as it is.
func (o outbox) Delivered(ctx context.Context, id int64) error {
	return o.finish(ctx, id, "delivered", `
		UPDATE alert_deliveries SET state = 'delivered', attempts = attempts + 1, finished_at = now()
		WHERE id = $1 AND state = 'queued'`, id)
}

// Retry counts a failed attempt, keeps its reason and makes the delivery
// due again at next.
func (o outbox) Retry(ctx context.Context, id int64, next time.Time, reason string) error {
	return o.finish(ctx, id, "retry", `
		UPDATE alert_deliveries SET attempts = attempts + 1, due_at = $2, last_error = $3
		WHERE id = $1 AND state = 'queued'`, id, next, reason)
}

// Abandon counts a failed attempt, keeps its reason and gives the
// delivery up.
func (o outbox) Abandon(ctx context.Context, id int64, reason string) error {
	return o.finish(ctx, id, "abandon", `
		UPDATE alert_deliveries SET state = 'abandoned', attempts = attempts + 1, last_error = $2, finished_at = now()
		WHERE id = $1 AND state = 'queued'`, id, reason)
}

// finish runs one of the updates above; when it changes nothing it tells
// a finished delivery (no error) from a missing one (ErrNoDelivery).
func (o outbox) finish(ctx context.Context, id int64, op, sql string, args ...any) error {
	tag, err := o.s.pool.Exec(ctx, sql, args...)
	if err != nil {
		return fmt.Errorf("history: %s delivery %d: %w", op, id, err)
	}
	if tag.RowsAffected() == 1 {
		return nil
	}
	var exists bool
	if err := o.s.pool.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM alert_deliveries WHERE id = $1)`, id).Scan(&exists); err != nil {
		return fmt.Errorf("history: %s delivery %d: %w", op, id, err)
	}
	if !exists {
		return fmt.Errorf("history: %s delivery %d: %w", op, id, ErrNoDelivery)
	}
	return nil
}

// DeliveryRow is a row of the outbox, for the API.
type DeliveryRow struct {
	ID       int64
	Receiver string
	// Key is the idempotency key (alerts.Alert.IdempotencyKey).
	Key   string
	Model string
	// Alert is what the receiver is told.
	Alert    alerts.Alert
	State    DeliveryState
	Attempts int
	// LastError is why the latest failed attempt failed, "" when none has.
	LastError string
	Created   time.Time
	// Due is when the next attempt is due (while queued).
	Due time.Time
	// Finished is when it was delivered or abandoned, zero while queued.
	Finished time.Time
}

// Deliveries returns the model's newest deliveries (every model's when
// model is ""), newest first; limit is as for Fits.
func (s *Store) Deliveries(ctx context.Context, model string, limit int) ([]DeliveryRow, error) {
	limit = pageLimit(limit)
	rows, err := s.pool.Query(ctx, `
		SELECT id, receiver, idempotency_key, model, alert, state, attempts, last_error, created_at, due_at, finished_at
		FROM alert_deliveries WHERE ($1 = '' OR model = $1)
		ORDER BY id DESC LIMIT $2`, model, limit)
	if err != nil {
		return nil, fmt.Errorf("history: deliveries of model %q: %w", model, err)
	}
	out, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (DeliveryRow, error) {
		var (
			d         DeliveryRow
			body      []byte
			lastError *string
			finished  *time.Time
		)
		if err := row.Scan(&d.ID, &d.Receiver, &d.Key, &d.Model, &body, &d.State, &d.Attempts,
			&lastError, &d.Created, &d.Due, &finished); err != nil {
			return d, err
		}
		d.LastError, d.Finished = deref(lastError), deref(finished)
		if err := json.Unmarshal(body, &d.Alert); err != nil {
			return d, fmt.Errorf("delivery %d: decode the alert: %w", d.ID, err)
		}
		return d, nil
	})
	if err != nil {
		return nil, fmt.Errorf("history: deliveries of model %q: %w", model, err)
	}
	return out, nil
}

// PruneDeliveries deletes the delivered and abandoned deliveries that
// finished more than olderThan ago, and returns how many. Queued ones are
// never pruned.
func (s *Store) PruneDeliveries(ctx context.Context, olderThan time.Duration) (int64, error) {
	if olderThan < 0 {
		return 0, fmt.Errorf("history: prune deliveries: age %v is negative", olderThan)
	}
	tag, err := s.pool.Exec(ctx, `
		DELETE FROM alert_deliveries
		WHERE state <> 'queued' AND finished_at < now() - $1::bigint * interval '1 microsecond'`,
		olderThan.Microseconds())
	if err != nil {
		return 0, fmt.Errorf("history: prune deliveries: %w", err)
	}
	return tag.RowsAffected(), nil
}
