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
	// most CacheRows rows is read in one unordered query, sorted here by
	// time and kept, so the database does no sort and a fit never waits
	// on it; Newest then comes from those rows. A larger window is found
	// out after CacheRows + 1 rows, dropped, and left to Scan to stream in
	// order.
	Prefetch fit.Need
	// Columns, when set, are the table's columns in table order as the
	// caller last described them (see Catalog): Open then takes them for
	// Rows.Columns instead of asking the server. A column since dropped
	// fails the read that selects it.
	Columns []string
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
		"BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY; SET LOCAL statement_timeout = %d; "+
			// Every pass must meet rows tied in time in the same order:
			// a sort is deterministic given its input in the same order,
			// which a scan from the table's first block without parallel
			// workers gives inside one snapshot.
			"SET LOCAL synchronize_seqscans = off; SET LOCAL max_parallel_workers_per_gather = 0",
		q.StatementTimeout.Milliseconds())})
	if err != nil {
		conn.Release()
		return nil, fmt.Errorf("source %s: begin read-only transaction: %w", q.Table, err)
	}
	r := &Rows{q: q, table: table, tx: tx, conn: conn}
	opened := false
	defer func() {
		if !opened {
			r.Close() // an error, or a panic on its way up
		}
	}()
	// Columns, in table order (the query never selects *).
	if len(q.Columns) > 0 {
		r.columns = slices.Clone(q.Columns)
	} else {
		rs, err := tx.Query(ctx, "SELECT * FROM "+table+" LIMIT 0")
		if err != nil {
			return nil, fmt.Errorf("source %s: %w", q.Table, err)
		}
		for _, fd := range rs.FieldDescriptions() {
			r.columns = append(r.columns, fd.Name)
		}
		rs.Close()
	}
	if len(q.Prefetch.Numeric)+len(q.Prefetch.Text) > 0 && q.CacheRows > 0 {
		ok, err := r.prefetch(ctx, q.Prefetch)
		if err != nil {
			return nil, err
		}
		if ok {
			opened = true
			return r, nil
		}
	}
	var newest pgtype.Timestamptz
	err = tx.QueryRow(ctx, "SELECT max("+pgx.Identifier{q.Time}.Sanitize()+")::timestamptz FROM "+table+" WHERE "+r.predicate("$1", "$2"), q.From, q.To).Scan(&newest)
	if err != nil {
		return nil, fmt.Errorf("source %s: find the window's newest row: %w", q.Table, err)
	}
	if newest.Valid {
		r.Newest = newest.Time
	}
	opened = true
	return r, nil
}

