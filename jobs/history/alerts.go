package history

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/jackc/pgx/v5"
)

// Alert states live in alert_states, one row per (model, term, kind), and
// every change of state is logged in alert_events. A refit reads its
// model's states with AlertStatesTx, applies its findings with
// alerts.Step, and writes each result back with SaveAlertTx (and queues
// the delivered changes with EnqueueTx), all in the refit's transaction:
//
//	err := store.InTx(ctx, func(tx pgx.Tx) error {
//		states, err := store.AlertStatesTx(ctx, tx, model) // waits for any other refit of model
//		…
//		next, tr := alerts.Step(states[key], finding, confirm, now)
//		if err := store.SaveAlertTx(ctx, tx, next, tr, fitID); err != nil {
//			return err
//		}
//		if tr != nil && tr.Deliver {
//			return store.EnqueueTx(ctx, tx, receivers, alerts.NewAlert(next, dashboard))
//		}
//		…
//	})
//
// Times are kept to the microsecond (PostgreSQL's precision); a status
// read back has its times truncated so.

// AlertStatesTx returns the stored alert states of the model, keyed by
// (model, term, kind), and locks them until tx ends: a second transaction
// calling AlertStatesTx for the same model waits until tx commits or rolls
// back, and then sees what tx wrote. So two refits of one model (two
// replicas, or a scheduled run and a manual one) cannot interleave their
// state changes. The lock holds even before the model has any alert row
// (a transaction-scoped advisory lock on the schema and model), and the
// rows themselves are locked FOR UPDATE against any other writer.
//
// A model with no alerts gets an empty map, never nil.
func (s *Store) AlertStatesTx(ctx context.Context, tx pgx.Tx, model string) (map[alerts.Key]alerts.Status, error) {
	out, err := alertStates(ctx, tx, s.schema, model)
	if err != nil {
		return nil, fmt.Errorf("history: alert states of model %q: %w", model, err)
	}
	return out, nil
}

func alertStates(ctx context.Context, tx pgx.Tx, schema, model string) (map[alerts.Key]alerts.Status, error) {
	if model == "" {
		return nil, errors.New("the model name is empty")
	}
	if err := advisoryLock(ctx, tx, "alert states/"+schema+"/"+model); err != nil {
		return nil, err
	}
	rows, err := tx.Query(ctx, `SELECT `+statusColumns+` FROM alert_states WHERE model = $1 FOR UPDATE`, model)
	if err != nil {
		return nil, err
	}
	list, err := pgx.CollectRows(rows, scanStatus)
	if err != nil {
		return nil, err
	}
	out := make(map[alerts.Key]alerts.Status, len(list))
	for _, st := range list {
		out[st.Key] = st
	}
	return out, nil
}

// SaveAlertTx stores st, the state of one alert after a refit's
// evaluation, inside tx: it inserts or replaces the alert_states row
// (state, since, firing_since, consecutive, summary, numbers, updated_at =
// the transaction's time). When tr is not nil (the state changed) it also
// logs an alert_events row with the new state, at st.Since, with st's
// summary and numbers and the refit's fitID (NULL when fitID is 0); with
// tr nil no event is written.
//
// A status in alerts.StateNone (an alert that never opened) is not
// stored, and then tr must be nil. Numbers that JSON cannot hold (NaN,
// ±Inf) are stored as null rather than failing the refit.
func (s *Store) SaveAlertTx(ctx context.Context, tx pgx.Tx, st alerts.Status, tr *alerts.Transition, fitID int64) error {
	if err := saveAlert(ctx, tx, st, tr, fitID); err != nil {
		return fmt.Errorf("history: save alert %s of model %q: %w", st.Key, st.Model, err)
	}
	return nil
}

