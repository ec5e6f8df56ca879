package jobs_test

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/internal/pgtest"
	"github.com/curvewatch/curvewatch/jobs"
	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/curvewatch/curvewatch/jobs/source"
	"github.com/curvewatch/curvewatch/migrations"
)

// env is a migrated schema holding both the daemon's tables and an
// invented source table of hourly sonde readings.
type env struct {
	pool  *pgxpool.Pool
	store *history.Store
	rng   *rand.Rand
	t0    time.Time
}

func newEnv(t *testing.T) *env { return newEnvTB(t) }

func newEnvTB(t testing.TB) *env {
	t.Helper()
	ctx := context.Background()
	url, schema := pgtest.Schema(t)
	if err := migrations.Up(ctx, url, schema); err != nil {
		t.Fatal(err)
	}
	store, err := history.Open(ctx, url, schema)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(store.Close)
	pool, err := pgxpool.New(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(pool.Close)
	if _, err := pool.Exec(ctx, `CREATE TABLE readings (observed_at timestamptz NOT NULL, site text NOT NULL, water_temp double precision, dissolved_oxygen double precision)`); err != nil {
		t.Fatal(err)
	}
	return &env{pool: pool, store: store, rng: rand.New(rand.NewPCG(5, 5)), t0: time.Date(2026, 5, 1, 0, 0, 0, 0, time.UTC)}
}

// insert adds hourly readings for hours [from, to); amp scales the
// temperature response (a fouling sonde changes it).
func (e *env) insert(t *testing.T, from, to int, amp float64) {
	t.Helper()
	for h := from; h < to; h++ {
		temp := 4 + 20*e.rng.Float64()
		do := 12 - amp*0.25*temp + 0.8*math.Sin(temp/3) + 0.3*e.rng.NormFloat64()
		_, err := e.pool.Exec(context.Background(), `INSERT INTO readings VALUES ($1, $2, $3, $4)`,
			e.t0.Add(time.Duration(h)*time.Hour), []string{"S05", "S07"}[h%2], temp, do)
		if err != nil {
			t.Fatal(err)
		}
	}
}

func sondeModel(t *testing.T) jobs.Model {
	spec, err := fit.ParseSpec([]byte("name: sonde-oxygen\nresponse: dissolved_oxygen\nterms:\n  - curve: water_temp\n    size: 8\n  - factor: site\n"))
	if err != nil {
		t.Fatal(err)
	}
	tol := fit.DefaultTolerance()
	tol.PracticalShift = 0.3
	return jobs.Model{Name: "sonde-oxygen", Spec: spec, Table: source.Table{Name: "readings"}, Time: "observed_at",
		Window: 500 * time.Hour, Against: "baseline", Tolerance: tol}
}

// End to end: a first run records a fit, its curve points and the baseline;
// a later run on new rows with a changed relationship is compared with the
// baseline and breaches; a repeat of a done slot writes nothing.
func TestRefitEndToEnd(t *testing.T) {
	ctx := context.Background()
	e := newEnv(t)
	e.insert(t, 0, 500, 1)
	r := &jobs.Runner{Source: e.pool, Store: e.store}
	m := sondeModel(t)
	slot1 := e.t0.Add(500 * time.Hour)
	res, err := r.Run(ctx, m, slot1)
	if err != nil || res.Status != jobs.StatusSucceeded {
		t.Fatalf("first run: %+v, %v", res, err)
	}
	if id, ok, _ := e.store.Baseline(ctx, m.Name); !ok || id != res.FitID {
		t.Errorf("baseline %d (%v), want the first fit %d", id, ok, res.FitID)
	}
	var points int
	if err := e.pool.QueryRow(ctx, `SELECT count(*) FROM fit_curve_points WHERE fit_id = $1`, res.FitID).Scan(&points); err != nil || points != 200 {
		t.Errorf("curve points %d (%v), want 200", points, err)
	}
	if wm, _, err := e.store.Watermark(ctx, m.Name); err != nil || !wm.Equal(e.t0.Add(499*time.Hour)) {
		t.Errorf("watermark %v (%v), want hour 499", wm, err)
	}
	// New rows with a fouled sonde (the temperature response halves).
	e.insert(t, 500, 1000, 0.3)
	res2, err := r.Run(ctx, m, e.t0.Add(1000*time.Hour))
	if err != nil || res2.Status != jobs.StatusSucceeded {
		t.Fatalf("second run: %+v, %v", res2, err)
	}
	if res2.Report == nil || !res2.Report.Breach || res2.ReferenceID != res.FitID {
		t.Fatalf("second run compared with %d: report %+v (note %q)", res2.ReferenceID, res2.Report, res2.CompareNote)
	}
	// The same slot again: nothing new is written.
	res3, err := r.Run(ctx, m, e.t0.Add(1000*time.Hour))
	if err != nil || res3.Status != jobs.StatusSlotDone || res3.FitID != res2.FitID {
		t.Errorf("repeat of a done slot: %+v, %v", res3, err)
	}
}

// A model whose spec names a missing column fails alone, with its reason
// recorded; a panic-free failure leaves the baseline untouched.
func TestRefitFailureIsRecorded(t *testing.T) {
	ctx := context.Background()
	e := newEnv(t)
	e.insert(t, 0, 200, 1)
	m := sondeModel(t)
	m.Spec.Terms[0].Columns = []string{"conductivity"}
	r := &jobs.Runner{Source: e.pool, Store: e.store}
	res, err := r.Run(ctx, m, e.t0.Add(200*time.Hour))
	if err != nil || res.Status != jobs.StatusFailed || res.FitID == 0 {
		t.Fatalf("%+v, %v", res, err)
	}
	got, err := e.store.Fit(ctx, res.FitID)
	if err != nil || got.Reason == "" || got.Status != history.StatusFailed {
		t.Errorf("stored failure %+v, %v", got, err)
	}
	if _, ok, _ := e.store.Baseline(ctx, m.Name); ok {
		t.Error("a failed refit pinned a baseline")
	}
}
