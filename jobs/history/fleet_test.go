package history_test

import (
	"math"
	"slices"
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs/history"
)

func fleetNames(ms []history.ModelStatus) []string {
	out := make([]string, len(ms))
	for i, m := range ms {
		out[i] = m.Name
	}
	return out
}

// TestFleet builds a small fleet — a model with no history, one whose
// only refit failed, and one with two fits, a comparison, a baseline and
// open alerts — and reads it back.
func TestFleet(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	refDoc, candDoc := testDocs(t)

	// "failing": one failed refit.
	failID, err := s.RecordFailure(ctxT(t), "failing", day(1), "source table missing", t0, t0.Add(time.Second))
	if err != nil {
		t.Fatal(err)
	}
	// "river": reference, candidate, comparison, baseline, then a failure.
	ref, err := s.RecordFit(ctxT(t), record("river", day(1), refDoc))
	if err != nil {
		t.Fatal(err)
	}
	cand, err := s.RecordFit(ctxT(t), record("river", day(2), candDoc))
	if err != nil {
		t.Fatal(err)
	}
	if err := s.PinBaseline(ctxT(t), "river", ref, history.PinnedAuto); err != nil {
		t.Fatal(err)
	}
	rep, err := fit.Compare(refDoc, candDoc, fit.DefaultTolerance())
	if err != nil {
		t.Fatal(err)
	}
	cmpID, err := s.RecordComparison(ctxT(t), "river", ref, cand, rep)
	if err != nil {
		t.Fatal(err)
	}
	lateFail, err := s.RecordFailure(ctxT(t), "river", day(3), "timeout", t0, t0)
	if err != nil {
		t.Fatal(err)
	}
	for _, a := range []struct {
		term  string
		kind  alerts.Kind
		state alerts.State
	}{
		{"x", alerts.KindCurveShift, alerts.StateFiring},
		{"z", alerts.KindCoefficientShift, alerts.StateFiring},
		{"", alerts.KindDegradation, alerts.StatePending},
		{"w[site=A]", alerts.KindCurveShift, alerts.StateResolved},
	} {
		saveAlert(t, s, alerts.Status{Key: alerts.Key{Model: "river", Term: a.term, Kind: a.kind}, State: a.state, Since: day(2)}, nil, 0)
	}
	saveAlert(t, s, alerts.Status{Key: alerts.Key{Model: "failing", Kind: alerts.KindRefitFailing}, State: alerts.StatePending, Since: day(1)}, nil, 0)

	fleet, err := s.Fleet(ctxT(t), []string{"river", "ghost", "failing"})
	if err != nil {
		t.Fatal(err)
	}
	if got := fleetNames(fleet); !slices.Equal(got, []string{"river", "ghost", "failing"}) {
		t.Fatalf("names %v, want the order given", got)
	}
	river, ghost, failing := fleet[0], fleet[1], fleet[2]

	t.Run("no history", func(t *testing.T) {
		if ghost.LastFit != nil || ghost.LastSuccess != nil || ghost.Comparison != nil || ghost.BaselineID != 0 || ghost.Firing != 0 || ghost.Pending != 0 {
			t.Errorf("%+v", ghost)
		}
	})
	t.Run("a failure only", func(t *testing.T) {
		lf := failing.LastFit
		if lf == nil || lf.ID != failID || lf.Status != history.StatusFailed || lf.Reason != "source table missing" ||
			!lf.Finished.Equal(t0.Add(time.Second)) || lf.RowsUsed != 0 {
			t.Errorf("last fit %+v", lf)
		}
		if failing.LastSuccess != nil || failing.Comparison != nil || failing.BaselineID != 0 {
			t.Errorf("%+v", failing)
		}
		if failing.Firing != 0 || failing.Pending != 1 {
			t.Errorf("firing %d, pending %d; want 0 and 1", failing.Firing, failing.Pending)
		}
	})
	t.Run("fits and a comparison", func(t *testing.T) {
		if lf := river.LastFit; lf == nil || lf.ID != lateFail || lf.Status != history.StatusFailed || lf.Reason != "timeout" {
			t.Errorf("last fit %+v", lf)
		}
		ls := river.LastSuccess
		if ls == nil || ls.ID != cand || ls.Status != history.StatusSucceeded || ls.RowsUsed != int64(candDoc.Data.RowsUsed) ||
			ls.DevianceExplained != candDoc.DevianceExplained || !ls.Finished.Equal(t0.Add(1500*time.Millisecond)) {
			t.Errorf("last success %+v", ls)
		}
		if river.BaselineID != ref {
			t.Errorf("baseline %d, want %d", river.BaselineID, ref)
		}
		if river.Firing != 2 || river.Pending != 1 {
			t.Errorf("firing %d, pending %d; want 2 and 1", river.Firing, river.Pending)
		}
		c := river.Comparison
		if c == nil || c.ID != cmpID || c.ReferenceID != ref || c.CandidateID != cand || c.Breach != rep.Breach || c.Created.IsZero() {
			t.Fatalf("comparison %+v", c)
		}
		if rep.Degradation == nil {
			if !math.IsNaN(c.DegradationRatio) {
				t.Errorf("degradation ratio %g with none computed", c.DegradationRatio)
			}
		} else if c.DegradationRatio != rep.Degradation.Ratio {
			t.Errorf("degradation ratio %g, report %g", c.DegradationRatio, rep.Degradation.Ratio)
		}
		// The model's p-value is the smallest adjusted p-value of its
		// tested terms and level.
		wantP := math.Inf(1)
		for _, term := range rep.Terms {
			if term.Verdict != fit.VerdictNotCompared {
				wantP = math.Min(wantP, term.PAdjusted)
			}
		}
		if rep.Level.Verdict != fit.VerdictNotCompared && rep.Level.Verdict != "" {
			wantP = math.Min(wantP, rep.Level.PAdjusted)
		}
		if math.IsInf(wantP, 1) || c.PValue != wantP {
			t.Errorf("p-value %g, want %g", c.PValue, wantP)
		}
		terms, err := s.ComparisonTerms(ctxT(t), cmpID)
		if err != nil {
			t.Fatal(err)
		}
		if len(terms) == 0 || !slices.Equal(c.Terms, terms) {
			t.Errorf("terms %+v, want %+v", c.Terms, terms)
		}
		worst := 0.0
		for _, term := range terms {
			worst = max(worst, term.Score)
		}
		if c.WorstScore() != worst {
			t.Errorf("worst score %g, want %g", c.WorstScore(), worst)
		}
	})
	t.Run("every model, by name", func(t *testing.T) {
		all, err := s.Fleet(ctxT(t), nil)
		if err != nil {
			t.Fatal(err)
		}
		if got := fleetNames(all); !slices.Equal(got, []string{"failing", "river"}) {
			t.Fatalf("names %v, want every model in the history by name", got)
		}
		if all[1].Comparison == nil || len(all[1].Comparison.Terms) != len(river.Comparison.Terms) || all[0].LastFit == nil {
			t.Errorf("every model: %+v", all)
		}
	})
	t.Run("no names", func(t *testing.T) {
		none, err := s.Fleet(ctxT(t), []string{})
		if err != nil || len(none) != 0 {
			t.Errorf("Fleet of no names: %+v, %v", none, err)
		}
	})
}