// predicate is the window condition from and to (SQL: the parameters $1
// and $2, or literals), plus the config's predicate.
func (r *Rows) predicate(from, to string) string {
	t := pgx.Identifier{r.q.Time}.Sanitize()
	p := t + " >= " + from + " AND " + t + " < " + to
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

// Scan delivers the window's rows in time order, from memory when they are
// cached and streamed from the database otherwise, so that every pass
// sees the same rows in the same order: rows tied in time come in an order
// fixed inside the snapshot (by the database when streamed; by the other
// columns' values, see sortedOrder, when prefetched). Numeric columns are
// cast to double precision (NULL → NaN, which the engine drops and
// counts); text columns to text (NULL → ""); the time column, when asked
// for as a number, is seconds since 1970.
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
	b := &fit.Block{Numeric: map[string][]float64{}, Text: map[string][]string{}}
	var ordinal int64
	err := r.copyOut(ctx, cols, "ORDER BY "+pgx.Identifier{r.q.Time}.Sanitize(), need, r.q.BlockRows, func(n int, num [][]float64, txt [][]string) error {
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
// sorts them by time, keeps them as the cache and sets Newest from them.
// It reports false, keeping nothing, for a larger window.
func (r *Rows) prefetch(ctx context.Context, need fit.Need) (bool, error) {
	if !slices.Contains(need.Numeric, r.q.Time) {
		need.Numeric = append(slices.Clip(need.Numeric), r.q.Time)
	}
	cols := r.readColumns(need)
	limit := r.q.CacheRows + 1
	var num [][]float64
	var txt [][]string
	n := 0
	err := r.copyOut(ctx, cols, "LIMIT "+strconv.Itoa(limit), need, limit, func(rows int, nu [][]float64, tx [][]string) error {
		// One call with every row (the block is the limit): the column
		// slices are not reused, but the lists of them are.
		n, num, txt = rows, slices.Clone(nu), slices.Clone(tx)
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
	// Columns in time order (as read, when they already are), then cut
	// into blocks that share them.
	if !slices.IsSorted(perm) {
		for j := range num {
			num[j] = gather(num[j], perm)
		}
		for j := range txt {
			txt[j] = gather(txt[j], perm)
		}
	}
	lines := make([]int64, n)
	for i := range lines {
		lines[i] = int64(i + 1)
	}
	r.cache, r.cacheNeed = []*fit.Block{}, need
	for start := 0; start < n; start += r.q.BlockRows {
		end := min(start+r.q.BlockRows, n)
		b := &fit.Block{Rows: end - start, Line: lines[start:end:end],
			Numeric: make(map[string][]float64, len(need.Numeric)), Text: make(map[string][]string, len(need.Text))}
		for j, c := range need.Numeric {
			b.Numeric[c] = num[j][start:end:end]
		}
		for j, c := range need.Text {
			b.Text[c] = txt[j][start:end:end]
		}
		r.cache = append(r.cache, b)
	}
	return true, nil
}

// gather returns v's elements in the order perm gives.
func gather[T any](v []T, perm []int32) []T {
	out := make([]T, len(perm))
	for i, p := range perm {
		out[i] = v[p]
	}
	return out
}

// sortedOrder returns the permutation that puts prefetched rows in time
// order (numeric column timeAt), rows tied in time by the other numeric
// columns (NaN, which NULL becomes, last) and then by the text columns
// byte by byte: an order that depends on the rows alone, not on where
// they lie in the table.
func sortedOrder(n int, num [][]float64, txt [][]string, timeAt int) []int32 {
	perm := make([]int32, n)
	if n == 0 {
		return perm
	}
	for i := range perm {
		perm[i] = int32(i)
	}
	// Rows usually arrive in time order or its reverse (the table's
	// physical order): with no ties in time that is the whole sort.
	at := num[timeAt]
	rising, falling := true, true
	for i := 1; i < n && (rising || falling); i++ {
		rising = rising && at[i-1] < at[i]
		falling = falling && at[i-1] > at[i]
	}
	switch {
	case rising:
		return perm
	case falling:
		slices.Reverse(perm)
		return perm
	}
	// Every column takes part, so only rows equal in all of them tie, and
	// their order does not matter.
	slices.SortFunc(perm, func(a, b int32) int {
		if c := cmpNaNLast(at[a], at[b]); c != 0 {
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

// cmpNaNLast orders numbers ascending with NaN after every number.
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

// selection is the select list for reading a need: numeric columns, then
// text.
type selection struct{ sel []string }

func (r *Rows) readColumns(need fit.Need) selection {
	var s selection
	for _, c := range need.Numeric {
		id := pgx.Identifier{c}.Sanitize()
		if c == r.q.Time {
			// double precision, without extract's numeric detour; a
			// timestamp or date is placed in the session's time zone, as
			// the window's bounds are.
			s.sel = append(s.sel, "date_part('epoch', "+id+"::timestamptz)")
		} else {
			s.sel = append(s.sel, id+"::float8")
		}
	}
	for _, c := range need.Text {
		s.sel = append(s.sel, pgx.Identifier{c}.Sanitize()+"::text")
	}
	return s
}

// copyOut runs SELECT cols FROM the window [tail] as a binary COPY and
// hands fn the values of each block of block rows (see columnReader). The
// window's bounds are written into the SQL as literals (COPY takes no
// parameters); they are times curvewatch formats itself.
func (r *Rows) copyOut(ctx context.Context, cols selection, tail string, need fit.Need, block int, fn func(rows int, num [][]float64, txt [][]string) error) error {
	sql := "COPY (SELECT " + strings.Join(cols.sel, ", ") + " FROM " + r.table +
		" WHERE " + r.predicate(timeLiteral(r.q.From), timeLiteral(r.q.To)) + "\n" + tail + ") TO STDOUT (FORMAT binary)"
	cr := newColumnReader(len(need.Numeric), len(need.Text), block, fn)
	if _, err := r.tx.Conn().PgConn().CopyTo(ctx, cr, sql); err != nil {
		return fmt.Errorf("source %s: %w", r.q.Table, err)
	}
	if err := cr.Close(); err != nil {
		if cr.stop != nil {
			return err // fn's own error, as it gave it
		}
		return fmt.Errorf("source %s: %w", r.q.Table, err)
	}
	return nil
}

// timeLiteral writes t as a timestamptz literal, microseconds included,
// within PostgreSQL's range of years 1 to 9999 (a window bound outside it
// selects the same rows as the bound at its edge).
func timeLiteral(t time.Time) string {
	lo, hi := time.Date(1, 1, 1, 0, 0, 0, 0, time.UTC), time.Date(9999, 12, 31, 23, 59, 59, 999999000, time.UTC)
	t = t.UTC()
	if t.Before(lo) {
		t = lo
	}
	if t.After(hi) {
		t = hi
	}
	return "'" + t.Format("2006-01-02T15:04:05.999999Z") + "'::timestamptz"
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
