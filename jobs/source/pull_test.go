package source_test

import (
	"context"
	"fmt"
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/internal/pgtest"
	"github.com/curvewatch/curvewatch/jobs/source"
)

// newPool connects to a schema of the test's own, closed when it ends.
func newPool(t *testing.T) *pgxpool.Pool {
	t.Helper()
	url, _ := pgtest.Schema(t)
	pool, err := pgxpool.New(context.Background(), url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(pool.Close)
	return pool
}

// readings creates a sonde table in the test schema with n rows an hour
// apart from t0 (invented data), some with NULLs.
func readings(t *testing.T, ctx context.Context, pool *pgxpool.Pool, n int, t0 time.Time) {
	t.Helper()
	_, err := pool.Exec(ctx, `CREATE TABLE sonde_readings (
		observed_at timestamptz NOT NULL, site text, water_temp real, flow numeric, dissolved_oxygen double precision, alarms integer)`)
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < n; i++ {
		temp := 5 + 15*math.Sin(float64(i)/50)
		var flow any = 10 + float64(i%7)
		if i%97 == 3 {
			flow = nil
		}
		site := []string{"S05", "S07"}[i%2]
		_, err := pool.Exec(ctx, `INSERT INTO sonde_readings VALUES ($1, $2, $3, $4, $5, $6)`,
			t0.Add(time.Duration(i)*time.Hour), site, temp, flow, 12-0.2*temp+0.01*float64(i%7), i%3)
		if err != nil {
			t.Fatal(err)
		}
	}
}

func TestRowsStreamAWindowInOneSnapshot(t *testing.T) {
	ctx := context.Background()
	pool := newPool(t)
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	readings(t, ctx, pool, 500, t0)

	rows, err := source.Open(ctx, pool, source.Query{Table: source.Table{Name: "sonde_readings"}, Time: "observed_at", Where: "site = 'S05'",
		From: t0.Add(100 * time.Hour), To: t0.Add(400 * time.Hour), BlockRows: 64})
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	if !rows.Newest.Equal(t0.Add(398 * time.Hour)) {
		t.Fatalf("newest %v; want hour 398", rows.Newest)
	}
	// A row committed after the snapshot began is not seen by later passes.
	if _, err := pool.Exec(ctx, `INSERT INTO sonde_readings VALUES ($1, 'S05', 9, 11, 10, 0)`, t0.Add(200*time.Hour+time.Minute)); err != nil {
		t.Fatal(err)
	}
	need := fit.Need{Numeric: []string{"observed_at", "water_temp", "flow", "dissolved_oxygen", "alarms"}, Text: []string{"site"}}
	scan := func() (n int, nulls int, first float64) {
		first = math.NaN()
		err := rows.Scan(ctx, need, func(b *fit.Block) error {
			for r := 0; r < b.Rows; r++ {
				if math.IsNaN(first) {
					first = b.Numeric["observed_at"][r]
				}
				if math.IsNaN(b.Numeric["flow"][r]) {
					nulls++
				}
				if b.Text["site"][r] != "S05" {
					t.Errorf("row from site %q", b.Text["site"][r])
				}
			}
			n += b.Rows
			return nil
		})
		if err != nil {
			t.Fatal(err)
		}
		return n, nulls, first
	}
	n1, nulls1, first := scan()
	n2, nulls2, _ := scan()
	if n1 != 150 || n2 != 150 || nulls1 != nulls2 {
		t.Errorf("passes saw %d and %d rows (NULL flows %d, %d); want 150 both times", n1, n2, nulls1, nulls2)
	}
	if want := float64(t0.Add(100 * time.Hour).Unix()); first != want {
		t.Errorf("first time %v, want %v (seconds since 1970)", first, want)
	}
	// The rows feed a fit directly.
	spec, err := fit.ParseSpec([]byte("name: s05\nresponse: dissolved_oxygen\nterms:\n  - curve: water_temp\n    size: 6\n  - linear: flow\n"))
	if err != nil {
		t.Fatal(err)
	}
	doc, err := fit.Fit(ctx, spec, rows, fit.Options{TimeColumn: "observed_at"})
	if err != nil {
		t.Fatal(err)
	}
	if doc.Data.RowsRead != 150 || doc.Data.Dropped["flow"] == 0 || doc.Data.Window == nil {
		t.Errorf("data record %+v", doc.Data)
	}
}

// A window that fits in CacheRows is read from the database once: later
// passes (and passes over fewer columns) are served from memory, row for
// row the same. A window larger than the cache, or a cache turned off,
// streams every pass.
func TestRowsCacheSmallWindows(t *testing.T) {
	ctx := context.Background()
	pool := newPool(t)
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	readings(t, ctx, pool, 300, t0)
	need := fit.Need{Numeric: []string{"observed_at", "water_temp", "flow"}, Text: []string{"site"}}
	read := func(rows *source.Rows, need fit.Need) []string {
		var out []string
		err := rows.Scan(ctx, need, func(b *fit.Block) error {
			for r := 0; r < b.Rows; r++ {
				line := fmt.Sprint(b.Line[r])
				for _, c := range need.Numeric {
					line += fmt.Sprintf(" %v", b.Numeric[c][r])
				}
				for _, c := range need.Text {
					line += " " + b.Text[c][r]
				}
				out = append(out, line)
			}
			return nil
		})
		if err != nil {
			t.Fatal(err)
		}
		return out
	}
	tests := []struct {
		name       string
		cacheRows  int
		wantCached bool
	}{
		{"default cache", 0, true},
		{"window larger than the cache", 100, false},
		{"cache off", -1, false},
	}
	var want []string
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			rows, err := source.Open(ctx, pool, source.Query{Table: source.Table{Name: "sonde_readings"}, Time: "observed_at",
				From: t0, To: t0.Add(300 * time.Hour), BlockRows: 64, CacheRows: tc.cacheRows})
			if err != nil {
				t.Fatal(err)
			}
			defer rows.Close()
			first := read(rows, need)
			if got := rows.CachedBlocks() >= 0; got != tc.wantCached {
				t.Fatalf("cached %v, want %v", got, tc.wantCached)
			}
			if len(first) != 300 {
				t.Fatalf("%d rows, want 300", len(first))
			}
			if want == nil {
				want = first
			}
			for pass, got := range [][]string{first, read(rows, need)} {
				if fmt.Sprint(got) != fmt.Sprint(want) {
					t.Errorf("pass %d differs from an uncached read", pass+1)
				}
			}
			// Fewer columns: from the cache too, with the same values.
			fewer := read(rows, fit.Need{Numeric: []string{"water_temp"}})
			w, f := strings.Fields(want[7]), strings.Fields(fewer[7])
			if len(fewer) != 300 || f[0] != w[0] || f[1] != w[2] {
				t.Errorf("a pass over one column: %q against %q", fewer[7], want[7])
			}
		})
	}
}

