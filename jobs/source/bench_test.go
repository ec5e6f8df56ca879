package source_test

import (
	"context"
	"os"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs/source"
)

// BenchmarkPull streams a window of rows into the engine's block
// interface and reports rows per second. bench/pull.sh compares it with
// psql's binary \copy of the same columns. The table is
// CURVEWATCH_BENCH_TABLE in the database CURVEWATCH_BENCH_DATABASE_URL
// (bench/pull.sh creates both); the benchmark is skipped without them.
func BenchmarkPull(b *testing.B) {
	url, table := os.Getenv("CURVEWATCH_BENCH_DATABASE_URL"), os.Getenv("CURVEWATCH_BENCH_TABLE")
	if url == "" || table == "" {
		b.Skip("set CURVEWATCH_BENCH_DATABASE_URL and CURVEWATCH_BENCH_TABLE (bench/pull.sh does)")
	}
	ctx := context.Background()
	pool, err := pgxpool.New(ctx, url)
	if err != nil {
		b.Fatal(err)
	}
	defer pool.Close()
	tbl, err := source.ParseTable(table)
	if err != nil {
		b.Fatal(err)
	}
	need := fit.Need{Numeric: []string{"water_temp", "flow", "dissolved_oxygen"}, Text: []string{"site"}}
	var rows int
	b.ResetTimer()
	for b.Loop() {
		r, err := source.Open(ctx, pool, source.Query{Table: tbl, Time: "observed_at",
			From: time.Unix(0, 0), To: time.Now().Add(time.Hour)})
		if err != nil {
			b.Fatal(err)
		}
		rows = 0
		err = r.Scan(ctx, need, func(bl *fit.Block) error { rows += bl.Rows; return nil })
		r.Close()
		if err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(rows)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
}
