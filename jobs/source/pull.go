package source

// This file holds the reading side: Rows, a fit.Source that streams one
// time window of a source table inside one read-only snapshot.

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgtype"
	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/curvewatch/curvewatch/fit"
)

// Query selects a model's rows.
type Query struct {
	// Table is the source table; its name is quoted, never pasted.
	Table Table
	// Time is the window and watermark column (timestamp, timestamptz or
	// date). Delivered as seconds since 1970 when a fit asks for it.
	Time string
	// Where is an optional predicate from the (trusted) config. It runs
	// inside a READ ONLY transaction with a statement timeout, so it cannot
	// change data or run forever.
	Where string
	// From and To bound the window: From ≤ time < To.
	From, To time.Time
	// StatementTimeout bounds each statement (default 5 minutes).
	StatementTimeout time.Duration
	// BlockRows is the rows per block (default 4096).
	BlockRows int
	// CacheRows is the most rows kept in memory after the first pass, so
	// that a fit's later passes over a small window read memory instead of
	// the database (default 250,000 rows, a few megabytes per column; a
	// negative value turns the cache off). A larger window streams every
	// pass, so memory stays flat however large the window.
	CacheRows int
}

// DefaultCacheRows is Query.CacheRows's default.
const DefaultCacheRows = 250_000

// Rows is a fit.Source over one time window of a table, read inside one
// REPEATABLE READ, READ ONLY transaction: every pass of a fit sees the same
// rows in the same order, whatever commits meanwhile. Close ends the
// transaction.
type Rows struct {
	q       Query
	table   string
	columns []string
	tx      pgx.Tx
	conn    *pgxpool.Conn
	// cache holds the blocks of a completed pass, with the columns it
	// read (nil when there is none, or the window was too large).
	cache     []*fit.Block
	cacheNeed fit.Need
	// Newest is the newest time value in the window after Open (zero when
	// the window is empty): the refit's watermark.
	Newest time.Time
}

// Open starts the snapshot and checks the table and time column exist.
func Open(ctx context.Context, pool *pgxpool.Pool, q Query) (*Rows, error) {
	if err := CheckName(q.Table.Name); err != nil {
		return nil, fmt.Errorf("source table %q: %w", q.Table, err)
	}
	if err := CheckName(q.Time); err != nil {
		return nil, fmt.Errorf("time column %q: %w", q.Time, err)
	}
	table := q.Table.Quoted()
	if q.StatementTimeout <= 0 {
		q.StatementTimeout = 5 * time.Minute
	}
	if q.BlockRows <= 0 {
		q.BlockRows = 4096
	}
	if q.CacheRows == 0 {
		q.CacheRows = DefaultCacheRows
	}
	conn, err := pool.Acquire(ctx)
	if err != nil {
		return nil, fmt.Errorf("source %s: connect: %w", q.Table, err)
	}
	tx, err := conn.BeginTx(ctx, pgx.TxOptions{IsoLevel: pgx.RepeatableRead, AccessMode: pgx.ReadOnly})
	if err != nil {
		conn.Release()
		return nil, fmt.Errorf("source %s: begin read-only transaction: %w", q.Table, err)
	}
	r := &Rows{q: q, table: table, tx: tx, conn: conn}
	fail := func(err error) (*Rows, error) {
		r.Close()
		return nil, err
	}
	if _, err := tx.Exec(ctx, fmt.Sprintf("SET LOCAL statement_timeout = %d", q.StatementTimeout.Milliseconds())); err != nil {
		return fail(fmt.Errorf("source %s: set statement timeout: %w", q.Table, err))
	}
	// Columns, in table order (the query never selects *).
	rs, err := tx.Query(ctx, "SELECT * FROM "+table+" LIMIT 0")
	if err != nil {
		return fail(fmt.Errorf("source %s: %w", q.Table, err))
	}
	for _, fd := range rs.FieldDescriptions() {
		r.columns = append(r.columns, fd.Name)
	}
	rs.Close()
	var newest pgtype.Timestamptz
	err = tx.QueryRow(ctx, "SELECT max("+pgx.Identifier{q.Time}.Sanitize()+")::timestamptz FROM "+table+" WHERE "+r.predicate(), q.From, q.To).Scan(&newest)
	if err != nil {
		return fail(fmt.Errorf("source %s: find the window's newest row: %w", q.Table, err))
	}
	if newest.Valid {
		r.Newest = newest.Time
	}
	return r, nil
}

// predicate is the window condition with $1 = From and $2 = To, plus the
// config's predicate.
func (r *Rows) predicate() string {
	t := pgx.Identifier{r.q.Time}.Sanitize()
	p := t + " >= $1 AND " + t + " < $2"
	if strings.TrimSpace(r.q.Where) != "" {
		// On lines of its own, so a trailing -- comment cannot swallow the
		// closing parenthesis.
		p += " AND (\n" + r.q.Where + "\n)"
	}
	return p
}

// Close ends the snapshot (rolling back: nothing was written).
func (r *Rows) Close() {
	if r.tx != nil {
		_ = r.tx.Rollback(context.Background())
		r.tx = nil
	}
	r.cache = nil
	if r.conn != nil {
		r.conn.Release()
		r.conn = nil
	}
}

