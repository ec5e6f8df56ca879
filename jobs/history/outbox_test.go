package history_test

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"sync"
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/jackc/pgx/v5"
)

// testAlert is a firing alert of model m whose change happened at t0 plus
// i seconds and a few nanoseconds (finer than PostgreSQL keeps).
func testAlert(model string, i int) alerts.Alert {
	at := t0.Add(time.Duration(i)*time.Second + 1500*time.Nanosecond)
	st := alerts.Status{Key: alerts.Key{Model: model, Term: "x", Kind: alerts.KindCurveShift},
		State: alerts.StateFiring, Since: at, FiringSince: at, Consecutive: 2, Summary: "curve x shifted",
		Numbers: map[string]any{"score": 1.7, "ratio": math.Inf(1)}}
	return alerts.NewAlert(st, "http://cw.example")
}

func enqueue(t *testing.T, s *history.Store, receivers []string, a alerts.Alert) {
	t.Helper()
	if err := s.InTx(ctxT(t), func(tx pgx.Tx) error { return s.EnqueueTx(ctxT(t), tx, receivers, a) }); err != nil {
		t.Fatal(err)
	}
}

// TestEnqueueIdempotent: one row per receiver; the same change queued
// again (a repeated receiver, a second refit, a resend of the alert
// rebuilt from the stored status) adds nothing; another change does.
func TestEnqueueIdempotent(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	a := testAlert("m", 0)
	receivers := []string{"webhook:http://a", "alertmanager:http://b", "webhook:http://a"}
	enqueue(t, s, receivers, a)
	enqueue(t, s, receivers[:1], a)
	// The alert as rebuilt from the stored status: times in microseconds.
	saveAlert(t, s, alerts.Status{Key: a.Key, State: a.State, Since: a.ChangedAt, FiringSince: a.StartsAt}, nil, 0)
	stored, err := s.Alerts(ctxT(t), history.AlertFilter{Model: "m"})
	if err != nil || len(stored) != 1 {
		t.Fatalf("stored alerts %v, %v", stored, err)
	}
	enqueue(t, s, receivers, alerts.NewAlert(stored[0], "http://cw.example"))
	if n := count(t, conn, `SELECT count(*) FROM alert_deliveries`); n != 2 {
		t.Fatalf("%d deliveries queued, want one per receiver (2)", n)
	}

	resolved := a
	resolved.State, resolved.EndsAt, resolved.ChangedAt = alerts.StateResolved, t0.Add(time.Hour), t0.Add(time.Hour)
	enqueue(t, s, receivers, resolved)
	enqueue(t, s, nil, resolved)
	if n := count(t, conn, `SELECT count(*) FROM alert_deliveries`); n != 4 {
		t.Fatalf("%d deliveries queued, want 4", n)
	}

	rows, err := s.Deliveries(ctxT(t), "m", 0)
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 4 || rows[0].ID < rows[3].ID {
		t.Fatalf("Deliveries: %+v", rows)
	}
	d := rows[3] // the oldest
	if d.Receiver != "webhook:http://a" && d.Receiver != "alertmanager:http://b" {
		t.Errorf("receiver %q", d.Receiver)
	}
	want := a
	want.StartsAt, want.ChangedAt = want.StartsAt.Truncate(time.Microsecond), want.ChangedAt.Truncate(time.Microsecond)
	if d.Key != want.IdempotencyKey() || d.Model != "m" || d.State != history.DeliveryQueued || d.Attempts != 0 ||
		d.LastError != "" || !d.Finished.IsZero() || d.Created.IsZero() || d.Due.IsZero() {
		t.Errorf("delivery row %+v", d)
	}
	if d.Alert.Key != a.Key || d.Alert.State != alerts.StateFiring || d.Alert.Summary != a.Summary || d.Alert.URL != a.URL ||
		!d.Alert.ChangedAt.Equal(want.ChangedAt) || d.Alert.Numbers["score"] != 1.7 || d.Alert.Numbers["ratio"] != nil {
		t.Errorf("stored alert %+v", d.Alert)
	}
	if other, err := s.Deliveries(ctxT(t), "other", 0); err != nil || len(other) != 0 {
		t.Errorf("another model's deliveries: %v, %v", other, err)
	}
	if all, err := s.Deliveries(ctxT(t), "", 2); err != nil || len(all) != 2 {
		t.Errorf("every model's, limit 2: %d, %v", len(all), err)
	}
}

