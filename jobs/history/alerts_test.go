package history_test

import (
	"context"
	"errors"
	"math"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/jackc/pgx/v5"
)

// saveAlert stores one status in its own transaction.
func saveAlert(t *testing.T, s *history.Store, st alerts.Status, tr *alerts.Transition, fitID int64) {
	t.Helper()
	if err := s.InTx(ctxT(t), func(tx pgx.Tx) error { return s.SaveAlertTx(ctxT(t), tx, st, tr, fitID) }); err != nil {
		t.Fatal(err)
	}
}

func alertStates(t *testing.T, s *history.Store, model string) map[alerts.Key]alerts.Status {
	t.Helper()
	var out map[alerts.Key]alerts.Status
	err := s.InTx(ctxT(t), func(tx pgx.Tx) error {
		var err error
		out, err = s.AlertStatesTx(ctxT(t), tx, model)
		return err
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// TestSaveAlertEventsOnTransitions steps one alert through pending,
// firing, a repeated breach and resolution, storing each result as a
// refit would: the state row follows every step, and an event is logged
// only for the three transitions.
func TestSaveAlertEventsOnTransitions(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	doc, _ := testDocs(t)
	fitIDs := make([]int64, 5)
	for i := range fitIDs {
		id, err := s.RecordFit(ctxT(t), record("m", day(i), doc))
		if err != nil {
			t.Fatal(err)
		}
		fitIDs[i] = id
	}
	key := alerts.Key{Model: "m", Term: "x", Kind: alerts.KindCurveShift}
	steps := []struct {
		breach    bool
		fitID     int64
		wantState alerts.State
		wantEvent bool
	}{
		{true, fitIDs[0], alerts.StatePending, true},
		{true, fitIDs[1], alerts.StateFiring, true},
		{true, fitIDs[2], alerts.StateFiring, false},
		{false, 0, alerts.StateResolved, true}, // no fit: the event's fit_id is NULL
		{false, fitIDs[4], alerts.StateResolved, false},
	}
	var wantEvents []alerts.State
	for i, step := range steps {
		now := day(i).Add(time.Hour)
		prev := alertStates(t, s, "m")[key]
		f := alerts.Finding{Model: "m", Term: "x", Kind: alerts.KindCurveShift, Breach: step.breach,
			Summary: "step " + string(rune('0'+i)), Numbers: map[string]any{"step": i, "score": 1.5, "p": math.NaN()}}
		next, tr := alerts.Step(prev, f, 2, now)
		if (tr != nil) != step.wantEvent || next.State != step.wantState {
			t.Fatalf("step %d: Step gave %s, transition %+v; the test expects %s, transition %v", i, next.State, tr, step.wantState, step.wantEvent)
		}
		saveAlert(t, s, next, tr, step.fitID)
		if tr != nil {
			wantEvents = append(wantEvents, tr.To)
		}

		got, ok := alertStates(t, s, "m")[key]
		if !ok {
			t.Fatalf("step %d: no state stored", i)
		}
		if got.State != next.State || !got.Since.Equal(next.Since) || !got.FiringSince.Equal(next.FiringSince) ||
			got.Consecutive != next.Consecutive || got.Summary != next.Summary || got.Key != key {
			t.Errorf("step %d: stored %+v, saved %+v", i, got, next)
		}
		if step.breach && (got.Numbers["step"] != float64(i) || got.Numbers["score"] != 1.5 || got.Numbers["p"] != nil) {
			t.Errorf("step %d: numbers stored as %v (NaN should become null)", i, got.Numbers)
		}
		if n := count(t, conn, `SELECT count(*) FROM alert_events`); n != len(wantEvents) {
			t.Errorf("step %d: %d events logged, want %d", i, n, len(wantEvents))
		}
	}
	if n := count(t, conn, `SELECT count(*) FROM alert_states`); n != 1 {
		t.Errorf("%d state rows for one alert", n)
	}
	if n := count(t, conn, `SELECT count(*) FROM alert_states WHERE updated_at IS NOT NULL AND firing_since = $1`, day(1).Add(time.Hour)); n != 1 {
		t.Errorf("firing_since not kept through resolution")
	}

	events, err := s.AlertEvents(ctxT(t), "m", 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	if len(events) != 3 {
		t.Fatalf("%d events, want 3", len(events))
	}
	// Newest first: resolved (no fit), firing (fit 1), pending (fit 0).
	for i, want := range []struct {
		state   alerts.State
		fitID   int64
		at      time.Time
		summary string
	}{
		{alerts.StateResolved, 0, day(3).Add(time.Hour), "step 3"},
		{alerts.StateFiring, fitIDs[1], day(1).Add(time.Hour), "step 1"},
		{alerts.StatePending, fitIDs[0], day(0).Add(time.Hour), "step 0"},
	} {
		e := events[i]
		if e.State != want.state || e.FitID != want.fitID || !e.At.Equal(want.at) || e.Summary != want.summary || e.Key != key {
			t.Errorf("event %d: %+v, want %+v", i, e, want)
		}
	}
	if events[1].Numbers["score"] != 1.5 {
		t.Errorf("event numbers %v", events[1].Numbers)
	}

	// An event outlives its fit, which it then no longer names.
	if _, err := conn.Exec(ctxT(t), `DELETE FROM fits WHERE id = $1`, fitIDs[1]); err != nil {
		t.Fatal(err)
	}
	events, err = s.AlertEvents(ctxT(t), "m", 0, 0)
	if err != nil || len(events) != 3 || events[1].FitID != 0 {
		t.Errorf("after deleting fit %d: %d events (%v), the firing one names fit %d", fitIDs[1], len(events), err, events[1].FitID)
	}
}

// TestSaveAlertRefusesNonsense: bad statuses are refused with the model
// named, and a status that never opened is not stored.
func TestSaveAlertRefusesNonsense(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	key := alerts.Key{Model: "m", Term: "x", Kind: alerts.KindCurveShift}
	ok := alerts.Status{Key: key, State: alerts.StatePending, Since: t0, Consecutive: 1}
	for _, tc := range []struct {
		name string
		st   alerts.Status
		tr   *alerts.Transition
	}{
		{"unknown state", func() alerts.Status { st := ok; st.State = "exploded"; return st }(), nil},
		{"no since", func() alerts.Status { st := ok; st.Since = time.Time{}; return st }(), nil},
		{"no kind", func() alerts.Status { st := ok; st.Kind = ""; return st }(), nil},
		{"no model", func() alerts.Status { st := ok; st.Model = ""; return st }(), nil},
		{"negative count", func() alerts.Status { st := ok; st.Consecutive = -1; return st }(), nil},
		{"transition elsewhere", ok, &alerts.Transition{To: alerts.StateFiring}},
		{"transition to none", alerts.Status{Key: key}, &alerts.Transition{From: alerts.StatePending}},
	} {
		err := s.InTx(ctxT(t), func(tx pgx.Tx) error { return s.SaveAlertTx(ctxT(t), tx, tc.st, tc.tr, 0) })
		if err == nil || !strings.Contains(err.Error(), `"`+tc.st.Model+`"`) {
			t.Errorf("%s: %v", tc.name, err)
		}
	}
	saveAlert(t, s, alerts.Status{Key: key}, nil, 0)
	if n := count(t, conn, `SELECT count(*) FROM alert_states`) + count(t, conn, `SELECT count(*) FROM alert_events`); n != 0 {
		t.Errorf("%d rows stored", n)
	}
}

// TestAlertStatesSerialiseRefits: while one transaction holds a model's
// alert states, a second one asking for them waits, and then sees what the
// first committed. This holds before the model has any alert (the first
// two refits of a new model) as well as after. Another model's states
// are not held up.
func TestAlertStatesSerialiseRefits(t *testing.T) {
	t.Parallel()
	key := alerts.Key{Model: "m", Term: "", Kind: alerts.KindDegradation}
	for _, existing := range []bool{false, true} {
		name := "no alerts yet"
		if existing {
			name = "alerts stored"
		}
		t.Run(name, func(t *testing.T) {
			t.Parallel()
			s, conn := newStore(t)
			if existing {
				saveAlert(t, s, alerts.Status{Key: key, State: alerts.StatePending, Since: day(0), Consecutive: 1},
					&alerts.Transition{To: alerts.StatePending}, 0)
			}
			held, release := make(chan struct{}), make(chan struct{})
			// Release the first transaction however the test ends, before
			// the store closes.
			releaseFirst := sync.OnceFunc(func() { close(release) })
			t.Cleanup(releaseFirst)
			firstDone := make(chan error, 1)
			go func() {
				firstDone <- s.InTx(ctxT(t), func(tx pgx.Tx) error {
					states, err := s.AlertStatesTx(ctxT(t), tx, "m")
					if err != nil {
						close(held)
						return err
					}
					close(held)
					<-release
					next := states[key]
					next.Key, next.State, next.Since, next.Consecutive = key, alerts.StateFiring, day(1), next.Consecutive+1
					return s.SaveAlertTx(ctxT(t), tx, next, &alerts.Transition{To: alerts.StateFiring}, 0)
				})
			}()
			<-held

			pid := make(chan uint32, 1)
			type result struct {
				states map[alerts.Key]alerts.Status
				err    error
			}
			second := make(chan result, 1)
			secondDone := make(chan struct{})
			go func() {
				defer close(secondDone)
				var r result
				r.err = s.InTx(ctxT(t), func(tx pgx.Tx) error {
					var p uint32
					if err := tx.QueryRow(ctxT(t), `SELECT pg_backend_pid()`).Scan(&p); err != nil {
						close(pid)
						return err
					}
					pid <- p
					var err error
					r.states, err = s.AlertStatesTx(ctxT(t), tx, "m")
					return err
				})
				second <- r
			}()
			p, ok := <-pid
			if !ok {
				r := <-second
				t.Fatal(r.err)
			}
			if !waitForLockWait(t, conn, p, secondDone) {
				r := <-second
				t.Fatalf("the second transaction did not wait: %+v", r)
			}

			// Another model's states are not held up.
			err := s.InTx(ctxT(t), func(tx pgx.Tx) error {
				if _, err := tx.Exec(ctxT(t), `SET LOCAL lock_timeout = '10s'`); err != nil {
					return err
				}
				_, err := s.AlertStatesTx(ctxT(t), tx, "other")
				return err
			})
			if err != nil {
				t.Errorf("another model: %v", err)
			}

			releaseFirst()
			if err := <-firstDone; err != nil {
				t.Fatal(err)
			}
			r := <-second
			if r.err != nil {
				t.Fatal(r.err)
			}
			got := r.states[key]
			want := 1
			if existing {
				want = 2
			}
			if got.State != alerts.StateFiring || got.Consecutive != want || !got.Since.Equal(day(1)) {
				t.Errorf("the second transaction saw %+v, not what the first committed", got)
			}
		})
	}
}

// waitForLockWait returns true once the backend pid waits for a lock, and
// false if done is closed first.
func waitForLockWait(t *testing.T, conn *pgx.Conn, pid uint32, done <-chan struct{}) bool {
	t.Helper()
	tick := time.NewTicker(5 * time.Millisecond)
	defer tick.Stop()
	deadline := time.After(30 * time.Second)
	for {
		var waiting bool
		err := conn.QueryRow(ctxT(t), `SELECT coalesce(wait_event_type = 'Lock', false) FROM pg_stat_activity WHERE pid = $1`, pid).Scan(&waiting)
		if err != nil && !errors.Is(err, pgx.ErrNoRows) {
			t.Fatal(err)
		}
		if waiting {
			return true
		}
		select {
		case <-done:
			return false
		case <-tick.C:
		case <-deadline:
			t.Fatalf("backend %d never waited for a lock", pid)
		}
	}
}

// TestAlertsListing: filters by model and state, firing first then by
// model, term and kind; FiringAlerts lists the firing ones.
func TestAlertsListing(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	put := func(model, term string, kind alerts.Kind, state alerts.State) alerts.Key {
		k := alerts.Key{Model: model, Term: term, Kind: kind}
		st := alerts.Status{Key: k, State: state, Since: day(1), Summary: k.String()}
		if state == alerts.StateFiring {
			st.FiringSince = day(1)
		}
		saveAlert(t, s, st, nil, 0)
		return k
	}
	aRes := put("a", "x", alerts.KindCurveShift, alerts.StateResolved)
	aPend := put("a", "", alerts.KindDegradation, alerts.StatePending)
	bFire := put("b", "z", alerts.KindCoefficientShift, alerts.StateFiring)
	aFire := put("a", "y", alerts.KindCurveShift, alerts.StateFiring)
	bPend := put("b", "", alerts.KindRefitFailing, alerts.StatePending)

	keys := func(sts []alerts.Status) []alerts.Key {
		out := make([]alerts.Key, len(sts))
		for i, st := range sts {
			out[i] = st.Key
		}
		return out
	}
	for _, tc := range []struct {
		name   string
		filter history.AlertFilter
		want   []alerts.Key
	}{
		{"all", history.AlertFilter{}, []alerts.Key{aFire, bFire, aPend, aRes, bPend}},
		{"model a", history.AlertFilter{Model: "a"}, []alerts.Key{aFire, aPend, aRes}},
		{"open", history.AlertFilter{States: []alerts.State{alerts.StatePending, alerts.StateFiring}}, []alerts.Key{aFire, bFire, aPend, bPend}},
		{"b pending", history.AlertFilter{Model: "b", States: []alerts.State{alerts.StatePending}}, []alerts.Key{bPend}},
		{"unknown model", history.AlertFilter{Model: "nobody"}, nil},
	} {
		got, err := s.Alerts(ctxT(t), tc.filter)
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(keys(got), tc.want) {
			t.Errorf("%s: %v, want %v", tc.name, keys(got), tc.want)
		}
	}
	firing, err := s.FiringAlerts(ctxT(t))
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(keys(firing), []alerts.Key{aFire, bFire}) || !firing[0].FiringSince.Equal(day(1)) || firing[0].Summary != aFire.String() {
		t.Errorf("firing: %+v", firing)
	}
}

// TestAlertEventsPages lists each event once, newest first, per model or
// for all.
func TestAlertEventsPages(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	var want []int64
	for i := range 7 {
		model := "m"
		if i%3 == 2 {
			model = "other"
		}
		k := alerts.Key{Model: model, Term: "x", Kind: alerts.KindCurveShift}
		state := []alerts.State{alerts.StatePending, alerts.StateFiring, alerts.StateResolved}[i%3]
		saveAlert(t, s, alerts.Status{Key: k, State: state, Since: day(i)}, &alerts.Transition{To: state}, 0)
	}
	all, err := s.AlertEvents(ctxT(t), "", 100, 0)
	if err != nil || len(all) != 7 {
		t.Fatalf("all events: %d, %v", len(all), err)
	}
	for _, e := range all {
		if e.Model == "m" {
			want = append(want, e.ID)
		}
	}
	for _, limit := range []int{1, 2, 5, 100} {
		var got []int64
		before := int64(0)
		for pages := 0; pages < 10; pages++ {
			page, err := s.AlertEvents(ctxT(t), "m", limit, before)
			if err != nil {
				t.Fatal(err)
			}
			if len(page) == 0 {
				break
			}
			if len(page) > limit {
				t.Fatalf("limit %d: page of %d", limit, len(page))
			}
			for _, e := range page {
				got = append(got, e.ID)
			}
			before = page[len(page)-1].ID
		}
		if !slices.Equal(got, want) {
			t.Errorf("limit %d: %v, want %v", limit, got, want)
		}
	}
	if !slices.IsSortedFunc(all, func(a, b history.AlertEvent) int { return int(b.ID - a.ID) }) {
		t.Errorf("not newest first")
	}
}

// TestSaveAlertRolledBack: states and events saved in a transaction that
// rolls back leave nothing.
func TestSaveAlertRolledBack(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	abandon := errors.New("refit abandoned")
	err := s.InTx(context.Background(), func(tx pgx.Tx) error {
		st := alerts.Status{Key: alerts.Key{Model: "m", Kind: alerts.KindRefitFailing}, State: alerts.StateFiring, Since: t0, FiringSince: t0}
		if err := s.SaveAlertTx(ctxT(t), tx, st, &alerts.Transition{To: alerts.StateFiring, Deliver: true}, 0); err != nil {
			return err
		}
		return abandon
	})
	if !errors.Is(err, abandon) {
		t.Fatal(err)
	}
	if n := count(t, conn, `SELECT count(*) FROM alert_states`) + count(t, conn, `SELECT count(*) FROM alert_events`); n != 0 {
		t.Errorf("%d rows outlived the rollback", n)
	}
}