// A prefetched window (one unordered query, sorted here) holds the same
// rows as a streamed one (sorted by the database), in time order, ties in
// time included; each path gives the same order on every pass; and Newest
// is the max() query's. A window larger than the cache is left to stream.
func TestPrefetchMatchesStreaming(t *testing.T) {
	ctx := context.Background()
	pool := newPool(t)
	// Every kind of time column, rows inserted out of time order, ties in
	// time, NULLs and NaN, and levels whose byte order differs from a
	// natural-language collation.
	_, err := pool.Exec(ctx, `CREATE TABLE ties (at_tz timestamptz, at_local timestamp, on_day date, level double precision, site text);
		INSERT INTO ties
		SELECT '2026-03-01 00:00:00.123456+00'::timestamptz + ((i * 7919) % 97) * interval '1 hour',
		       '2026-03-01 00:00:00.5'::timestamp + ((i * 7919) % 97) * interval '1 hour',
		       '2026-03-01'::date + ((i * 7919) % 97) / 24,
		       CASE WHEN i % 31 = 0 THEN NULL WHEN i % 37 = 0 THEN 'NaN'::float8 ELSE (i % 5)::float8 END,
		       (ARRAY['b', 'B', 'a', 'ä', NULL])[1 + i % 5]
		FROM generate_series(1, 600) AS i`)
	if err != nil {
		t.Fatal(err)
	}
	from, to := time.Date(2026, 2, 1, 0, 0, 0, 0, time.UTC), time.Date(2026, 4, 1, 0, 0, 0, 0, time.UTC)
	for _, timeCol := range []string{"at_tz", "at_local", "on_day"} {
		need := fit.Need{Numeric: []string{"level", timeCol}, Text: []string{"site"}}
		// read returns the rows as lines (time first) and the lines' line
		// numbers in order.
		read := func(t *testing.T, rows *source.Rows) []string {
			var out []string
			err := rows.Scan(ctx, need, func(b *fit.Block) error {
				for r := 0; r < b.Rows; r++ {
					if b.Line[r] != int64(len(out)+1) {
						t.Fatalf("row %d has line %d", len(out)+1, b.Line[r])
					}
					out = append(out, fmt.Sprintf("%016.6f %v %q", b.Numeric[timeCol][r], b.Numeric["level"][r], b.Text["site"][r]))
				}
				return nil
			})
			if err != nil {
				t.Fatal(err)
			}
			return out
		}
		open := func(t *testing.T, prefetch fit.Need, cacheRows int) *source.Rows {
			rows, err := source.Open(ctx, pool, source.Query{Table: source.Table{Name: "ties"}, Time: timeCol,
				From: from, To: to, BlockRows: 50, CacheRows: cacheRows, Prefetch: prefetch})
			if err != nil {
				t.Fatal(err)
			}
			return rows
		}
		t.Run(timeCol, func(t *testing.T) {
			streamed := open(t, fit.Need{}, -1)
			defer streamed.Close()
			want := read(t, streamed)
			if again := read(t, streamed); strings.Join(again, "\n") != strings.Join(want, "\n") {
				t.Fatal("two streamed passes differ in order")
			}
			if len(want) != 600 || !timesRise(want) {
				t.Fatalf("streamed %d rows, not in time order", len(want))
			}
			wantSet := slices.Sorted(slices.Values(want))
			for _, tc := range []struct {
				name      string
				prefetch  fit.Need
				cacheRows int
				cached    bool
			}{
				// The time column is added to a prefetch that lacks it.
				{"prefetch of every column", fit.Need{Numeric: []string{"level"}, Text: []string{"site"}}, 0, true},
				// The scan needs site too: it streams.
				{"prefetch of fewer columns", fit.Need{Numeric: []string{"level"}}, 0, true},
				{"window larger than the cache", need, 599, false},
			} {
				rows := open(t, tc.prefetch, tc.cacheRows)
				defer rows.Close()
				if got := rows.CachedBlocks() >= 0; got != tc.cached {
					t.Errorf("%s: cached after Open %v, want %v", tc.name, got, tc.cached)
				}
				if !rows.Newest.Equal(streamed.Newest) {
					t.Errorf("%s: newest %v, want %v (the max() query's)", tc.name, rows.Newest, streamed.Newest)
				}
				got := read(t, rows)
				if again := read(t, rows); strings.Join(again, "\n") != strings.Join(got, "\n") {
					t.Errorf("%s: two passes differ in order", tc.name)
				}
				if !timesRise(got) {
					t.Errorf("%s: rows not in time order", tc.name)
				}
				if gotSet := slices.Sorted(slices.Values(got)); strings.Join(gotSet, "\n") != strings.Join(wantSet, "\n") {
					t.Errorf("%s: %d rows, not the streamed ones", tc.name, len(got))
				}
			}
		})
	}
}

