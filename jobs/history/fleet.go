package history

import (
	"context"
	"fmt"
	"math"
	"time"

	"github.com/jackc/pgx/v5"
)

// ModelStatus is where one model stands: its latest refit, its latest
// success, its latest comparison and its open alerts. The metrics and the
// fleet page are drawn from it, so that every replica (and a restarted
// one) reports the same figures.
type ModelStatus struct {
	Name string
	// LastFit is the latest refit of any status, nil when none.
	LastFit *FitBrief
	// LastSuccess is the latest succeeded refit, nil when none.
	LastSuccess *FitBrief
	// Comparison is the latest comparison, nil when none.
	Comparison *ComparisonBrief
	// BaselineID is the pinned baseline's fit id, 0 when none.
	BaselineID int64
	// Firing and Pending count the model's alerts in those states.
	Firing, Pending int
}

// FitBrief is the summary of one fit row.
type FitBrief struct {
	ID                int64
	Status            Status
	Reason            string
	Finished          time.Time
	RowsUsed          int64
	DevianceExplained float64
}

// ComparisonBrief is the summary of one comparison row.
type ComparisonBrief struct {
	ID                       int64
	ReferenceID, CandidateID int64
	Breach                   bool
	// DegradationRatio is NaN when the comparison did not compute one.
	DegradationRatio float64
	// PValue is the smallest adjusted p-value (NaN when unknown).
	PValue  float64
	Created time.Time
	// Terms are the per-term rows, by name.
	Terms []TermResult
}

// WorstScore is the largest term shift score of the comparison (0 with no
// terms).
func (c *ComparisonBrief) WorstScore() float64 {
	worst := 0.0
	for _, t := range c.Terms {
		worst = max(worst, t.Score)
	}
	return worst
}