// TestEnqueueRolledBack: a refit that rolls back queues nothing.
func TestEnqueueRolledBack(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	abandon := errors.New("refit abandoned")
	err := s.InTx(ctxT(t), func(tx pgx.Tx) error {
		if err := s.EnqueueTx(ctxT(t), tx, []string{"webhook:http://a"}, testAlert("m", 0)); err != nil {
			return err
		}
		return abandon
	})
	if !errors.Is(err, abandon) {
		t.Fatal(err)
	}
	if n := count(t, conn, `SELECT count(*) FROM alert_deliveries`); n != 0 {
		t.Errorf("%d deliveries outlived the rollback", n)
	}
	got, err := s.Outbox().Claim(ctxT(t), 10, time.Minute)
	if err != nil || len(got) != 0 {
		t.Errorf("claimed %v, %v", got, err)
	}
}

// TestClaimConcurrently: claimers racing over one outbox take every due
// delivery exactly once between them.
func TestClaimConcurrently(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	const alertsQueued, claimers = 30, 4
	receivers := []string{"webhook:http://a", "webhook:http://b"}
	for i := range alertsQueued {
		enqueue(t, s, receivers, testAlert(fmt.Sprintf("m%d", i), i)) // 30 alerts: none waits for another
	}
	out := s.Outbox()
	claimed := make([][]int64, claimers)
	errs := make([]error, claimers)
	start := make(chan struct{})
	var wg sync.WaitGroup
	for c := range claimers {
		wg.Go(func() {
			<-start
			for {
				ds, err := out.Claim(ctxT(t), 3, time.Hour)
				if err != nil {
					errs[c] = err
					return
				}
				if len(ds) == 0 {
					return
				}
				for _, d := range ds {
					claimed[c] = append(claimed[c], d.ID)
				}
			}
		})
	}
	close(start)
	wg.Wait()
	seen := map[int64]int{}
	for c := range claimers {
		if errs[c] != nil {
			t.Fatalf("claimer %d: %v", c, errs[c])
		}
		for _, id := range claimed[c] {
			seen[id]++
			if seen[id] > 1 {
				t.Errorf("delivery %d claimed twice", id)
			}
		}
	}
	if len(seen) != alertsQueued*len(receivers) {
		t.Errorf("%d deliveries claimed, want %d", len(seen), alertsQueued*len(receivers))
	}
	// Every one is leased: nothing is due now.
	if ds, err := out.Claim(ctxT(t), 100, time.Hour); err != nil || len(ds) != 0 {
		t.Errorf("claimed %d leased deliveries (%v)", len(ds), err)
	}
}

