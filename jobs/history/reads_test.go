package history_test

import (
	"errors"
	"math"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs/history"
)

// TestComparisonReads records a reference, a failure and three compared
// candidates, and reads them back through Comparisons (paged, newest
// first, terms without reports), Comparison (report decoded) and
// ScoreHistory (every fit, oldest first, scores from the terms rows).
func TestComparisonReads(t *testing.T) {
	t.Parallel()
	s, _ := newStore(t)
	refDoc, candDoc := testDocs(t)
	rep, err := fit.Compare(refDoc, candDoc, fit.DefaultTolerance())
	if err != nil {
		t.Fatal(err)
	}
	ref, err := s.RecordFit(ctxT(t), record("m", day(0), refDoc))
	if err != nil {
		t.Fatal(err)
	}
	failed, err := s.RecordFailure(ctxT(t), "m", day(1), "the source table is empty", day(1), day(1))
	if err != nil {
		t.Fatal(err)
	}
	var cands, comps []int64
	for d := 2; d <= 4; d++ {
		cand, err := s.RecordFit(ctxT(t), record("m", day(d), candDoc))
		if err != nil {
			t.Fatal(err)
		}
		id, err := s.RecordComparison(ctxT(t), "m", ref, cand, rep)
		if err != nil {
			t.Fatal(err)
		}
		cands, comps = append(cands, cand), append(comps, id)
	}
	// Another model's comparison stays out of m's pages.
	other, _ := s.RecordFit(ctxT(t), record("other", day(0), refDoc))
	otherCand, _ := s.RecordFit(ctxT(t), record("other", day(1), candDoc))
	if _, err := s.RecordComparison(ctxT(t), "other", other, otherCand, rep); err != nil {
		t.Fatal(err)
	}

	page, err := s.Comparisons(ctxT(t), "m", 2, 0)
	if err != nil {
		t.Fatal(err)
	}
	if len(page) != 2 || page[0].ID != comps[2] || page[1].ID != comps[1] {
		t.Fatalf("first page %+v, want comparisons %d and %d", page, comps[2], comps[1])
	}
	next, err := s.Comparisons(ctxT(t), "m", 2, page[1].ID)
	if err != nil {
		t.Fatal(err)
	}
	if len(next) != 1 || next[0].ID != comps[0] || next[0].CandidateID != cands[0] || next[0].ReferenceID != ref {
		t.Fatalf("second page %+v", next)
	}
	if len(next[0].Terms) != len(rep.Terms) || next[0].Breach != rep.Breach {
		t.Errorf("comparison %d: %d terms, breach %v; want %d, %v", next[0].ID, len(next[0].Terms), next[0].Breach, len(rep.Terms), rep.Breach)
	}
	worst := 0.0
	for _, ts := range rep.Terms {
		worst = max(worst, ts.Score)
	}
	if got := next[0].WorstScore(); got != worst {
		t.Errorf("worst score %v, want %v", got, worst)
	}

	c, err := s.Comparison(ctxT(t), comps[1])
	if err != nil {
		t.Fatal(err)
	}
	if c.Model != "m" || c.CandidateID != cands[1] || c.Report == nil || len(c.Report.Terms) != len(rep.Terms) || len(c.Terms) != len(rep.Terms) {
		t.Fatalf("comparison %+v", c)
	}
	if _, err := s.Comparison(ctxT(t), comps[2]+1000); !errors.Is(err, history.ErrNoComparison) {
		t.Errorf("unknown comparison: %v, want ErrNoComparison", err)
	}

	sum, err := s.FitSummary(ctxT(t), failed)
	if err != nil || sum.Status != history.StatusFailed || sum.Reason != "the source table is empty" || sum.Document != nil {
		t.Errorf("fit summary %+v, %v", sum, err)
	}
	if _, err := s.FitSummary(ctxT(t), failed+1000); !errors.Is(err, history.ErrNoFit) {
		t.Errorf("unknown fit: %v, want ErrNoFit", err)
	}

	hist, err := s.ScoreHistory(ctxT(t), "m", 0)
	if err != nil {
		t.Fatal(err)
	}
	wantIDs := []int64{ref, failed, cands[0], cands[1], cands[2]}
	if len(hist) != len(wantIDs) {
		t.Fatalf("history has %d points, want %d", len(hist), len(wantIDs))
	}
	for i, p := range hist {
		if p.FitID != wantIDs[i] {
			t.Errorf("point %d is fit %d, want %d", i, p.FitID, wantIDs[i])
		}
	}
	if hist[0].Comparison != nil || hist[1].Comparison != nil {
		t.Errorf("the reference and the failure have comparisons: %+v %+v", hist[0].Comparison, hist[1].Comparison)
	}
	if !math.IsNaN(hist[1].DevianceExplained) || hist[1].Status != history.StatusFailed {
		t.Errorf("failed fit: deviance explained %v, status %s", hist[1].DevianceExplained, hist[1].Status)
	}
	if p := hist[4]; p.Comparison == nil || p.Comparison.ID != comps[2] || len(p.Comparison.Terms) != len(rep.Terms) ||
		p.DevianceExplained != candDoc.DevianceExplained {
		t.Errorf("latest point %+v", p)
	}
	short, err := s.ScoreHistory(ctxT(t), "m", 2)
	if err != nil || len(short) != 2 || short[0].FitID != cands[1] {
		t.Errorf("history of 2: %+v, %v", short, err)
	}
}
