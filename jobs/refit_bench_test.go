package jobs_test

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs"
	"github.com/curvewatch/curvewatch/jobs/source"
)

// BenchmarkRefitSmall times one refit of a small model (10,000 rows, three
// curves) — pull, fit, comparison with the baseline and the history
// writes — beside the pure fit of the same rows held in memory
// (BenchmarkRefitSmall/pure), both on one goroutine as in a daemon running
// a refit per core: their ratio is the per-refit overhead the fleet
// benchmark (bench/fleet.sh) pays.
func BenchmarkRefitSmall(b *testing.B) {
	ctx := context.Background()
	e := newEnvTB(b)
	if _, err := e.pool.Exec(ctx, `CREATE TABLE small (observed_at timestamptz NOT NULL, x1 float8, x2 float8, x3 float8, y float8)`); err != nil {
		b.Fatal(err)
	}
	const n = 10_000
	rng := rand.New(rand.NewPCG(1, 2))
	rows := make([][]any, n)
	tbl := &fit.Table{Numeric: map[string][]float64{"x1": make([]float64, n), "x2": make([]float64, n), "x3": make([]float64, n), "y": make([]float64, n), "observed_at": make([]float64, n)}}
	for i := range rows {
		x1, x2, x3 := rng.Float64(), rng.Float64(), rng.Float64()
		y := math.Sin(6*x1) + x2*x2 + 0.5*x3 + 0.3*rng.NormFloat64()
		at := e.t0.Add(time.Duration(i) * time.Minute)
		rows[i] = []any{at, x1, x2, x3, y}
		tbl.Numeric["x1"][i], tbl.Numeric["x2"][i], tbl.Numeric["x3"][i], tbl.Numeric["y"][i] = x1, x2, x3, y
		tbl.Numeric["observed_at"][i] = float64(at.Unix())
	}
	if _, err := e.pool.CopyFrom(ctx, pgx.Identifier{"small"}, []string{"observed_at", "x1", "x2", "x3", "y"}, pgx.CopyFromRows(rows)); err != nil {
		b.Fatal(err)
	}
	spec, err := fit.ParseSpec([]byte("name: small\nresponse: y\nterms:\n  - curve: x1\n  - curve: x2\n  - curve: x3\n"))
	if err != nil {
		b.Fatal(err)
	}
	m := jobs.Model{Name: "small", Spec: spec, Table: source.Table{Name: "small"}, Time: "observed_at",
		Window: 30 * 24 * time.Hour, Against: "baseline", Tolerance: fit.DefaultTolerance()}
	end := e.t0.Add(n * time.Minute)
	b.Run("pure", func(b *testing.B) {
		for b.Loop() {
			if _, err := fit.Fit(ctx, spec, tbl, fit.Options{TimeColumn: "observed_at", Workers: 1}); err != nil {
				b.Fatal(err)
			}
		}
	})
	b.Run("refit", func(b *testing.B) {
		r := &jobs.Runner{Source: e.pool, Store: e.store, FitWorkers: 1}
		slot := end
		for b.Loop() {
			slot = slot.Add(time.Second)
			m.Window = slot.Sub(e.t0)
			res, err := r.Run(ctx, m, slot)
			if err != nil || res.Status != jobs.StatusSucceeded {
				b.Fatalf("%+v %v", res, err)
			}
		}
	})
}
