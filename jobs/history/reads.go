package history

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"time"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/jackc/pgx/v5"
)

// Reads for the HTTP API and the dashboard. They answer from the summary
// columns and the comparison_terms rows, so that a page listing hundreds of
// fits or comparisons never decodes their JSON documents; only Comparison
// and Fit decode one document each.

// ErrNoComparison: there is no such comparison.
var ErrNoComparison = errors.New("no such comparison")

// History lengths for ScoreHistory: DefaultHistory fits when limit is not
// above 0, at most MaxHistory.
const (
	DefaultHistory = 1000
	MaxHistory     = 5000
)

// StoredComparison is a row of the comparisons table with its report
// decoded.
type StoredComparison struct {
	ComparisonBrief
	Model string
	// Report is the shift report as recorded.
	Report *fit.ShiftReport
}

// ScorePoint is one fit in a model's history, with the latest comparison
// that took it as the candidate.
type ScorePoint struct {
	FitID    int64
	Status   Status
	Finished time.Time
	// DevianceExplained is NaN for a failed refit.
	DevianceExplained float64
	// Comparison is nil when the fit was not compared with a reference;
	// its Terms hold each term's verdict and score.
	Comparison *ComparisonBrief
}

const comparisonColumns = `id, model, reference_fit_id, candidate_fit_id, breach, degradation_ratio, p_value, created_at`

// scanComparison reads comparisonColumns (and the report when withReport)
// into a StoredComparison.
func scanComparison(row pgx.Row, withReport bool) (*StoredComparison, error) {
	var (
		c      StoredComparison
		ratio  *float64
		p      *float64
		report []byte
	)
	dest := []any{&c.ID, &c.Model, &c.ReferenceID, &c.CandidateID, &c.Breach, &ratio, &p, &c.Created}
	if withReport {
		dest = append(dest, &report)
	}
	if err := row.Scan(dest...); err != nil {
		return nil, err
	}
	c.DegradationRatio, c.PValue = nanIfNil(ratio), nanIfNil(p)
	if withReport {
		c.Report = new(fit.ShiftReport)
		if err := json.Unmarshal(report, c.Report); err != nil {
			return nil, fmt.Errorf("decode the report of comparison %d: %w", c.ID, err)
		}
	}
	return &c, nil
}

// Comparisons returns a page of the model's comparisons, newest first, with
// their per-term rows but without their reports: those with id below
// beforeID, or the newest when beforeID is 0. limit is as for Fits. It
// runs two queries whatever the page size.
func (s *Store) Comparisons(ctx context.Context, model string, limit int, beforeID int64) ([]ComparisonBrief, error) {
	limit = pageLimit(limit)
	rows, err := s.pool.Query(ctx, `
		SELECT `+comparisonColumns+` FROM comparisons
		WHERE model = $1 AND ($2::bigint = 0 OR id < $2::bigint)
		ORDER BY id DESC LIMIT $3`, model, beforeID, limit)
	if err != nil {
		return nil, fmt.Errorf("history: comparisons of model %q: %w", model, err)
	}
	var out []ComparisonBrief
	for rows.Next() {
		c, err := scanComparison(rows, false)
		if err != nil {
			rows.Close()
			return nil, fmt.Errorf("history: comparisons of model %q: %w", model, err)
		}
		out = append(out, c.ComparisonBrief)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("history: comparisons of model %q: %w", model, err)
	}
	ids := make([]int64, len(out))
	for i, c := range out {
		ids[i] = c.ID
	}
	terms, err := s.termsOf(ctx, ids)
	if err != nil {
		return nil, fmt.Errorf("history: comparisons of model %q: %w", model, err)
	}
	for i := range out {
		out[i].Terms = terms[out[i].ID]
	}
	return out, nil
}

// Comparison returns the comparison with the given id, its report decoded
// and its per-term rows, or ErrNoComparison.
func (s *Store) Comparison(ctx context.Context, id int64) (*StoredComparison, error) {
	c, err := scanComparison(s.pool.QueryRow(ctx, `SELECT `+comparisonColumns+`, report FROM comparisons WHERE id = $1`, id), true)
	if errors.Is(err, pgx.ErrNoRows) {
		err = ErrNoComparison
	}
	if err != nil {
		return nil, fmt.Errorf("history: comparison %d: %w", id, err)
	}
	terms, err := s.termsOf(ctx, []int64{id})
	if err != nil {
		return nil, fmt.Errorf("history: comparison %d: %w", id, err)
	}
	c.Terms = terms[id]
	return c, nil
}

