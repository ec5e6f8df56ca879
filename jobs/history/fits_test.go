package history_test

import (
	"encoding/json"
	"errors"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/jackc/pgx/v5"
)

// TestRecordFitRoundTrip stores a fit and reads back the same document,
// the summary columns and one grid row per curve point (by-level curves by
// their term names, surfaces left out).
func TestRecordFitRoundTrip(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	doc, _ := testDocs(t)
	rec := record("river", day(1), doc)
	rec.Window = &history.Window{First: day(-30), Last: day(0)}
	id, err := s.RecordFit(ctxT(t), rec)
	if err != nil {
		t.Fatal(err)
	}

	got, err := s.Fit(ctxT(t), id)
	if err != nil {
		t.Fatal(err)
	}
	want, _ := json.Marshal(doc)
	back, _ := json.Marshal(got.Document)
	if string(want) != string(back) {
		t.Errorf("document changed on the way through JSONB")
	}
	if got.Status != history.StatusSucceeded || !got.Converged || got.Model != "river" {
		t.Errorf("status %s, converged %v, model %q", got.Status, got.Converged, got.Model)
	}
	if !got.Slot.Equal(day(1)) || !got.Started.Equal(t0) || got.Duration != 1500*time.Millisecond {
		t.Errorf("slot %v, started %v, duration %v", got.Slot, got.Started, got.Duration)
	}
	if got.Window == nil || !got.Window.First.Equal(day(-30)) || !got.Window.Last.Equal(day(0)) {
		t.Errorf("window %+v", got.Window)
	}
	if got.RowsRead != int64(doc.Data.RowsRead) || got.RowsUsed != int64(doc.Data.RowsUsed) ||
		got.Deviance != doc.Deviance || got.DevianceExplained != doc.DevianceExplained ||
		got.EDFTotal != doc.EDFTotal || got.Scale != doc.Scale {
		t.Errorf("summary %+v does not match the document", got)
	}

	// One row per grid point of each curve, in grid order.
	curves := map[string]*fit.CurveGrid{}
	surfaces := 0
	for _, term := range doc.Terms {
		switch term.Kind {
		case fit.Curve:
			curves[term.Name] = term.Grid
		case fit.Surface:
			surfaces++
		}
	}
	if _, ok := curves["w[site=B]"]; !ok || len(curves) != 3 || surfaces != 1 {
		t.Fatalf("test model: curves %v, %d surfaces; want x, w[site=A], w[site=B] and a surface", curves, surfaces)
	}
	for name, g := range curves {
		rows, err := conn.Query(ctxT(t), `SELECT x, fit, se FROM fit_curve_points WHERE fit_id = $1 AND term = $2 ORDER BY point`, id, name)
		if err != nil {
			t.Fatal(err)
		}
		pts, err := pgx.CollectRows(rows, pgx.RowToStructByPos[struct{ X, Fit, SE float64 }])
		if err != nil {
			t.Fatal(err)
		}
		if len(pts) != len(g.X) {
			t.Fatalf("term %s: %d points stored, grid has %d", name, len(pts), len(g.X))
		}
		for i, p := range pts {
			if p.X != g.X[i] || p.Fit != g.Fit[i] || p.SE != g.SE[i] {
				t.Fatalf("term %s point %d: stored %+v, grid (%g, %g, %g)", name, i, p, g.X[i], g.Fit[i], g.SE[i])
			}
		}
	}
	if n := count(t, conn, `SELECT count(DISTINCT term) FROM fit_curve_points WHERE fit_id = $1`, id); n != len(curves) {
		t.Errorf("points stored for %d terms, want %d curves", n, len(curves))
	}

	// Deleting a fit takes its points with it.
	if _, err := conn.Exec(ctxT(t), `DELETE FROM fits WHERE id = $1`, id); err != nil {
		t.Fatal(err)
	}
	if n := count(t, conn, `SELECT count(*) FROM fit_curve_points WHERE fit_id = $1`, id); n != 0 {
		t.Errorf("%d points outlived their fit", n)
	}
}