// timesRise reports whether the lines' leading times never fall.
func timesRise(lines []string) bool {
	for i := 1; i < len(lines); i++ {
		if strings.Fields(lines[i])[0] < strings.Fields(lines[i-1])[0] {
			return false
		}
	}
	return true
}

// An empty window prefetches as an empty cache with no newest row; a
// table the window cannot be read from (a cast that fails) returns its
// connection to the pool.
func TestPrefetchEmptyAndFailingWindows(t *testing.T) {
	ctx := context.Background()
	pool := newPool(t)
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	readings(t, ctx, pool, 20, t0)
	rows, err := source.Open(ctx, pool, source.Query{Table: source.Table{Name: "sonde_readings"}, Time: "observed_at",
		From: t0.Add(-48 * time.Hour), To: t0, Prefetch: fit.Need{Numeric: []string{"water_temp"}, Text: []string{"site"}}})
	if err != nil {
		t.Fatal(err)
	}
	if rows.CachedBlocks() != 0 || !rows.Newest.IsZero() {
		t.Errorf("empty window: %d cached blocks, newest %v; want 0 and none", rows.CachedBlocks(), rows.Newest)
	}
	n := 0
	if err := rows.Scan(ctx, fit.Need{Numeric: []string{"water_temp"}}, func(b *fit.Block) error { n += b.Rows; return nil }); err != nil || n != 0 {
		t.Errorf("empty window scanned %d rows, %v", n, err)
	}
	rows.Close()
	// site is text: as a number its cast fails in the database.
	for range 2 * int(pool.Config().MaxConns) {
		_, err := source.Open(ctx, pool, source.Query{Table: source.Table{Name: "sonde_readings"}, Time: "observed_at",
			From: t0, To: t0.Add(48 * time.Hour), Prefetch: fit.Need{Numeric: []string{"site"}}})
		if err == nil || !strings.Contains(err.Error(), "sonde_readings") {
			t.Fatalf("a failing cast: %v, want an error naming the table", err)
		}
	}
	if got := pool.Stat().AcquiredConns(); got != 0 {
		t.Errorf("%d connections still held after failed opens", got)
	}
}