// TestClaimLeaseAndRetry: a claim hides a delivery for its lease, and
// gives it back, attempts unchanged, when the lease runs out; a retry
// counts the attempt and moves due_at; deliveries come in due order.
func TestClaimLeaseAndRetry(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	out := s.Outbox()
	if _, err := out.Claim(ctxT(t), 1, 0); err == nil {
		t.Errorf("a claim with no lease was accepted")
	}
	if ds, err := out.Claim(ctxT(t), 0, time.Minute); err != nil || ds != nil {
		t.Errorf("a claim of none: %v, %v", ds, err)
	}
	// Two alerts (two changes of one alert would be claimed in turn: see
	// TestClaimKeepsChangesInOrder).
	enqueue(t, s, []string{"webhook:http://a"}, testAlert("m", 0))
	enqueue(t, s, []string{"webhook:http://a"}, testAlert("n", 1))
	ds, err := out.Claim(ctxT(t), 1, time.Hour)
	if err != nil || len(ds) != 1 {
		t.Fatalf("claim: %v, %v", ds, err)
	}
	first := ds[0]
	if first.Attempts != 0 || first.Receiver != "webhook:http://a" || first.Alert.Model != "m" || first.Created.IsZero() {
		t.Errorf("claimed %+v", first)
	}
	ds, err = out.Claim(ctxT(t), 10, time.Hour)
	if err != nil || len(ds) != 1 || ds[0].ID == first.ID {
		t.Fatalf("second claim: %+v, %v; want the other delivery only", ds, err)
	}
	second := ds[0]

	// The first attempt fails: due again in an hour.
	next := time.Now().Add(time.Hour).Truncate(time.Microsecond)
	if err := out.Retry(ctxT(t), first.ID, next, "503 Service Unavailable"); err != nil {
		t.Fatal(err)
	}
	rows, err := s.Deliveries(ctxT(t), "m", 0)
	if err != nil {
		t.Fatal(err)
	}
	byID := map[int64]history.DeliveryRow{}
	for _, r := range rows {
		byID[r.ID] = r
	}
	if r := byID[first.ID]; !r.Due.Equal(next) || r.Attempts != 1 || r.LastError != "503 Service Unavailable" || r.State != history.DeliveryQueued {
		t.Errorf("after a retry: %+v", r)
	}
	if ds, err := out.Claim(ctxT(t), 10, time.Hour); err != nil || len(ds) != 0 {
		t.Errorf("claimed %v (%v) before anything was due", ds, err)
	}

	// Both fall due, the second's lease (it was never reported) earlier
	// than the first's retry: they come back in that order.
	if _, err := conn.Exec(ctxT(t), `UPDATE alert_deliveries SET due_at = now() - interval '1 minute' WHERE id = $1`, second.ID); err != nil {
		t.Fatal(err)
	}
	if err := out.Retry(ctxT(t), first.ID, time.Now().Add(-time.Second), "timeout"); err != nil {
		t.Fatal(err)
	}
	ds, err = out.Claim(ctxT(t), 10, time.Hour)
	if err != nil || len(ds) != 2 || ds[0].ID != second.ID || ds[1].ID != first.ID {
		t.Fatalf("claim after both fell due: %+v, %v", ds, err)
	}
	if ds[0].Attempts != 0 || ds[1].Attempts != 2 {
		t.Errorf("attempts %d and %d, want 0 (a lapsed lease is no attempt) and 2", ds[0].Attempts, ds[1].Attempts)
	}
}

// TestDeliveredAndAbandoned finish deliveries for good; a finished
// delivery ignores later reports, and an unknown one is ErrNoDelivery.
func TestDeliveredAndAbandoned(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	out := s.Outbox()
	enqueue(t, s, []string{"webhook:http://a", "webhook:http://b"}, testAlert("m", 0))
	ds, err := out.Claim(ctxT(t), 10, time.Minute)
	if err != nil || len(ds) != 2 {
		t.Fatalf("claim: %v, %v", ds, err)
	}
	good, bad := ds[0].ID, ds[1].ID
	if err := out.Delivered(ctxT(t), good); err != nil {
		t.Fatal(err)
	}
	if err := out.Abandon(ctxT(t), bad, "400 Bad Request"); err != nil {
		t.Fatal(err)
	}
	// Late reports from a claimer whose lease ran out change nothing.
	if err := out.Retry(ctxT(t), good, time.Now(), "late"); err != nil {
		t.Errorf("retry of a delivered delivery: %v", err)
	}
	if err := out.Delivered(ctxT(t), bad); err != nil {
		t.Errorf("delivered after abandoned: %v", err)
	}
	for _, report := range []func(id int64) error{
		func(id int64) error { return out.Delivered(ctxT(t), id) },
		func(id int64) error { return out.Retry(ctxT(t), id, time.Now(), "x") },
		func(id int64) error { return out.Abandon(ctxT(t), id, "x") },
	} {
		if err := report(bad + 1000); !errors.Is(err, history.ErrNoDelivery) {
			t.Errorf("report on a missing delivery: %v", err)
		}
	}
	rows, err := s.Deliveries(ctxT(t), "m", 0)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range rows {
		switch r.ID {
		case good:
			if r.State != history.DeliveryDelivered || r.Attempts != 1 || r.Finished.IsZero() || r.LastError != "" {
				t.Errorf("delivered: %+v", r)
			}
		case bad:
			if r.State != history.DeliveryAbandoned || r.Attempts != 1 || r.Finished.IsZero() || r.LastError != "400 Bad Request" {
				t.Errorf("abandoned: %+v", r)
			}
		}
	}
	if ds, err := out.Claim(ctxT(t), 10, time.Minute); err != nil || len(ds) != 0 {
		t.Errorf("claimed finished deliveries: %v, %v", ds, err)
	}
}

