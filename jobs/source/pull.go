package source

// This file holds the reading side: Rows, a fit.Source that streams one
// time window of a source table inside one read-only snapshot.

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
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
	// Prefetch, when it names columns, reads them at Open: a window of at
	// most CacheRows rows is read in one unordered query, sorted here
	// (into Scan's order) and kept, so the database does no sort and a
	// fit never waits on it; Newest then comes from those rows. A larger
	// window is found out after CacheRows + 1 rows, dropped, and left to
	// Scan to stream in order.
	Prefetch fit.Need
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
	// The snapshot and its statement timeout in one round trip.
	tx, err := conn.BeginTx(ctx, pgx.TxOptions{BeginQuery: fmt.Sprintf(
		"BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY; SET LOCAL statement_timeout = %d", q.StatementTimeout.Milliseconds())})
	if err != nil {
		conn.Release()
		return nil, fmt.Errorf("source %s: begin read-only transaction: %w", q.Table, err)
	}
	r := &Rows{q: q, table: table, tx: tx, conn: conn}
	fail := func(err error) (*Rows, error) {
		r.Close()
		return nil, err
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
	if len(q.Prefetch.Numeric)+len(q.Prefetch.Text) > 0 && q.CacheRows > 0 {
		ok, err := r.prefetch(ctx, q.Prefetch)
		if err != nil {
			return fail(err)
		}
		if ok {
			return r, nil
		}
	}
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

// Scan streams the window's rows in time order, ties in the order of the
// other columns read (numbers ascending with NaN and NULL last, then text
// byte by byte), so that every pass, cached or streamed, sees the same
// rows in the same order. Numeric columns are cast to double precision
// (NULL → NaN, which the engine drops and counts); text columns to text
// (NULL → ""); the time column, when asked for as a number, is seconds
// since 1970.
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
		cache = append(cache, copyBlock(b))
	}
	cols := r.readColumns(need)
	sql := "SELECT " + strings.Join(cols.sel, ", ") + " FROM " + r.table + " WHERE " + r.predicate() +
		" ORDER BY " + strings.Join(cols.order, ", ")
	b := &fit.Block{Numeric: map[string][]float64{}, Text: map[string][]string{}}
	var ordinal int64
	err := r.read(ctx, sql, need, 0, func(n int, num [][]float64, txt [][]string) error {
		b.Rows, b.Line = n, b.Line[:0]
		for range n {
			ordinal++
			b.Line = append(b.Line, ordinal)
		}
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
		return ctx.Err()
	})
	if err != nil {
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

// prefetch reads need's columns (and the time column) for the whole window
// in one unordered query, and, when the window has at most CacheRows rows,
// sorts them into Scan's order, keeps them as the cache and sets Newest
// from them. It reports false, keeping nothing, for a larger window.
func (r *Rows) prefetch(ctx context.Context, need fit.Need) (bool, error) {
	if !slices.Contains(need.Numeric, r.q.Time) {
		need.Numeric = append(slices.Clip(need.Numeric), r.q.Time)
	}
	cols := r.readColumns(need)
	limit := r.q.CacheRows + 1
	sql := "SELECT " + strings.Join(cols.sel, ", ") + " FROM " + r.table + " WHERE " + r.predicate() +
		" LIMIT " + strconv.Itoa(limit)
	var num [][]float64
	var txt [][]string
	n := 0
	err := r.read(ctx, sql, need, limit, func(rows int, nu [][]float64, tx [][]string) error {
		// One call with every row: read collects them for a prefetch.
		n, num, txt = rows, nu, tx
		return nil
	})
	if err != nil {
		return false, err
	}
	if n > r.q.CacheRows {
		return false, nil
	}
	timeAt := slices.Index(need.Numeric, r.q.Time)
	perm := sortedOrder(n, num, txt, timeAt)
	if n > 0 {
		r.Newest = epochTime(num[timeAt][perm[n-1]])
	}
	r.cache, r.cacheNeed = []*fit.Block{}, need
	for start := 0; start < n; start += r.q.BlockRows {
		end := min(start+r.q.BlockRows, n)
		b := &fit.Block{Rows: end - start, Line: make([]int64, end-start),
			Numeric: make(map[string][]float64, len(need.Numeric)), Text: make(map[string][]string, len(need.Text))}
		for i := range b.Line {
			b.Line[i] = int64(start + i + 1)
		}
		for j, c := range need.Numeric {
			col := make([]float64, end-start)
			for i, p := range perm[start:end] {
				col[i] = num[j][p]
			}
			b.Numeric[c] = col
		}
		for j, c := range need.Text {
			col := make([]string, end-start)
			for i, p := range perm[start:end] {
				col[i] = txt[j][p]
			}
			b.Text[c] = col
		}
		r.cache = append(r.cache, b)
	}
	return true, nil
}

// sortedOrder returns the permutation that puts the rows in Scan's order:
// by the time column (numeric column timeAt), then by the other numeric
// columns (NaN and NULL last, tied), then by the text columns byte by byte
// (NULL as "") — the order of the ORDER BY readColumns writes.
func sortedOrder(n int, num [][]float64, txt [][]string, timeAt int) []int32 {
	perm := make([]int32, n)
	for i := range perm {
		perm[i] = int32(i)
	}
	slices.SortStableFunc(perm, func(a, b int32) int {
		if c := cmpNaNLast(num[timeAt][a], num[timeAt][b]); c != 0 {
			return c
		}
		for j := range num {
			if j == timeAt {
				continue
			}
			if c := cmpNaNLast(num[j][a], num[j][b]); c != 0 {
				return c
			}
		}
		for j := range txt {
			if c := strings.Compare(txt[j][a], txt[j][b]); c != 0 {
				return c
			}
		}
		return 0
	})
	return perm
}

// cmpNaNLast orders numbers ascending with NaN after every number, as
// PostgreSQL orders double precision (Scan's ORDER BY reads NULL as NaN).
func cmpNaNLast(x, y float64) int {
	switch xn, yn := math.IsNaN(x), math.IsNaN(y); {
	case xn && yn:
		return 0
	case xn:
		return 1
	case yn:
		return -1
	}
	return cmp.Compare(x, y)
}

// epochTime converts seconds since 1970, as date_part delivers them, back
// to a time to the microsecond (PostgreSQL's resolution).
func epochTime(s float64) time.Time {
	sec := math.Floor(s)
	us := math.Round((s - sec) * 1e6)
	return time.Unix(int64(sec), int64(us)*1000).UTC()
}

// selection is the SQL for reading a need: the select list (numeric
// columns, then text) and the ORDER BY that puts the rows in Scan's order.
type selection struct{ sel, order []string }

func (r *Rows) readColumns(need fit.Need) selection {
	var s selection
	timeOrder := pgx.Identifier{r.q.Time}.Sanitize()
	var rest []string
	for _, c := range need.Numeric {
		id := pgx.Identifier{c}.Sanitize()
		if c == r.q.Time {
			// double precision, without extract's numeric detour; a
			// timestamp or date is placed in the session's time zone, as
			// the window's bounds are.
			s.sel = append(s.sel, "date_part('epoch', "+id+"::timestamptz)")
		} else {
			s.sel = append(s.sel, id+"::float8")
			// NULL and NaN tie, as they do once read (both NaN).
			rest = append(rest, "coalesce("+id+"::float8, 'NaN')")
		}
	}
	for _, c := range need.Text {
		id := pgx.Identifier{c}.Sanitize()
		s.sel = append(s.sel, id+"::text")
		rest = append(rest, "coalesce("+id+`::text, '') COLLATE "C"`)
	}
	if len(s.sel) == 0 {
		s.sel = []string{"1"}
	}
	s.order = append([]string{timeOrder}, rest...)
	return s
}

// read runs sql (which selects need's numeric columns as float8, then its
// text columns as text) and hands fn the values of each block of BlockRows
// rows (the slices are reused once fn returns). With limit > 0 (a
// prefetch) it reads at most limit rows and hands them all to fn at once,
// in slices of their own.
func (r *Rows) read(ctx context.Context, sql string, need fit.Need, limit int, fn func(rows int, num [][]float64, txt [][]string) error) error {
	rows, err := r.tx.Query(ctx, sql, r.q.From, r.q.To)
	if err != nil {
		return fmt.Errorf("source %s: %w", r.q.Table, err)
	}
	defer rows.Close()
	nNum, nText := len(need.Numeric), len(need.Text)
	block := r.q.BlockRows
	if limit > 0 {
		block = limit
	}
	num := make([][]float64, nNum)
	txt := make([][]string, nText)
	for i := range num {
		num[i] = make([]float64, 0, min(block, 4096))
	}
	for i := range txt {
		txt[i] = make([]string, 0, min(block, 4096))
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
	n, inBlock := 0, 0
	for rows.Next() {
		if len(dest) > 0 {
			if err := rows.Scan(dest...); err != nil {
				return fmt.Errorf("source %s: row %d: %w", r.q.Table, n+1, err)
			}
		}
		n++
		inBlock++
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
		if limit <= 0 && inBlock == block {
			if err := fn(inBlock, num, txt); err != nil {
				return err
			}
			inBlock = 0
			for i := range num {
				num[i] = num[i][:0]
			}
			for i := range txt {
				txt[i] = txt[i][:0]
			}
		}
	}
	if err := rows.Err(); err != nil {
		return fmt.Errorf("source %s: %w", r.q.Table, err)
	}
	if inBlock > 0 || limit > 0 {
		return fn(inBlock, num, txt)
	}
	return nil
}

// copyBlock copies a block whose slices are about to be reused.
func copyBlock(b *fit.Block) *fit.Block {
	c := &fit.Block{Rows: b.Rows, Line: slices.Clone(b.Line),
		Numeric: make(map[string][]float64, len(b.Numeric)), Text: make(map[string][]string, len(b.Text))}
	for k, v := range b.Numeric {
		c.Numeric[k] = slices.Clone(v)
	}
	for k, v := range b.Text {
		c.Text[k] = slices.Clone(v)
	}
	return c
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
