// Package history keeps the fit history of curvewatch's models in
// PostgreSQL: fits (with their curve grids as rows), comparisons, pinned
// baselines, watermarks and the models themselves, in the tables that
// package migrations creates.
//
// A Store works in one schema. Its connections set search_path to that
// schema alone, so its SQL names tables without a schema; a connection
// pooler in transaction mode must pass search_path through (PgBouncer:
// track_extra_parameters).
//
// Each write that touches several rows (a fit and its grid points, a
// comparison and its terms) runs in one transaction. The writes that a
// refit's own transaction must include also come in a Tx form taking a
// pgx.Tx (RecordFitTx, RecordComparisonTx, PinBaselineTx, AdvanceWatermark),
// for use inside Store.InTx or a job engine's transaction.
package history

import (
	"context"
	"errors"
	"fmt"
	"regexp"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgxpool"
)

// Store reads and writes the history tables of one schema. It is safe for
// concurrent use.
type Store struct {
	pool   *pgxpool.Pool
	schema string
}

// Status is the outcome of a refit, as in fits.status.
type Status string

// Refit outcomes.
const (
	// StatusSucceeded: the fit converged; its document is stored.
	StatusSucceeded Status = "succeeded"
	// StatusUnconverged: a document is stored, but the penalised IRLS did
	// not converge (fit.Document.Convergence.Converged is false).
	StatusUnconverged Status = "unconverged"
	// StatusFailed: no fit; Reason says why.
	StatusFailed Status = "failed"
)

// Errors callers act on; test them with errors.Is.
var (
	// ErrSlotDone: the scheduled slot already has a succeeded fit, so the
	// new one was not recorded. The error is a *SlotDoneError.
	ErrSlotDone = errors.New("the slot already has a successful fit")
	// ErrNoFit: there is no such fit (or none that qualifies).
	ErrNoFit = errors.New("no such fit")
)

// SlotDoneError says which fit already holds the slot.
type SlotDoneError struct {
	Model string
	Slot  time.Time
	// FitID is the succeeded fit already recorded for the slot.
	FitID int64
}

func (e *SlotDoneError) Error() string {
	return fmt.Sprintf("model %q: slot %s already has successful fit %d", e.Model, e.Slot.UTC().Format(time.RFC3339), e.FitID)
}

// Is makes errors.Is(err, ErrSlotDone) true.
func (e *SlotDoneError) Is(target error) bool { return target == ErrSlotDone }

var schemaName = regexp.MustCompile(`^[A-Za-z_][A-Za-z0-9_]{0,62}$`)

// Open connects to the database at url and checks that the schema holds
// curvewatch's tables (see package migrations).
func Open(ctx context.Context, url, schema string) (*Store, error) {
	if !schemaName.MatchString(schema) {
		return nil, fmt.Errorf("history: schema name %q: use letters, digits and underscores (at most 63, not starting with a digit)", schema)
	}
	cfg, err := pgxpool.ParseConfig(url)
	if err != nil {
		// pgx's message may quote the URL, password included.
		return nil, fmt.Errorf("history: the database URL does not parse: give a postgres://user@host:port/database URL")
	}
	cfg.ConnConfig.RuntimeParams["search_path"] = schema
	pool, err := pgxpool.NewWithConfig(ctx, cfg)
	if err != nil {
		return nil, fmt.Errorf("history: connect: %w", err)
	}
	var ok bool
	err = pool.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM pg_tables WHERE schemaname = $1 AND tablename = 'fits')`, schema).Scan(&ok)
	if err != nil {
		pool.Close()
		return nil, fmt.Errorf("history: cannot reach the database at %s:%d (is PostgreSQL running, and the URL right?): %w", cfg.ConnConfig.Host, cfg.ConnConfig.Port, err)
	}
	if !ok {
		pool.Close()
		return nil, fmt.Errorf("history: schema %q has no curvewatch tables: run `curvewatch migrate --config …` first", schema)
	}
	return &Store{pool: pool, schema: schema}, nil
}

// Close closes the connections; calling it twice is harmless.
func (s *Store) Close() { s.pool.Close() }

// Schema returns the schema the store works in.
func (s *Store) Schema() string { return s.schema }

// InTx runs fn in a transaction, committing when fn returns nil and rolling
// back otherwise.
func (s *Store) InTx(ctx context.Context, fn func(tx pgx.Tx) error) error {
	return pgx.BeginFunc(ctx, s.pool, fn)
}

// querier is what both the pool and a transaction offer.
type querier interface {
	Exec(ctx context.Context, sql string, args ...any) (pgconn.CommandTag, error)
	Query(ctx context.Context, sql string, args ...any) (pgx.Rows, error)
	QueryRow(ctx context.Context, sql string, args ...any) pgx.Row
}

// ensureModel inserts a models row with no spec when the model has none,
// so that a fit is never lost for want of one.
func ensureModel(ctx context.Context, q querier, model string) error {
	if model == "" {
		return errors.New("the model name is empty")
	}
	_, err := q.Exec(ctx, `INSERT INTO models (name) VALUES ($1) ON CONFLICT (name) DO NOTHING`, model)
	return err
}

// nullTime maps the zero time to NULL.
func nullTime(t time.Time) *time.Time {
	if t.IsZero() {
		return nil
	}
	return &t
}

func pgCode(err error) string {
	var pe *pgconn.PgError
	if errors.As(err, &pe) {
		return pe.Code
	}
	return ""
}