// Columns lists the table's columns.
func (r *Rows) Columns() []string { return append([]string(nil), r.columns...) }

// Scan streams the window's rows in time order (ties in physical order,
// stable inside the snapshot). Numeric columns are cast to double
// precision (NULL → NaN, which the engine drops and counts); text columns
// to text (NULL → ""); the time column, when asked for as a number, is
// seconds since 1970.
func (r *Rows) Scan(ctx context.Context, need fit.Need, fn func(*fit.Block) error) error {
	if r.tx == nil {
		return errors.New("source: Scan after Close")
	}
	if r.cache != nil && covers(r.cacheNeed, need) {
		for _, b := range r.cache {
			if err := fn(b); err != nil {
				return err
			}
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		return nil
	}
	// This pass fills the cache while the window fits in it.
	var cache []*fit.Block
	caching, cached := r.q.CacheRows > 0, 0
	keep := func(b *fit.Block) {
		if !caching {
			return
		}
		cached += b.Rows
		if cached > r.q.CacheRows {
			caching, cache = false, nil
			return
		}
		c := &fit.Block{Rows: b.Rows, Line: append([]int64(nil), b.Line...),
			Numeric: make(map[string][]float64, len(b.Numeric)), Text: make(map[string][]string, len(b.Text))}
		for k, v := range b.Numeric {
			c.Numeric[k] = append([]float64(nil), v...)
		}
		for k, v := range b.Text {
			c.Text[k] = append([]string(nil), v...)
		}
		cache = append(cache, c)
	}
	var sel []string
	for _, c := range need.Numeric {
		id := pgx.Identifier{c}.Sanitize()
		if c == r.q.Time {
			sel = append(sel, "date_part('epoch', "+id+")") // double precision, without extract's numeric detour
		} else {
			sel = append(sel, id+"::float8")
		}
	}
	for _, c := range need.Text {
		sel = append(sel, pgx.Identifier{c}.Sanitize()+"::text")
	}
	if len(sel) == 0 {
		sel = []string{"1"}
	}
	sql := "SELECT " + strings.Join(sel, ", ") + " FROM " + r.table + " WHERE " + r.predicate() +
		" ORDER BY " + pgx.Identifier{r.q.Time}.Sanitize() + ", ctid"
	rows, err := r.tx.Query(ctx, sql, r.q.From, r.q.To)
	if err != nil {
		return fmt.Errorf("source %s: %w", r.q.Table, err)
	}
	defer rows.Close()
	nNum, nText := len(need.Numeric), len(need.Text)
	b := &fit.Block{Numeric: map[string][]float64{}, Text: map[string][]string{}}
	num := make([][]float64, nNum)
	txt := make([][]string, nText)
	for i := range num {
		num[i] = make([]float64, 0, r.q.BlockRows)
	}
	for i := range txt {
		txt[i] = make([]string, 0, r.q.BlockRows)
	}
	f8 := make([]pgtype.Float8, nNum)
	tx := make([]pgtype.Text, nText)
	dest := make([]any, 0, nNum+nText)
	for i := range f8 {
		dest = append(dest, &f8[i])
	}
	for i := range tx {
		dest = append(dest, &tx[i])
	}
	var ordinal int64
	flush := func() error {
		if len(b.Line) == 0 {
			return nil
		}
		b.Rows = len(b.Line)
		for i, c := range need.Numeric {
			b.Numeric[c] = num[i]
		}
		for i, c := range need.Text {
			b.Text[c] = txt[i]
		}
		keep(b)
		if err := fn(b); err != nil {
			return err
		}
		for i := range num {
			num[i] = num[i][:0]
		}
		for i := range txt {
			txt[i] = txt[i][:0]
		}
		b.Line = b.Line[:0]
		return ctx.Err()
	}
	for rows.Next() {
		if len(dest) > 0 {
			if err := rows.Scan(dest...); err != nil {
				return fmt.Errorf("source %s: row %d: %w", r.q.Table, ordinal+1, err)
			}
		}
		ordinal++
		for i := range f8 {
			v := math.NaN()
			if f8[i].Valid {
				v = f8[i].Float64
			}
			num[i] = append(num[i], v)
		}
		for i := range tx {
			s := ""
			if tx[i].Valid {
				s = tx[i].String
			}
			txt[i] = append(txt[i], s)
		}
		b.Line = append(b.Line, ordinal)
		if len(b.Line) == r.q.BlockRows {
			if err := flush(); err != nil {
				return err
			}
		}
	}
	if err := rows.Err(); err != nil {
		return fmt.Errorf("source %s: %w", r.q.Table, err)
	}
	if err := flush(); err != nil {
		return err
	}
	if caching {
		r.cache, r.cacheNeed = cache, need
		if r.cache == nil {
			r.cache = []*fit.Block{} // an empty window, cached
		}
	}
	return nil
}

// covers reports whether the columns of have include all of want's.
func covers(have, want fit.Need) bool {
	return subset(want.Numeric, have.Numeric) && subset(want.Text, have.Text)
}

func subset(want, have []string) bool {
	for _, w := range want {
		found := false
		for _, h := range have {
			if h == w {
				found = true
				break
			}
		}
		if !found {
			return false
		}
	}
	return true
}