func saveAlert(ctx context.Context, tx pgx.Tx, st alerts.Status, tr *alerts.Transition, fitID int64) error {
	switch st.State {
	case alerts.StateNone:
		if tr != nil {
			return fmt.Errorf("a transition from %q to %q leaves no state to store", tr.From, tr.To)
		}
		return nil
	case alerts.StatePending, alerts.StateFiring, alerts.StateResolved:
	default:
		return fmt.Errorf("unknown state %q", st.State)
	}
	switch {
	case st.Kind == "":
		return errors.New("the alert has no kind")
	case st.Since.IsZero():
		return fmt.Errorf("a %s alert needs the time it entered that state (Since)", st.State)
	case st.Consecutive < 0:
		return fmt.Errorf("consecutive runs %d below 0", st.Consecutive)
	case tr != nil && tr.To != st.State:
		return fmt.Errorf("the transition enters %q but the status is %q", tr.To, st.State)
	}
	numbers, err := numbersJSON(st.Numbers)
	if err != nil {
		return err
	}
	if err := ensureModel(ctx, tx, st.Model); err != nil {
		return err
	}
	_, err = tx.Exec(ctx, `
		INSERT INTO alert_states (model, term, kind, state, since, firing_since, consecutive, summary, numbers, updated_at)
		VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, now())
		ON CONFLICT (model, term, kind) DO UPDATE
		SET state = EXCLUDED.state, since = EXCLUDED.since, firing_since = EXCLUDED.firing_since,
		    consecutive = EXCLUDED.consecutive, summary = EXCLUDED.summary, numbers = EXCLUDED.numbers,
		    updated_at = EXCLUDED.updated_at`,
		st.Model, st.Term, string(st.Kind), string(st.State), st.Since, nullTime(st.FiringSince),
		st.Consecutive, st.Summary, numbers)
	if err != nil {
		return err
	}
	if tr == nil {
		return nil
	}
	var fit *int64
	if fitID != 0 {
		fit = &fitID
	}
	_, err = tx.Exec(ctx, `
		INSERT INTO alert_events (model, term, kind, state, at, summary, numbers, fit_id)
		VALUES ($1, $2, $3, $4, $5, $6, $7, $8)`,
		st.Model, st.Term, string(st.Kind), string(st.State), st.Since, st.Summary, numbers, fit)
	if err != nil {
		return fmt.Errorf("log the transition %s → %s: %w", stateName(tr.From), tr.To, err)
	}
	return nil
}

func stateName(s alerts.State) string {
	if s == alerts.StateNone {
		return "none"
	}
	return string(s)
}

// AlertFilter selects alerts. Zero fields select everything.
type AlertFilter struct {
	// Model selects one model's alerts.
	Model string
	// States selects the alerts in any of these states.
	States []alerts.State
}

const statusColumns = `model, term, kind, state, since, firing_since, consecutive, summary, numbers`

func scanStatus(row pgx.CollectableRow) (alerts.Status, error) {
	var (
		st      alerts.Status
		firing  *time.Time
		numbers []byte
	)
	if err := row.Scan(&st.Model, &st.Term, &st.Kind, &st.State, &st.Since, &firing,
		&st.Consecutive, &st.Summary, &numbers); err != nil {
		return st, err
	}
	st.FiringSince = deref(firing)
	var err error
	st.Numbers, err = decodeNumbers(numbers)
	if err != nil {
		return st, fmt.Errorf("alert %s: %w", st.Key, err)
	}
	return st, nil
}

// Alerts returns the stored alerts that filter selects: firing ones first,
// then by model, term and kind.
func (s *Store) Alerts(ctx context.Context, filter AlertFilter) ([]alerts.Status, error) {
	states := make([]string, len(filter.States))
	for i, st := range filter.States {
		states[i] = string(st)
	}
	rows, err := s.pool.Query(ctx, `
		SELECT `+statusColumns+` FROM alert_states
		WHERE ($1 = '' OR model = $1) AND (cardinality($2::text[]) = 0 OR state = ANY($2::text[]))
		ORDER BY state = 'firing' DESC, model, term, kind`, filter.Model, states)
	if err == nil {
		var out []alerts.Status
		out, err = pgx.CollectRows(rows, scanStatus)
		if err == nil {
			return out, nil
		}
	}
	if filter.Model != "" {
		return nil, fmt.Errorf("history: alerts of model %q: %w", filter.Model, err)
	}
	return nil, fmt.Errorf("history: alerts: %w", err)
}