// TestPruneDeliveries removes finished rows older than the age given and
// never a queued one.
func TestPruneDeliveries(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	out := s.Outbox()
	for i := range 4 {
		enqueue(t, s, []string{"webhook:http://a"}, testAlert(fmt.Sprintf("m%d", i), i))
	}
	ds, err := out.Claim(ctxT(t), 3, time.Minute)
	if err != nil || len(ds) != 3 {
		t.Fatalf("claim: %v, %v", ds, err)
	}
	oldDelivered, oldAbandoned, recent := ds[0].ID, ds[1].ID, ds[2].ID
	for _, id := range []int64{oldDelivered, recent} {
		if err := out.Delivered(ctxT(t), id); err != nil {
			t.Fatal(err)
		}
	}
	if err := out.Abandon(ctxT(t), oldAbandoned, "gone"); err != nil {
		t.Fatal(err)
	}
	if _, err := conn.Exec(ctxT(t), `
		UPDATE alert_deliveries SET finished_at = now() - interval '8 days', created_at = now() - interval '9 days' WHERE id = ANY($1);
		`, []int64{oldDelivered, oldAbandoned}); err != nil {
		t.Fatal(err)
	}
	if _, err := conn.Exec(ctxT(t), `UPDATE alert_deliveries SET created_at = now() - interval '30 days' WHERE state = 'queued'`); err != nil {
		t.Fatal(err)
	}
	if _, err := s.PruneDeliveries(ctxT(t), -time.Hour); err == nil {
		t.Errorf("a negative age was accepted")
	}
	n, err := s.PruneDeliveries(ctxT(t), 7*24*time.Hour)
	if err != nil || n != 2 {
		t.Fatalf("pruned %d (%v), want 2", n, err)
	}
	rows, err := s.Deliveries(ctxT(t), "", 0)
	if err != nil {
		t.Fatal(err)
	}
	var left []int64
	for _, r := range rows {
		left = append(left, r.ID)
	}
	if len(left) != 2 || !slices.Contains(left, recent) || slices.Contains(left, oldDelivered) || slices.Contains(left, oldAbandoned) {
		t.Errorf("left %v", left)
	}
}

// TestClaimKeepsChangesInOrder: a resolution queued behind its firing for
// the same receiver is not claimed while the firing waits for a retry;
// another receiver's and another alert's deliveries are not held up.
func TestClaimKeepsChangesInOrder(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	firing := testAlert("m", 0)
	resolved := firing
	resolved.State, resolved.EndsAt, resolved.ChangedAt = alerts.StateResolved, t0.Add(time.Hour), t0.Add(time.Hour)
	other := testAlert("n", 1)
	enqueue(t, s, []string{"webhook:http://a"}, firing)
	enqueue(t, s, []string{"webhook:http://a", "webhook:http://b"}, resolved)
	enqueue(t, s, []string{"webhook:http://a"}, other)
	ob := s.Outbox()
	got, err := ob.Claim(ctxT(t), 10, time.Minute)
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, d := range got {
		names = append(names, d.Alert.Model+"/"+string(d.Alert.State)+"@"+d.Receiver)
	}
	slices.Sort(names)
	want := []string{"m/firing@webhook:http://a", "m/resolved@webhook:http://b", "n/firing@webhook:http://a"}
	if !slices.Equal(names, want) {
		t.Fatalf("claimed %v, want %v", names, want)
	}
	// The firing fails and waits; its resolution still may not pass it.
	for _, d := range got {
		if d.Alert.Model == "m" && d.Receiver == "webhook:http://a" {
			if err := ob.Retry(ctxT(t), d.ID, time.Now().Add(-time.Second), "503"); err != nil {
				t.Fatal(err)
			}
		}
	}
	got, err = ob.Claim(ctxT(t), 10, time.Minute)
	if err != nil || len(got) != 1 || got[0].Alert.State != alerts.StateFiring {
		t.Fatalf("after the retry: claimed %+v (%v), want only the firing", got, err)
	}
}