// TestSlotHoldsOneSuccess: a scheduled slot takes at most one succeeded
// fit; the refused fit leaves no row, no point and no watermark behind.
func TestSlotHoldsOneSuccess(t *testing.T) {
	t.Parallel()
	doc, _ := testDocs(t)
	type step struct {
		slot     time.Time
		doc      *fit.Document // nil: a failure
		slotDone bool
	}
	for _, tc := range []struct {
		name  string
		steps []step
	}{
		{"second success refused", []step{{day(1), doc, false}, {day(1), doc, true}}},
		{"unconverged after success refused", []step{{day(1), doc, false}, {day(1), unconverged(doc), true}}},
		{"success after unconverged", []step{{day(1), unconverged(doc), false}, {day(1), doc, false}}},
		{"success after failure", []step{{day(1), nil, false}, {day(1), doc, false}}},
		{"failure after success recorded", []step{{day(1), doc, false}, {day(1), nil, false}}},
		{"manual runs repeat", []step{{time.Time{}, doc, false}, {time.Time{}, doc, false}}},
		{"next slot", []step{{day(1), doc, false}, {day(2), doc, false}}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			t.Parallel()
			s, conn := newStore(t)
			var firstSuccess int64
			for i, st := range tc.steps {
				if st.doc == nil {
					if _, err := s.RecordFailure(ctxT(t), "m", st.slot, "source table missing", t0, t0.Add(time.Second)); err != nil {
						t.Fatal(err)
					}
					continue
				}
				fits := count(t, conn, `SELECT count(*) FROM fits`)
				points := count(t, conn, `SELECT count(*) FROM fit_curve_points`)
				rec := record("m", st.slot, st.doc)
				rec.Watermark = day(10 + i)
				id, err := s.RecordFit(ctxT(t), rec)
				if !st.slotDone {
					if err != nil {
						t.Fatalf("step %d: %v", i, err)
					}
					if firstSuccess == 0 && st.doc.Convergence.Converged {
						firstSuccess = id
					}
					continue
				}
				var done *history.SlotDoneError
				if !errors.Is(err, history.ErrSlotDone) || !errors.As(err, &done) {
					t.Fatalf("step %d: got id %d, %v; want ErrSlotDone", i, id, err)
				}
				if done.FitID != firstSuccess || done.Model != "m" || !done.Slot.Equal(st.slot) {
					t.Errorf("step %d: %+v, want fit %d", i, done, firstSuccess)
				}
				if f, p := count(t, conn, `SELECT count(*) FROM fits`), count(t, conn, `SELECT count(*) FROM fit_curve_points`); f != fits || p != points {
					t.Errorf("step %d: refused fit left rows: fits %d→%d, points %d→%d", i, fits, f, points, p)
				}
				if wm, _, _ := s.Watermark(ctxT(t), "m"); !wm.Equal(day(10 + i - 1)) {
					t.Errorf("step %d: refused fit moved the watermark to %v", i, wm)
				}
			}
		})
	}
}

// TestConcurrentSlot: replicas recording the same slot at once; exactly one
// fit is stored, the others get ErrSlotDone naming it.
func TestConcurrentSlot(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	doc, _ := testDocs(t)
	const replicas = 6
	ids := make([]int64, replicas)
	errs := make([]error, replicas)
	start := make(chan struct{})
	var wg sync.WaitGroup
	for i := range replicas {
		wg.Go(func() {
			<-start
			ids[i], errs[i] = s.RecordFit(ctxT(t), record("m", day(3), doc))
		})
	}
	close(start)
	wg.Wait()
	var winner int64
	for i, err := range errs {
		switch {
		case err == nil:
			if winner != 0 {
				t.Errorf("two fits stored for one slot: %d and %d", winner, ids[i])
			}
			winner = ids[i]
		case !errors.Is(err, history.ErrSlotDone):
			t.Errorf("replica %d: %v", i, err)
		}
	}
	for i, err := range errs {
		var done *history.SlotDoneError
		if errors.As(err, &done) && done.FitID != winner {
			t.Errorf("replica %d told fit %d holds the slot; fit %d does", i, done.FitID, winner)
		}
	}
	if n := count(t, conn, `SELECT count(*) FROM fits`); n != 1 || winner == 0 {
		t.Errorf("%d fits stored (winner %d), want 1", n, winner)
	}
}