// TestOpenTakesKnownColumns checks Query.Columns: the caller's description
// stands in for asking the server, gives the same columns, and a stale one
// that names a dropped column fails the read with an error naming the
// table, holding no connection.
func TestOpenTakesKnownColumns(t *testing.T) {
	ctx := context.Background()
	pool := newPool(t)
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	readings(t, ctx, pool, 30, t0)
	q := source.Query{Table: source.Table{Name: "sonde_readings"}, Time: "observed_at",
		From: t0, To: t0.Add(48 * time.Hour), Prefetch: fit.Need{Numeric: []string{"water_temp", "flow"}}}
	asked, err := source.Open(ctx, pool, q)
	if err != nil {
		t.Fatal(err)
	}
	fromServer := asked.Columns()
	asked.Close()
	want := []string{"observed_at", "site", "water_temp", "flow", "dissolved_oxygen", "alarms"}
	if !slices.Equal(fromServer, want) {
		t.Fatalf("columns from the server %v, want %v", fromServer, want)
	}
	q.Columns = slices.Clone(want)
	known, err := source.Open(ctx, pool, q)
	if err != nil {
		t.Fatal(err)
	}
	if got := known.Columns(); !slices.Equal(got, want) {
		t.Errorf("columns from Query.Columns %v, want %v", got, want)
	}
	q.Columns[0] = "changed" // Columns is the caller's: Open keeps a copy
	if got := known.Columns(); got[0] != "observed_at" {
		t.Errorf("Rows.Columns follows the caller's slice: %v", got)
	}
	n := 0
	if err := known.Scan(ctx, fit.Need{Numeric: []string{"water_temp"}}, func(b *fit.Block) error { n += b.Rows; return nil }); err != nil || n != 30 {
		t.Errorf("scanned %d rows (%v), want 30", n, err)
	}
	known.Close()

	if _, err := pool.Exec(ctx, `ALTER TABLE sonde_readings DROP COLUMN flow`); err != nil {
		t.Fatal(err)
	}
	q.Columns = want // stale: flow is gone
	if _, err := source.Open(ctx, pool, q); err == nil || !strings.Contains(err.Error(), "sonde_readings") || !strings.Contains(err.Error(), "flow") {
		t.Errorf("a stale description naming a dropped column: %v, want an error naming the table and the column", err)
	}
	if got := pool.Stat().AcquiredConns(); got != 0 {
		t.Errorf("%d connections still held", got)
	}
}
