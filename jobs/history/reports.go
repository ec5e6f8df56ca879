package history

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/fit"
)

// ReportForFitTx returns the latest comparison made with fitID as the
// candidate — its id, reference fit and decoded report — inside the
// caller's transaction. It returns ErrNoFit when the fit was not compared.
func (s *Store) ReportForFitTx(ctx context.Context, tx pgx.Tx, fitID int64) (comparisonID, refID int64, rep *fit.ShiftReport, err error) {
	var body []byte
	err = tx.QueryRow(ctx, `
		SELECT id, reference_fit_id, report FROM comparisons
		WHERE candidate_fit_id = $1 ORDER BY id DESC LIMIT 1`, fitID).Scan(&comparisonID, &refID, &body)
	switch {
	case errors.Is(err, pgx.ErrNoRows):
		return 0, 0, nil, fmt.Errorf("history: fit %d: %w (it was not compared)", fitID, ErrNoFit)
	case err != nil:
		return 0, 0, nil, fmt.Errorf("history: the comparison of fit %d: %w", fitID, err)
	}
	rep = new(fit.ShiftReport)
	if err := json.Unmarshal(body, rep); err != nil {
		return 0, 0, nil, fmt.Errorf("history: decode comparison %d: %w", comparisonID, err)
	}
	return comparisonID, refID, rep, nil
}