// TestRecordFitTxKeepsTxUsable: inside a caller's transaction a refused
// slot leaves the transaction usable, and nothing commits when the caller
// rolls back.
func TestRecordFitTxKeepsTxUsable(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	doc, _ := testDocs(t)
	if _, err := s.RecordFit(ctxT(t), record("m", day(1), doc)); err != nil {
		t.Fatal(err)
	}
	err := s.InTx(ctxT(t), func(tx pgx.Tx) error {
		if _, err := s.RecordFitTx(ctxT(t), tx, record("m", day(1), doc)); !errors.Is(err, history.ErrSlotDone) {
			t.Fatalf("RecordFitTx on a done slot: %v", err)
		}
		if _, err := s.RecordFitTx(ctxT(t), tx, record("m", day(2), doc)); err != nil {
			return err
		}
		return s.AdvanceWatermark(ctxT(t), tx, "m", day(2))
	})
	if err != nil {
		t.Fatal(err)
	}
	if n := count(t, conn, `SELECT count(*) FROM fits`); n != 2 {
		t.Errorf("%d fits, want 2", n)
	}

	rollback := errors.New("refit abandoned")
	err = s.InTx(ctxT(t), func(tx pgx.Tx) error {
		if _, err := s.RecordFitTx(ctxT(t), tx, record("m", day(3), doc)); err != nil {
			return err
		}
		if err := s.AdvanceWatermark(ctxT(t), tx, "m", day(3)); err != nil {
			return err
		}
		return rollback
	})
	if !errors.Is(err, rollback) {
		t.Fatalf("InTx: %v", err)
	}
	if n := count(t, conn, `SELECT count(*) FROM fits`); n != 2 {
		t.Errorf("rolled-back fit stored: %d fits", n)
	}
	if wm, _, _ := s.Watermark(ctxT(t), "m"); !wm.Equal(day(2)) {
		t.Errorf("rolled-back refit moved the watermark to %v", wm)
	}
}

// TestRecordFailure keeps the reason and no document, and refuses nothing.
func TestRecordFailure(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	id, err := s.RecordFailure(ctxT(t), "broken", day(1), `column "flow" does not exist`, t0, t0.Add(2*time.Second))
	if err != nil {
		t.Fatal(err)
	}
	f, err := s.Fit(ctxT(t), id)
	if err != nil {
		t.Fatal(err)
	}
	if f.Status != history.StatusFailed || f.Reason != `column "flow" does not exist` || f.Document != nil || f.Window != nil || f.Duration != 2*time.Second {
		t.Errorf("failure stored as %+v", f)
	}
	if _, err := s.LatestFit(ctxT(t), "broken"); !errors.Is(err, history.ErrNoFit) || !strings.Contains(err.Error(), `"broken"`) {
		t.Errorf("LatestFit of a model with only failures: %v", err)
	}
}

// TestFitsPages lists every fit once, newest first, in pages.
func TestFitsPages(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	doc, _ := testDocs(t)
	var want []int64
	for i := range 7 {
		var id int64
		var err error
		if i%3 == 2 {
			id, err = s.RecordFailure(ctxT(t), "m", day(i), "timeout", t0, t0)
		} else {
			id, err = s.RecordFit(ctxT(t), record("m", day(i), doc))
		}
		if err != nil {
			t.Fatal(err)
		}
		want = append([]int64{id}, want...)
	}
	if _, err := s.RecordFit(ctxT(t), record("other", day(0), doc)); err != nil {
		t.Fatal(err)
	}
	for _, limit := range []int{1, 2, 3, 7, 100} {
		var got []int64
		before := int64(0)
		for pages := 0; ; pages++ {
			page, err := s.Fits(ctxT(t), "m", limit, before)
			if err != nil {
				t.Fatal(err)
			}
			if len(page) == 0 || pages > 10 {
				break
			}
			if len(page) > limit {
				t.Fatalf("limit %d: page of %d", limit, len(page))
			}
			for _, f := range page {
				if f.Document != nil || f.Model != "m" {
					t.Fatalf("summary carries a document or another model: %+v", f)
				}
				got = append(got, f.ID)
			}
			before = page[len(page)-1].ID
		}
		if len(got) != len(want) {
			t.Fatalf("limit %d: listed %v, want %v", limit, got, want)
		}
		for i := range got {
			if got[i] != want[i] {
				t.Fatalf("limit %d: listed %v, want %v", limit, got, want)
			}
		}
	}
}

// TestLatestFit skips failed and unconverged fits.
func TestLatestFit(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	doc, _ := testDocs(t)
	if _, err := s.LatestFit(ctxT(t), "m"); !errors.Is(err, history.ErrNoFit) {
		t.Fatalf("LatestFit with no fits: %v", err)
	}
	good, err := s.RecordFit(ctxT(t), record("m", day(1), doc))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := s.RecordFit(ctxT(t), record("m", day(2), unconverged(doc))); err != nil {
		t.Fatal(err)
	}
	if _, err := s.RecordFailure(ctxT(t), "m", day(3), "boom", t0, t0); err != nil {
		t.Fatal(err)
	}
	f, err := s.LatestFit(ctxT(t), "m")
	if err != nil || f.ID != good || f.Document == nil {
		t.Fatalf("LatestFit = %+v, %v; want fit %d with its document", f, err, good)
	}
}