// TestFleetEmpty: a store with no models has no fleet.
func TestFleetEmpty(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	all, err := s.Fleet(ctxT(t), nil)
	if err != nil || len(all) != 0 {
		t.Errorf("Fleet: %+v, %v", all, err)
	}
}

// TestTermEDFs reads each term's EDF from the stored documents, keyed by
// fit id and term name; failed and unknown fits have no entry.
func TestTermEDFs(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	refDoc, candDoc := testDocs(t)
	a, err := s.RecordFit(ctxT(t), record("m", day(1), refDoc))
	if err != nil {
		t.Fatal(err)
	}
	b, err := s.RecordFit(ctxT(t), record("other", day(1), candDoc))
	if err != nil {
		t.Fatal(err)
	}
	failed, err := s.RecordFailure(ctxT(t), "m", day(2), "boom", t0, t0)
	if err != nil {
		t.Fatal(err)
	}
	got, err := s.TermEDFs(ctxT(t), []int64{a, b, failed, b + 1000})
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 2 {
		t.Fatalf("EDFs for fits %v, want %d and %d only", keysOf(got), a, b)
	}
	for id, doc := range map[int64]*fit.Document{a: refDoc, b: candDoc} {
		if len(got[id]) != len(doc.Terms) {
			t.Errorf("fit %d: %d terms, document has %d", id, len(got[id]), len(doc.Terms))
		}
		for _, term := range doc.Terms {
			if e, ok := got[id][term.Name]; !ok || e != term.EDF {
				t.Errorf("fit %d, term %s: EDF %g (%v), want %g", id, term.Name, e, ok, term.EDF)
			}
		}
	}
	if none, err := s.TermEDFs(ctxT(t), nil); err != nil || len(none) != 0 {
		t.Errorf("no fits: %v, %v", none, err)
	}
}

func keysOf[V any](m map[int64]V) []int64 {
	var out []int64
	for k := range m {
		out = append(out, k)
	}
	slices.Sort(out)
	return out
}
