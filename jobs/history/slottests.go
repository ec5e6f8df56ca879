package history

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/jackc/pgx/v5"
)

// Slot tests support the daemon's optional false-discovery-rate control
// (alerting.fdr): the models that share a schedule form one family per
// slot, and the Benjamini–Hochberg procedure runs over the p-values of
// the whole family once every model of the slot has reported. Refits of
// the family run on different workers and replicas, so the family is
// gathered in slot_tests and judged by whichever refit completes it.
//
// Each refit of a model in FDR mode does, inside its own transaction
// (READ COMMITTED, PostgreSQL's default, so that each statement sees what
// other transactions have committed):
//
//  1. LockSlotTx(schedule, slot): waits until no other transaction of the
//     same schedule and slot holds the lock, and holds it until commit;
//  2. RecordSlotTestTx(schedule, slot, model, fitID, p): its own p-value
//     (nil when the refit failed or made no comparison);
//  3. SlotTestsTx(schedule, slot): the family so far, its own row
//     included.
//
// When the number of rows equals the number of models of the schedule,
// this transaction judges the whole family (adjusts the p-values and
// steps every model's alerts); otherwise it commits its row and leaves
// the judging to a later refit of the slot. Because the lock serialises
// the family's transactions and each sees every earlier one's committed
// row, exactly one of them sees the family complete.
//
// A model recorded twice for one slot (a retried refit) keeps one row,
// with the later p-value. A retry arriving after the family was complete
// would see it complete again; to judge each family once, also call
// SlotTestsTx after LockSlotTx and before RecordSlotTestTx, and judge
// only when the model was missing from that list and the family is now
// complete.
//
// PruneSlotTests removes old slots; a slot whose family never completed
// (a model removed from the config, a refit that never ran) is simply
// never judged as a family.

// SlotTest is one model's report for a slot.
type SlotTest struct {
	Model string
	// FitID is the refit that reported, 0 when it recorded none.
	FitID int64
	// P is the model's p-value; NaN when the refit failed or made no
	// comparison.
	P float64
}

// LockSlotTx takes the transaction-scoped lock of one slot of a schedule
// (a PostgreSQL advisory lock on a hash of the schema, schedule and
// slot), waiting while another transaction holds it. It is released when
// tx ends. See the protocol above.
func (s *Store) LockSlotTx(ctx context.Context, tx pgx.Tx, schedule string, slot time.Time) error {
	if err := advisoryLock(ctx, tx, slotLockName(s.schema, schedule, slot)); err != nil {
		return fmt.Errorf("history: lock slot %s of schedule %q: %w", slotText(slot), schedule, err)
	}
	return nil
}

// RecordSlotTestTx records, inside tx, the model's p-value for one slot
// of its schedule (nil, or NaN, when the refit failed or made no
// comparison), replacing the model's earlier row for that slot. fitID is
// the refit, 0 when none was recorded.
func (s *Store) RecordSlotTestTx(ctx context.Context, tx pgx.Tx, schedule string, slot time.Time, model string, fitID int64, p *float64) error {
	if err := recordSlotTest(ctx, tx, schedule, slot, model, fitID, p); err != nil {
		return fmt.Errorf("history: record the test of model %q for slot %s of schedule %q: %w", model, slotText(slot), schedule, err)
	}
	return nil
}

func recordSlotTest(ctx context.Context, tx pgx.Tx, schedule string, slot time.Time, model string, fitID int64, p *float64) error {
	if schedule == "" {
		return errors.New("the schedule is empty")
	}
	if slot.IsZero() {
		return errors.New("no slot: the false-discovery-rate control needs a scheduled run")
	}
	switch {
	case p == nil:
	case math.IsNaN(*p):
		p = nil
	case *p < 0 || *p > 1:
		return fmt.Errorf("p-value %g outside [0, 1]", *p)
	}
	var fit *int64
	if fitID != 0 {
		fit = &fitID
	}
	if err := ensureModel(ctx, tx, model); err != nil {
		return err
	}
	_, err := tx.Exec(ctx, `
		INSERT INTO slot_tests (schedule, slot, model, fit_id, p_value) VALUES ($1, $2, $3, $4, $5)
		ON CONFLICT (schedule, slot, model) DO UPDATE SET fit_id = EXCLUDED.fit_id, p_value = EXCLUDED.p_value`,
		schedule, slot, model, fit, p)
	return err
}

// SlotTestsTx returns the family's reports for one slot of a schedule, by
// model, as tx sees them (after LockSlotTx: every committed report).
func (s *Store) SlotTestsTx(ctx context.Context, tx pgx.Tx, schedule string, slot time.Time) ([]SlotTest, error) {
	rows, err := tx.Query(ctx, `
		SELECT model, fit_id, p_value FROM slot_tests
		WHERE schedule = $1 AND slot = $2 ORDER BY model`, schedule, slot)
	if err == nil {
		var out []SlotTest
		out, err = pgx.CollectRows(rows, func(row pgx.CollectableRow) (SlotTest, error) {
			var (
				t     SlotTest
				fitID *int64
				p     *float64
			)
			err := row.Scan(&t.Model, &fitID, &p)
			t.FitID, t.P = deref(fitID), nanIfNil(p)
			return t, err
		})
		if err == nil {
			return out, nil
		}
	}
	return nil, fmt.Errorf("history: tests of slot %s of schedule %q: %w", slotText(slot), schedule, err)
}

// PruneSlotTests deletes the reports of slots before the given time and
// returns how many rows went.
func (s *Store) PruneSlotTests(ctx context.Context, before time.Time) (int64, error) {
	tag, err := s.pool.Exec(ctx, `DELETE FROM slot_tests WHERE slot < $1`, before)
	if err != nil {
		return 0, fmt.Errorf("history: prune slot tests before %s: %w", slotText(before), err)
	}
	return tag.RowsAffected(), nil
}

func slotText(slot time.Time) string {
	return slot.UTC().Truncate(time.Microsecond).Format(time.RFC3339Nano)
}

// slotLockName names the lock of one slot: the schema (which holds no
// slash) and the slot first, the schedule, free text, last, so that
// distinct triples give distinct names.
func slotLockName(schema, schedule string, slot time.Time) string {
	return "slot tests/" + schema + "/" + slotText(slot) + "/" + schedule
}

// advisoryLock takes a transaction-scoped advisory lock keyed on a 64-bit
// hash of name (PostgreSQL's hashtextextended). Names start with what the
// lock is for and include the schema, so stores in different schemas of
// one database do not wait for each other; a hash collision would only
// make two unrelated transactions wait, never let two related ones in.
func advisoryLock(ctx context.Context, tx pgx.Tx, name string) error {
	if _, err := tx.Exec(ctx, `SELECT pg_advisory_xact_lock(hashtextextended($1, 0))`, "curvewatch "+name); err != nil {
		return fmt.Errorf("advisory lock: %w", err)
	}
	return nil
}