// TestPreviousDisjoint picks the latest earlier succeeded fit whose window
// does not overlap (closed intervals: sharing an end instant overlaps).
func TestPreviousDisjoint(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	doc, _ := testDocs(t)
	add := func(first, last int, d *fit.Document) int64 {
		rec := record("m", day(100+first), d)
		if first >= 0 {
			rec.Window = &history.Window{First: day(first), Last: day(last)}
		}
		id, err := s.RecordFit(ctxT(t), rec)
		if err != nil {
			t.Fatal(err)
		}
		return id
	}
	a := add(0, 9, doc)
	b := add(10, 19, doc)
	add(20, 29, unconverged(doc))
	add(-1, -1, doc) // no window
	c := add(15, 24, doc)
	latest := add(25, 34, doc)
	for _, tc := range []struct {
		name        string
		before      int64
		first, last int
		want        int64 // 0: ErrNoFit
	}{
		{"latest disjoint", latest, 25, 34, c},
		{"touching end overlaps", latest, 24, 34, b},
		{"skips unconverged and windowless", c, 30, 40, b},
		{"spanning all", latest, 0, 40, 0},
		{"before a", latest + 1, -20, -10, latest},
		{"only earlier ids", b, 10, 19, a},
		{"nothing earlier", a, 20, 30, 0},
	} {
		t.Run(tc.name, func(t *testing.T) {
			f, err := s.PreviousDisjoint(ctxT(t), "m", tc.before, history.Window{First: day(tc.first), Last: day(tc.last)})
			if tc.want == 0 {
				if !errors.Is(err, history.ErrNoFit) {
					t.Fatalf("got %+v, %v; want ErrNoFit", f, err)
				}
				return
			}
			if err != nil || f.ID != tc.want || f.Document == nil {
				t.Fatalf("got %+v, %v; want fit %d", f, err, tc.want)
			}
		})
	}
}

// TestWatermarkNeverMovesBack advances a watermark through a sequence of
// times, some older than the mark.
func TestWatermarkNeverMovesBack(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	if _, ok, err := s.Watermark(ctxT(t), "m"); ok || err != nil {
		t.Fatalf("watermark before any refit: ok %v, %v", ok, err)
	}
	sub := 1500 * time.Nanosecond // PostgreSQL keeps microseconds
	for i, tc := range []struct{ advance, want time.Time }{
		{day(5), day(5)},
		{day(3), day(5)},
		{day(5).Add(time.Microsecond), day(5).Add(time.Microsecond)},
		{day(9).Add(sub), day(9).Add(sub).Truncate(time.Microsecond)},
		{day(-100), day(9).Add(sub).Truncate(time.Microsecond)},
	} {
		err := s.InTx(ctxT(t), func(tx pgx.Tx) error { return s.AdvanceWatermark(ctxT(t), tx, "m", tc.advance) })
		if err != nil {
			t.Fatal(err)
		}
		got, ok, err := s.Watermark(ctxT(t), "m")
		if err != nil || !ok || !got.Equal(tc.want) {
			t.Errorf("step %d: advance to %v: watermark %v (%v, %v), want %v", i, tc.advance, got, ok, err, tc.want)
		}
	}
}

// TestRecordFailureTx records a failure inside the caller's transaction:
// nothing stays when it rolls back; odd details never refuse a failure.
func TestRecordFailureTx(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	abandon := errors.New("refit abandoned")
	err := s.InTx(ctxT(t), func(tx pgx.Tx) error {
		if _, err := s.RecordFailureTx(ctxT(t), tx, "m", day(1), "boom", t0, t0); err != nil {
			return err
		}
		return abandon
	})
	if !errors.Is(err, abandon) {
		t.Fatal(err)
	}
	if n := count(t, conn, `SELECT count(*) FROM fits`); n != 0 {
		t.Fatalf("a rolled-back failure left %d fits", n)
	}

	var id int64
	err = s.InTx(ctxT(t), func(tx pgx.Tx) error {
		var err error
		// No reason, no start, a finish only: recorded all the same.
		id, err = s.RecordFailureTx(ctxT(t), tx, "m", time.Time{}, "", time.Time{}, t0)
		return err
	})
	if err != nil {
		t.Fatal(err)
	}
	f, err := s.Fit(ctxT(t), id)
	if err != nil {
		t.Fatal(err)
	}
	if f.Status != history.StatusFailed || f.Reason != "unknown" || !f.Slot.IsZero() || !f.Started.Equal(t0) || f.Duration != 0 {
		t.Errorf("stored %+v", f)
	}
	err = s.InTx(ctxT(t), func(tx pgx.Tx) error {
		_, err := s.RecordFailureTx(ctxT(t), tx, "", day(1), "boom", t0, t0)
		return err
	})
	if err == nil || !strings.Contains(err.Error(), `model ""`) {
		t.Errorf("a failure of no model: %v", err)
	}
}
