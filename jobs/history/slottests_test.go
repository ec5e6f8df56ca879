package history_test

import (
	"errors"
	"fmt"
	"math"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
)

func slotTests(t *testing.T, s *history.Store, schedule string, slot time.Time) []history.SlotTest {
	t.Helper()
	var out []history.SlotTest
	err := s.InTx(ctxT(t), func(tx pgx.Tx) error {
		var err error
		out, err = s.SlotTestsTx(ctxT(t), tx, schedule, slot)
		return err
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

func recordSlotTest(s *history.Store, t *testing.T, schedule string, slot time.Time, model string, fitID int64, p *float64) error {
	return s.InTx(ctxT(t), func(tx pgx.Tx) error {
		return s.RecordSlotTestTx(ctxT(t), tx, schedule, slot, model, fitID, p)
	})
}

func ptr(f float64) *float64 { return &f }

// TestSlotTestsRecord: one row per model and slot of a schedule, the last
// report winning; a missing or NaN p-value reads back as NaN; slots and
// schedules are kept apart; pruning goes by slot.
func TestSlotTestsRecord(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	doc, _ := testDocs(t)
	fitB, err := s.RecordFit(ctxT(t), record("b", day(1), doc))
	if err != nil {
		t.Fatal(err)
	}
	const daily = "0 3 * * *"
	for _, r := range []struct {
		schedule string
		slot     time.Time
		model    string
		fitID    int64
		p        *float64
	}{
		{daily, day(1), "c", 0, nil},
		{daily, day(1), "b", 0, nil},
		{daily, day(1), "a", 0, ptr(math.NaN())},
		{daily, day(1), "b", fitB, ptr(0.003)}, // a retry replaces b's row
		{daily, day(2), "a", 0, ptr(0.5)},
		{"@every 10m", day(1), "a", 0, ptr(0.2)},
	} {
		if err := recordSlotTest(s, t, r.schedule, r.slot, r.model, r.fitID, r.p); err != nil {
			t.Fatal(err)
		}
	}
	got := slotTests(t, s, daily, day(1))
	if len(got) != 3 || got[0].Model != "a" || got[1].Model != "b" || got[2].Model != "c" {
		t.Fatalf("slot tests %+v", got)
	}
	if !math.IsNaN(got[0].P) || got[1].P != 0.003 || got[1].FitID != fitB || !math.IsNaN(got[2].P) || got[2].FitID != 0 {
		t.Errorf("slot tests %+v", got)
	}
	if got := slotTests(t, s, daily, day(3)); len(got) != 0 {
		t.Errorf("an empty slot: %+v", got)
	}

	for _, p := range []float64{-0.1, 1.5} {
		err := recordSlotTest(s, t, daily, day(1), "a", 0, &p)
		if err == nil || !strings.Contains(err.Error(), `"a"`) {
			t.Errorf("p-value %g: %v", p, err)
		}
	}
	for _, tc := range []struct{ schedule, model string }{{"", "a"}, {daily, ""}} {
		if err := recordSlotTest(s, t, tc.schedule, day(1), tc.model, 0, nil); err == nil {
			t.Errorf("schedule %q, model %q accepted", tc.schedule, tc.model)
		}
	}
	if err := recordSlotTest(s, t, daily, time.Time{}, "a", 0, nil); err == nil {
		t.Errorf("a manual run (no slot) accepted")
	}

	n, err := s.PruneSlotTests(ctxT(t), day(2))
	if err != nil || n != 4 {
		t.Fatalf("pruned %d (%v), want the 4 rows of day 1", n, err)
	}
	if got := slotTests(t, s, daily, day(2)); len(got) != 1 {
		t.Errorf("day 2 after pruning: %+v", got)
	}
}

// TestSlotFamilyJudgedOnce runs the documented protocol for every model
// of a schedule at once, slot after slot: in each slot exactly one
// transaction sees the family complete, and it sees every member's
// p-value.
func TestSlotFamilyJudgedOnce(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	const members, slots = 6, 5
	const schedule = "@every 1h"
	for slot := range slots {
		type seen struct {
			complete bool
			tests    []history.SlotTest
		}
		views := make([]seen, members)
		errs := make([]error, members)
		start := make(chan struct{})
		var wg sync.WaitGroup
		for m := range members {
			wg.Go(func() {
				<-start
				errs[m] = s.InTx(ctxT(t), func(tx pgx.Tx) error {
					if err := s.LockSlotTx(ctxT(t), tx, schedule, day(slot)); err != nil {
						return err
					}
					p := float64(m+1) / 100
					if err := s.RecordSlotTestTx(ctxT(t), tx, schedule, day(slot), fmt.Sprintf("m%d", m), 0, &p); err != nil {
						return err
					}
					tests, err := s.SlotTestsTx(ctxT(t), tx, schedule, day(slot))
					views[m] = seen{complete: len(tests) == members, tests: tests}
					return err
				})
			})
		}
		close(start)
		wg.Wait()
		judges := 0
		for m := range members {
			if errs[m] != nil {
				t.Fatalf("slot %d, member %d: %v", slot, m, errs[m])
			}
			if !views[m].complete {
				continue
			}
			judges++
			for i, tt := range views[m].tests {
				if tt.Model != fmt.Sprintf("m%d", i) || tt.P != float64(i+1)/100 {
					t.Errorf("slot %d: the judge saw %+v", slot, views[m].tests)
					break
				}
			}
		}
		if judges != 1 {
			t.Errorf("slot %d: %d transactions saw the family complete, want exactly 1", slot, judges)
		}
	}
}

// TestLockSlotTx holds one slot of one schedule in one schema: another
// transaction cannot take the same lock, but can take another slot's,
// another schedule's, or the same slot's in another schema.
func TestLockSlotTx(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	s2, _ := newStore(t)
	held, release, done := make(chan struct{}), make(chan struct{}), make(chan error, 1)
	go func() {
		done <- s.InTx(ctxT(t), func(tx pgx.Tx) error {
			err := s.LockSlotTx(ctxT(t), tx, "0 3 * * *", day(1))
			close(held)
			if err != nil {
				return err
			}
			<-release
			return nil
		})
	}()
	<-held
	try := func(st *history.Store, schedule string, slot time.Time) error {
		return st.InTx(ctxT(t), func(tx pgx.Tx) error {
			if _, err := tx.Exec(ctxT(t), `SET LOCAL lock_timeout = '200ms'`); err != nil {
				return err
			}
			return st.LockSlotTx(ctxT(t), tx, schedule, slot)
		})
	}
	err := try(s, "0 3 * * *", day(1))
	var pe *pgconn.PgError
	if !errors.As(err, &pe) || pe.Code != "55P03" {
		t.Errorf("the same slot while held: %v, want lock_not_available (55P03)", err)
	}
	if err == nil || !strings.Contains(err.Error(), `"0 3 * * *"`) {
		t.Errorf("the error does not name the schedule: %v", err)
	}
	for _, tc := range []struct {
		name     string
		st       *history.Store
		schedule string
		slot     time.Time
	}{
		{"another slot", s, "0 3 * * *", day(2)},
		{"another schedule", s, "0 4 * * *", day(1)},
		{"another schema", s2, "0 3 * * *", day(1)},
	} {
		if err := try(tc.st, tc.schedule, tc.slot); err != nil {
			t.Errorf("%s: %v", tc.name, err)
		}
	}
	close(release)
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if err := try(s, "0 3 * * *", day(1)); err != nil {
		t.Errorf("the same slot after release: %v", err)
	}
}