// FiringAlerts returns every firing alert, by model, term and kind (what
// a dispatcher re-announces to Alertmanager, which forgets an alert that
// is not repeated).
func (s *Store) FiringAlerts(ctx context.Context) ([]alerts.Status, error) {
	return s.Alerts(ctx, AlertFilter{States: []alerts.State{alerts.StateFiring}})
}

// AlertEvent is one logged change of an alert's state.
type AlertEvent struct {
	ID int64
	alerts.Key
	// State is the state entered, At when.
	State   alerts.State
	At      time.Time
	Summary string
	Numbers map[string]any
	// FitID is the refit whose evaluation made the change, 0 when none
	// (or when that fit was since deleted).
	FitID int64
}

// AlertEvents returns a page of the model's alert events (every model's
// when model is ""), newest first: those with id below beforeID, or the
// newest when beforeID is 0. limit is as for Fits.
func (s *Store) AlertEvents(ctx context.Context, model string, limit int, beforeID int64) ([]AlertEvent, error) {
	limit = pageLimit(limit)
	rows, err := s.pool.Query(ctx, `
		SELECT id, model, term, kind, state, at, summary, numbers, fit_id FROM alert_events
		WHERE ($1 = '' OR model = $1) AND ($2::bigint = 0 OR id < $2::bigint)
		ORDER BY id DESC LIMIT $3`, model, beforeID, limit)
	if err != nil {
		return nil, fmt.Errorf("history: alert events of model %q: %w", model, err)
	}
	out, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (AlertEvent, error) {
		var (
			e       AlertEvent
			numbers []byte
			fitID   *int64
		)
		if err := row.Scan(&e.ID, &e.Model, &e.Term, &e.Kind, &e.State, &e.At, &e.Summary, &numbers, &fitID); err != nil {
			return e, err
		}
		e.FitID = deref(fitID)
		var err error
		e.Numbers, err = decodeNumbers(numbers)
		if err != nil {
			return e, fmt.Errorf("event %d: %w", e.ID, err)
		}
		return e, nil
	})
	if err != nil {
		return nil, fmt.Errorf("history: alert events of model %q: %w", model, err)
	}
	return out, nil
}

// numbersJSON encodes an alert's numbers for a jsonb column: nil for none,
// and with every NaN or infinite number replaced by null, which JSON
// cannot otherwise hold.
func numbersJSON(numbers map[string]any) ([]byte, error) {
	if len(numbers) == 0 {
		return nil, nil
	}
	b, err := json.Marshal(finiteJSON(numbers))
	if err != nil {
		return nil, fmt.Errorf("encode the numbers: %w", err)
	}
	return b, nil
}

// finiteJSON returns v with each non-finite float (also inside maps and
// slices of the kinds JSON decoding produces, and float slices) replaced
// by nil. It copies what it changes and leaves v alone.
func finiteJSON(v any) any {
	switch x := v.(type) {
	case float64:
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return nil
		}
	case float32:
		if f := float64(x); math.IsNaN(f) || math.IsInf(f, 0) {
			return nil
		}
	case []float64:
		out := make([]any, len(x))
		for i, f := range x {
			out[i] = finiteJSON(f)
		}
		return out
	case []any:
		out := make([]any, len(x))
		for i, e := range x {
			out[i] = finiteJSON(e)
		}
		return out
	case map[string]any:
		out := make(map[string]any, len(x))
		for k, e := range x {
			out[k] = finiteJSON(e)
		}
		return out
	case map[string]float64:
		out := make(map[string]any, len(x))
		for k, f := range x {
			out[k] = finiteJSON(f)
		}
		return out
	}
	return v
}

func decodeNumbers(b []byte) (map[string]any, error) {
	if b == nil {
		return nil, nil
	}
	var out map[string]any
	if err := json.Unmarshal(b, &out); err != nil {
		return nil, fmt.Errorf("decode the numbers: %w", err)
	}
	return out, nil
}