// Fleet returns the status of the given models (every model in the
// history when names is nil), in the order given (by name when nil). A
// name with no history yet gets a ModelStatus with only its Name set.
// It runs one query for the fits and one for the terms, whatever the
// number of models.
func (s *Store) Fleet(ctx context.Context, names []string) ([]ModelStatus, error) {
	rows, err := s.pool.Query(ctx, `
		WITH wanted AS (
			SELECT name, ord FROM unnest($1::text[]) WITH ORDINALITY AS w (name, ord)
			UNION ALL
			SELECT name, 0 FROM models WHERE $1::text[] IS NULL
		)
		SELECT w.name,
		       lf.id, lf.status, lf.reason, lf.finished_at, lf.rows_used, lf.deviance_explained,
		       ls.id, ls.finished_at, ls.rows_used, ls.deviance_explained,
		       c.id, c.reference_fit_id, c.candidate_fit_id, c.breach, c.degradation_ratio, c.p_value, c.created_at,
		       b.fit_id,
		       (SELECT count(*) FILTER (WHERE state = 'firing') FROM alert_states a WHERE a.model = w.name),
		       (SELECT count(*) FILTER (WHERE state = 'pending') FROM alert_states a WHERE a.model = w.name)
		FROM wanted w
		LEFT JOIN LATERAL (SELECT id, status, reason, finished_at, rows_used, deviance_explained
		                   FROM fits WHERE model = w.name ORDER BY id DESC LIMIT 1) lf ON true
		LEFT JOIN LATERAL (SELECT id, finished_at, rows_used, deviance_explained
		                   FROM fits WHERE model = w.name AND status = 'succeeded' ORDER BY id DESC LIMIT 1) ls ON true
		LEFT JOIN LATERAL (SELECT id, reference_fit_id, candidate_fit_id, breach, degradation_ratio, p_value, created_at
		                   FROM comparisons WHERE model = w.name ORDER BY id DESC LIMIT 1) c ON true
		LEFT JOIN baselines b ON b.model = w.name
		ORDER BY w.ord, w.name`, names)
	if err != nil {
		return nil, fmt.Errorf("history: fleet status: %w", err)
	}
	var out []ModelStatus
	byComparison := map[int64]int{}
	for rows.Next() {
		var (
			m                  ModelStatus
			lfID               *int64
			lfStatus, lfReason *string
			lfFinished         *time.Time
			lfRows             *int64
			lfDE               *float64
			lsID               *int64
			lsFinished         *time.Time
			lsRows             *int64
			lsDE               *float64
			cID, cRef, cCand   *int64
			cBreach            *bool
			cRatio, cP         *float64
			cCreated           *time.Time
			baseline           *int64
			firing, pending    int64
		)
		if err := rows.Scan(&m.Name, &lfID, &lfStatus, &lfReason, &lfFinished, &lfRows, &lfDE,
			&lsID, &lsFinished, &lsRows, &lsDE,
			&cID, &cRef, &cCand, &cBreach, &cRatio, &cP, &cCreated, &baseline, &firing, &pending); err != nil {
			rows.Close()
			return nil, fmt.Errorf("history: fleet status: %w", err)
		}
		if lfID != nil {
			m.LastFit = &FitBrief{ID: *lfID, Status: Status(deref(lfStatus)), Reason: deref(lfReason),
				Finished: deref(lfFinished), RowsUsed: deref(lfRows), DevianceExplained: deref(lfDE)}
		}
		if lsID != nil {
			m.LastSuccess = &FitBrief{ID: *lsID, Status: StatusSucceeded, Finished: deref(lsFinished),
				RowsUsed: deref(lsRows), DevianceExplained: deref(lsDE)}
		}
		if cID != nil {
			m.Comparison = &ComparisonBrief{ID: *cID, ReferenceID: deref(cRef), CandidateID: deref(cCand),
				Breach: deref(cBreach), DegradationRatio: nanIfNil(cRatio), PValue: nanIfNil(cP), Created: deref(cCreated)}
			byComparison[*cID] = len(out)
		}
		m.BaselineID = deref(baseline)
		m.Firing, m.Pending = int(firing), int(pending)
		out = append(out, m)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("history: fleet status: %w", err)
	}
	if len(byComparison) == 0 {
		return out, nil
	}
	ids := make([]int64, 0, len(byComparison))
	for id := range byComparison {
		ids = append(ids, id)
	}
	trows, err := s.pool.Query(ctx, `
		SELECT comparison_id, term, kind, verdict, score, size, p_adjusted FROM comparison_terms
		WHERE comparison_id = ANY($1) ORDER BY comparison_id, term`, ids)
	if err != nil {
		return nil, fmt.Errorf("history: fleet status, comparison terms: %w", err)
	}
	defer trows.Close()
	for trows.Next() {
		var id int64
		var t TermResult
		if err := trows.Scan(&id, &t.Term, &t.Kind, &t.Verdict, &t.Score, &t.Size, &t.PAdjusted); err != nil {
			return nil, fmt.Errorf("history: fleet status, comparison terms: %w", err)
		}
		c := out[byComparison[id]].Comparison
		c.Terms = append(c.Terms, t)
	}
	if err := trows.Err(); err != nil {
		return nil, fmt.Errorf("history: fleet status, comparison terms: %w", err)
	}
	return out, nil
}

// TermEDFs returns each term's effective degrees of freedom in the given
// fits, keyed by fit id and term name. Fits never change, so callers may
// keep the answer.
func (s *Store) TermEDFs(ctx context.Context, fitIDs []int64) (map[int64]map[string]float64, error) {
	rows, err := s.pool.Query(ctx, `
		SELECT f.id, t->>'name', (t->>'edf')::double precision
		FROM fits f, jsonb_array_elements(f.document->'terms') t
		WHERE f.id = ANY($1) AND f.document IS NOT NULL AND t ? 'edf'`, fitIDs)
	if err != nil {
		return nil, fmt.Errorf("history: term EDFs: %w", err)
	}
	out := map[int64]map[string]float64{}
	var (
		id   int64
		name string
		edf  float64
	)
	_, err = pgx.ForEachRow(rows, []any{&id, &name, &edf}, func() error {
		if out[id] == nil {
			out[id] = map[string]float64{}
		}
		out[id][name] = edf
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("history: term EDFs: %w", err)
	}
	return out, nil
}

func nanIfNil(p *float64) float64 {
	if p == nil {
		return math.NaN()
	}
	return *p
}