// FitSummary returns the fit with the given id without its document (the
// summary columns only), or ErrNoFit.
func (s *Store) FitSummary(ctx context.Context, id int64) (*StoredFit, error) {
	f, err := scanFit(s.pool.QueryRow(ctx, `SELECT `+summaryColumns+` FROM fits WHERE id = $1`, id), false)
	if errors.Is(err, pgx.ErrNoRows) {
		err = ErrNoFit
	}
	if err != nil {
		return nil, fmt.Errorf("history: fit %d: %w", id, err)
	}
	return f, nil
}

// ScoreHistory returns the model's latest limit fits of every status,
// oldest first, each with the latest comparison that took it as the
// candidate (with every term's score): what a chart of shift scores and
// deviance explained over time needs. limit defaults to DefaultHistory and
// is capped at MaxHistory. It runs two queries and decodes no document.
func (s *Store) ScoreHistory(ctx context.Context, model string, limit int) ([]ScorePoint, error) {
	if limit <= 0 {
		limit = DefaultHistory
	}
	limit = min(limit, MaxHistory)
	rows, err := s.pool.Query(ctx, `
		SELECT f.id, f.status, f.finished_at, f.deviance_explained,
		       c.id, c.reference_fit_id, c.breach, c.degradation_ratio, c.p_value, c.created_at
		FROM (SELECT id, status, finished_at, deviance_explained FROM fits
		      WHERE model = $1 ORDER BY id DESC LIMIT $2) f
		LEFT JOIN LATERAL (SELECT id, reference_fit_id, breach, degradation_ratio, p_value, created_at
		                   FROM comparisons WHERE candidate_fit_id = f.id
		                   ORDER BY id DESC LIMIT 1) c ON true
		ORDER BY f.id`, model, limit)
	if err != nil {
		return nil, fmt.Errorf("history: score history of model %q: %w", model, err)
	}
	var (
		out   []ScorePoint
		ids   []int64
		where = map[int64]int{} // comparison id → index in out
	)
	for rows.Next() {
		var (
			p        ScorePoint
			de       *float64
			cID, ref *int64
			breach   *bool
			ratio, q *float64
			created  *time.Time
		)
		if err := rows.Scan(&p.FitID, &p.Status, &p.Finished, &de, &cID, &ref, &breach, &ratio, &q, &created); err != nil {
			rows.Close()
			return nil, fmt.Errorf("history: score history of model %q: %w", model, err)
		}
		p.DevianceExplained = nanIfNil(de)
		if cID != nil {
			p.Comparison = &ComparisonBrief{ID: *cID, ReferenceID: deref(ref), CandidateID: p.FitID, Breach: deref(breach),
				DegradationRatio: nanIfNil(ratio), PValue: nanIfNil(q), Created: deref(created)}
			where[*cID] = len(out)
			ids = append(ids, *cID)
		}
		out = append(out, p)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("history: score history of model %q: %w", model, err)
	}
	terms, err := s.termsOf(ctx, ids)
	if err != nil {
		return nil, fmt.Errorf("history: score history of model %q: %w", model, err)
	}
	for id, i := range where {
		out[i].Comparison.Terms = terms[id]
	}
	return out, nil
}

// termsOf returns the comparison_terms rows of the given comparisons, by
// comparison id, each list in term order.
func (s *Store) termsOf(ctx context.Context, ids []int64) (map[int64][]TermResult, error) {
	out := make(map[int64][]TermResult, len(ids))
	if len(ids) == 0 {
		return out, nil
	}
	rows, err := s.pool.Query(ctx, `
		SELECT comparison_id, term, kind, verdict, score, size, p_adjusted FROM comparison_terms
		WHERE comparison_id = ANY($1) ORDER BY comparison_id, term`, ids)
	if err != nil {
		return nil, fmt.Errorf("comparison terms: %w", err)
	}
	var (
		id int64
		t  TermResult
	)
	_, err = pgx.ForEachRow(rows, []any{&id, &t.Term, &t.Kind, &t.Verdict, &t.Score, &t.Size, &t.PAdjusted}, func() error {
		out[id] = append(out[id], t)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("comparison terms: %w", err)
	}
	return out, nil
}
