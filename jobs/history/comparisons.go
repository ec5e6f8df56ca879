package history

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"strings"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/jackc/pgerrcode"
	"github.com/jackc/pgx/v5"
)

// RecordComparison stores a shift report comparing candidate fit candID
// with reference fit refID of the model — the report as JSONB and one
// comparison_terms row per term — in one transaction, and returns the
// comparison's id. Both fits must be fits of the model.
func (s *Store) RecordComparison(ctx context.Context, model string, refID, candID int64, rep *fit.ShiftReport) (int64, error) {
	var id int64
	err := s.InTx(ctx, func(tx pgx.Tx) error {
		var err error
		id, err = s.RecordComparisonTx(ctx, tx, model, refID, candID, rep)
		return err
	})
	return id, err
}

// RecordComparisonTx is RecordComparison inside the caller's transaction.
func (s *Store) RecordComparisonTx(ctx context.Context, tx pgx.Tx, model string, refID, candID int64, rep *fit.ShiftReport) (int64, error) {
	id, err := recordComparison(ctx, tx, model, refID, candID, rep)
	if err != nil {
		return 0, fmt.Errorf("history: record comparison of fits %d and %d of model %q: %w", refID, candID, model, err)
	}
	return id, nil
}

func recordComparison(ctx context.Context, tx pgx.Tx, model string, refID, candID int64, rep *fit.ShiftReport) (int64, error) {
	if rep == nil {
		return 0, errors.New("no shift report")
	}
	body, err := json.Marshal(rep)
	if err != nil {
		return 0, fmt.Errorf("encode the report: %w", err)
	}
	terms := make([][]any, len(rep.Terms))
	for i, t := range rep.Terms {
		terms[i] = []any{int64(0), t.Name, string(t.Kind), t.Verdict, t.Score, t.Size, t.PAdjusted}
	}
	// A savepoint, so that a refused insert leaves the caller's
	// transaction usable.
	sub, err := tx.Begin(ctx)
	if err != nil {
		return 0, err
	}
	defer sub.Rollback(ctx)
	var id int64
	err = sub.QueryRow(ctx, `
		INSERT INTO comparisons (model, reference_fit_id, candidate_fit_id, breach, report, degradation_ratio, p_value)
		VALUES ($1, $2, $3, $4, $5, $6, $7) RETURNING id`, model, refID, candID, rep.Breach, body, degradationRatio(rep), smallestP(rep)).Scan(&id)
	switch pgCode(err) {
	case "":
	case pgerrcode.ForeignKeyViolation:
		return 0, fmt.Errorf("%w: fits %d and %d must both be fits of model %q", ErrNoFit, refID, candID, model)
	case pgerrcode.CheckViolation:
		return 0, fmt.Errorf("a fit cannot be compared with itself: %w", err)
	default:
		return 0, err
	}
	if err != nil {
		return 0, err
	}
	for _, t := range terms {
		t[0] = id
	}
	if len(terms) > 0 {
		if _, err := sub.CopyFrom(ctx, pgx.Identifier{"comparison_terms"},
			[]string{"comparison_id", "term", "kind", "verdict", "score", "size", "p_adjusted"}, pgx.CopyFromRows(terms)); err != nil {
			return 0, fmt.Errorf("store the terms: %w", err)
		}
	}
	return id, sub.Commit(ctx)
}

// TermResult is one row of comparison_terms.
type TermResult struct {
	Term      string
	Kind      fit.TermKind
	Verdict   string
	Score     float64
	Size      float64
	PAdjusted float64
}

// ComparisonTerms returns the per-term rows of a comparison, in term order
// by name.
func (s *Store) ComparisonTerms(ctx context.Context, comparisonID int64) ([]TermResult, error) {
	rows, err := s.pool.Query(ctx, `
		SELECT term, kind, verdict, score, size, p_adjusted FROM comparison_terms
		WHERE comparison_id = $1 ORDER BY term`, comparisonID)
	if err != nil {
		return nil, fmt.Errorf("history: terms of comparison %d: %w", comparisonID, err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (TermResult, error) {
		var t TermResult
		err := r.Scan(&t.Term, &t.Kind, &t.Verdict, &t.Score, &t.Size, &t.PAdjusted)
		return t, err
	})
	if err != nil {
		return nil, fmt.Errorf("history: terms of comparison %d: %w", comparisonID, err)
	}
	return out, nil
}

// Verdict summarises the comparison made for one fit (as the candidate).
type Verdict struct {
	ComparisonID int64
	ReferenceID  int64
	Breach       bool
	// Shifted lists the terms whose verdict breached.
	Shifted []string
}

// Text says the verdict in a few words.
func (v Verdict) Text() string {
	switch {
	case len(v.Shifted) > 0:
		return fmt.Sprintf("BREACH vs fit %d: %s shifted", v.ReferenceID, strings.Join(v.Shifted, ", "))
	case v.Breach:
		return fmt.Sprintf("BREACH vs fit %d", v.ReferenceID)
	}
	return fmt.Sprintf("stable vs fit %d", v.ReferenceID)
}

// Verdicts returns, for those of the given fits that were compared with a
// reference, the latest comparison's verdict, keyed by fit id.
func (s *Store) Verdicts(ctx context.Context, model string, fitIDs []int64) (map[int64]Verdict, error) {
	rows, err := s.pool.Query(ctx, `
		SELECT DISTINCT ON (c.candidate_fit_id) c.candidate_fit_id, c.id, c.reference_fit_id, c.breach,
		       COALESCE(array_agg(t.term ORDER BY t.term) FILTER (WHERE t.verdict = 'shifted'), '{}')
		FROM comparisons c LEFT JOIN comparison_terms t ON t.comparison_id = c.id
		WHERE c.model = $1 AND c.candidate_fit_id = ANY($2)
		GROUP BY c.id ORDER BY c.candidate_fit_id, c.id DESC`, model, fitIDs)
	if err != nil {
		return nil, fmt.Errorf("history: verdicts of model %q: %w", model, err)
	}
	defer rows.Close()
	out := map[int64]Verdict{}
	for rows.Next() {
		var fitID int64
		var v Verdict
		if err := rows.Scan(&fitID, &v.ComparisonID, &v.ReferenceID, &v.Breach, &v.Shifted); err != nil {
			return nil, fmt.Errorf("history: verdicts of model %q: %w", model, err)
		}
		out[fitID] = v
	}
	return out, rows.Err()
}

// degradationRatio is the report's predictive deviance ratio, nil when it
// has none.
func degradationRatio(rep *fit.ShiftReport) *float64 {
	if rep.Degradation == nil || math.IsNaN(rep.Degradation.Ratio) || math.IsInf(rep.Degradation.Ratio, 0) {
		return nil
	}
	return &rep.Degradation.Ratio
}

// smallestP is the smallest multiplicity-adjusted p-value among the
// report's terms and its level: the p-value of "nothing changed" for the
// model as a whole (Holm's adjustment keeps it valid as such), nil when no
// test was made.
func smallestP(rep *fit.ShiftReport) *float64 {
	p := math.Inf(1)
	for _, t := range rep.Terms {
		if t.Verdict != fit.VerdictNotCompared {
			p = math.Min(p, t.PAdjusted)
		}
	}
	if rep.Level.Verdict != fit.VerdictNotCompared && rep.Level.Verdict != "" {
		p = math.Min(p, rep.Level.PAdjusted)
	}
	if math.IsInf(p, 1) || math.IsNaN(p) {
		return nil
	}
	return &p
}
