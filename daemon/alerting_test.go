package daemon

import (
	"context"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/daemon/config"
	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs"
	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/curvewatch/curvewatch/migrations"
)

// alertEnv runs refits by hand, through jobs.Runner with the alerter's
// hook, over windows of invented sonde readings that the test writes: a
// window is either normal or from a fouled sonde whose temperature
// response has flattened.
type alertEnv struct {
	db     *testDB
	store  *history.Store
	cfg    *config.Config
	runner *jobs.Runner
	rng    *rand.Rand
	t0     time.Time
	hours  int
}

const windowHours = 150

func newAlertEnv(t *testing.T, receivers []string, edit func(*config.Config)) *alertEnv {
	t.Helper()
	ctx := context.Background()
	db := newTestDB(t)
	if _, err := db.pool.Exec(ctx, `TRUNCATE readings`); err != nil {
		t.Fatal(err)
	}
	if err := migrations.Up(ctx, db.url, db.schema); err != nil {
		t.Fatal(err)
	}
	store, err := history.Open(ctx, db.url, db.schema)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(store.Close)
	cfg := testConfig(t, db, "@hourly")
	cfg.PublicURL = "http://dashboards.river.example"
	cfg.Models[0].Source.Window = windowHours * time.Hour
	cfg.Models[0].Watch.PracticalShift = 0.3
	cfg.Models[0].Watch.FailingRuns = 2
	if edit != nil {
		edit(cfg)
	}
	al := newAlerter(cfg, store, receivers)
	e := &alertEnv{db: db, store: store, cfg: cfg, rng: rand.New(rand.NewPCG(3, 9)),
		t0: time.Date(2026, 5, 1, 0, 0, 0, 0, time.UTC)}
	al.now = func() time.Time { return e.t0.Add(time.Duration(e.hours) * time.Hour) }
	e.runner = &jobs.Runner{Source: db.pool, Store: store, OnRecord: al.onRecord}
	return e
}

// window appends windowHours of readings (fouled: the temperature response
// flattens) and refits the model for the slot at their end.
func (e *alertEnv) window(t *testing.T, fouled bool) *jobs.Result {
	t.Helper()
	amp := 1.0
	if fouled {
		amp = 0.2
	}
	rows := make([][]any, 0, windowHours)
	for h := e.hours; h < e.hours+windowHours; h++ {
		temp := 4 + 20*e.rng.Float64()
		do := 12 - amp*0.25*temp + 0.8*math.Sin(temp/3) + 0.3*e.rng.NormFloat64()
		rows = append(rows, []any{e.t0.Add(time.Duration(h) * time.Hour), []string{"S05", "S07"}[h%2], temp, do})
	}
	if _, err := e.db.pool.CopyFrom(context.Background(), pgx.Identifier{"readings"},
		[]string{"observed_at", "site", "water_temp", "dissolved_oxygen"}, pgx.CopyFromRows(rows)); err != nil {
		t.Fatal(err)
	}
	e.hours += windowHours
	m := e.cfg.Models[0]
	res, err := e.runner.Run(context.Background(), JobModel(&m), e.t0.Add(time.Duration(e.hours)*time.Hour))
	if err != nil {
		t.Fatal(err)
	}
	return res
}

func (e *alertEnv) state(t *testing.T, term string, kind alerts.Kind) alerts.Status {
	t.Helper()
	got, err := e.store.Alerts(context.Background(), history.AlertFilter{Model: "sonde-oxygen"})
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range got {
		if s.Term == term && s.Kind == kind {
			return s
		}
	}
	return alerts.Status{}
}

// Hysteresis with confirm_runs 2: a breach on one run only stays pending
// and a clean run resolves it unannounced; two breaches in a row fire; one
// clean run resolves. Only the firing and its resolution are queued for
// the receivers, once each per receiver.
func TestAlertHysteresis(t *testing.T) {
	t.Parallel()
	receivers := []string{"webhook:http://hooks.river.example/a", "alertmanager:http://am.river.example"}
	e := newAlertEnv(t, receivers, nil)
	const term = "water_temp"
	steps := []struct {
		fouled bool
		want   alerts.State
	}{
		{false, alerts.StateNone},     // the baseline
		{true, alerts.StatePending},   // one breach
		{false, alerts.StateResolved}, // clean: resolved, never announced
		{true, alerts.StatePending},
		{true, alerts.StateFiring},
		{true, alerts.StateFiring}, // still breaching: no new transition
		{false, alerts.StateResolved},
	}
	for i, s := range steps {
		res := e.window(t, s.fouled)
		if res.Status != jobs.StatusSucceeded {
			t.Fatalf("step %d: %+v", i, res)
		}
		if i > 0 && res.Report == nil {
			t.Fatalf("step %d: not compared: %s", i, res.CompareNote)
		}
		if got := e.state(t, term, alerts.KindCurveShift); got.State != s.want {
			t.Fatalf("step %d (fouled %v): state %q (%s), want %q", i, s.fouled, got.State, got.Summary, s.want)
		}
	}
	ctx := context.Background()
	var events []string
	rows, err := e.db.pool.Query(ctx, `SELECT state FROM alert_events WHERE term = $1 AND kind = 'curve_shift' ORDER BY id`, term)
	if err != nil {
		t.Fatal(err)
	}
	events, err = pgx.CollectRows(rows, pgx.RowTo[string])
	if err != nil {
		t.Fatal(err)
	}
	if want := []string{"pending", "resolved", "pending", "firing", "resolved"}; !equalStrings(events, want) {
		t.Errorf("events %v, want %v", events, want)
	}
	type delivery struct {
		receiver, state string
	}
	drows, err := e.db.pool.Query(ctx, `SELECT receiver, alert->>'state' FROM alert_deliveries WHERE alert->>'term' = $1 AND alert->>'kind' = 'curve_shift' ORDER BY id`, term)
	if err != nil {
		t.Fatal(err)
	}
	// Within one change the receivers come in any order: compare sorted.
	got, err := pgx.CollectRows(drows, func(r pgx.CollectableRow) (delivery, error) {
		var d delivery
		return d, r.Scan(&d.receiver, &d.state)
	})
	if err != nil {
		t.Fatal(err)
	}
	want := []delivery{{receivers[1], "firing"}, {receivers[0], "firing"}, {receivers[1], "resolved"}, {receivers[0], "resolved"}}
	if len(got) != len(want) {
		t.Fatalf("deliveries %v, want %v", got, want)
	}
	for i := 0; i+1 < len(got); i += 2 {
		if got[i].receiver > got[i+1].receiver {
			got[i], got[i+1] = got[i+1], got[i]
		}
	}
	for i := range want {
		if got[i] != want[i] {
			t.Errorf("delivery %d: %v, want %v", i, got[i], want[i])
		}
	}
	var url string
	if err := e.db.pool.QueryRow(ctx, `SELECT alert->>'url' FROM alert_deliveries LIMIT 1`).Scan(&url); err != nil || url != "http://dashboards.river.example/models/sonde-oxygen" {
		t.Errorf("dashboard link %q (%v)", url, err)
	}
}

// A refit that fails repeatedly fires after watch.failing_runs failures
// and resolves on the next success; data that stops arriving fires at
// once.
func TestAlertRefitFailingAndStale(t *testing.T) {
	t.Parallel()
	e := newAlertEnv(t, nil, func(c *config.Config) { c.Models[0].MaxAge = 3 * time.Hour })
	e.window(t, false)
	if got := e.state(t, "", alerts.KindDataStale); got.State != alerts.StateNone {
		t.Errorf("fresh data: stale alert %+v", got)
	}
	// The spec now needs a column the table lacks.
	good := e.cfg.Models[0].Spec
	bad := *good
	bad.Terms = append(bad.Terms[:0:0], good.Terms...)
	bad.Terms[0].Columns = []string{"conductivity"}
	e.cfg.Models[0].Spec = &bad
	for i, want := range []alerts.State{alerts.StatePending, alerts.StateFiring} {
		if res := e.window(t, false); res.Status != jobs.StatusFailed {
			t.Fatalf("failure %d: %+v", i, res)
		}
		if got := e.state(t, "", alerts.KindRefitFailing); got.State != want {
			t.Fatalf("after %d failures: %q, want %q", i+1, got.State, want)
		}
	}
	e.cfg.Models[0].Spec = good
	e.window(t, false)
	if got := e.state(t, "", alerts.KindRefitFailing); got.State != alerts.StateResolved {
		t.Errorf("after a success: %q, want resolved", got.State)
	}
	// No new rows for a while: the clock moves on, the refit reuses the
	// window it has.
	e.hours += 10
	m := e.cfg.Models[0]
	if _, err := e.runner.Run(context.Background(), JobModel(&m), e.t0.Add(time.Duration(e.hours)*time.Hour)); err != nil {
		t.Fatal(err)
	}
	if got := e.state(t, "", alerts.KindDataStale); got.State != alerts.StateFiring || got.Numbers["age_seconds"] == nil {
		t.Errorf("stale data: %+v", got)
	}
}

func equalStrings(a, b []string) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// With alerting.fdr, two models on one schedule form a family: the first
// to refit a slot leaves its shift findings to the family, and the refit
// that completes the slot judges both (Benjamini–Hochberg across their
// p-values), so the clearly shifted model's alert opens only then.
func TestAlertFalseDiscoveryFamily(t *testing.T) {
	t.Parallel()
	e := newAlertEnv(t, nil, func(c *config.Config) {
		c.Alerting.FDR = 0.1
		spec, err := fit.ParseSpec([]byte("name: sonde\nresponse: dissolved_oxygen\nterms:\n  - curve: water_temp\n    size: 6\n"))
		if err != nil {
			t.Fatal(err)
		}
		a := c.Models[0]
		a.Spec = spec
		a.Name, a.Source.Where = "sonde-s05", "site = 'S05'"
		b := a
		b.Name, b.Source.Where = "sonde-s07", "site = 'S07'"
		c.Models = []config.Model{a, b}
	})
	e.hours = 0
	// Readings alternate S05/S07 hour by hour; the S05 sonde fouls in the
	// second window.
	run := func(fouled bool) (*jobs.Result, *jobs.Result) {
		e.windowRowsOnly(t, fouled, "S05")
		slot := e.t0.Add(time.Duration(e.hours) * time.Hour)
		var out [2]*jobs.Result
		for i := range e.cfg.Models {
			m := e.cfg.Models[i]
			res, err := e.runner.Run(context.Background(), JobModel(&m), slot)
			if err != nil || res.Status != jobs.StatusSucceeded {
				t.Fatalf("%s: %+v %v", m.Name, res, err)
			}
			out[i] = res
			if i == 0 {
				if got := e.stateOf(t, "sonde-s05", "water_temp", alerts.KindCurveShift); got.State != alerts.StateNone {
					t.Fatalf("judged before the family was complete: %+v", got)
				}
			}
		}
		return out[0], out[1]
	}
	run(false)
	a, b := run(true)
	if a.Report == nil || !a.Report.Breach || b.Report == nil {
		t.Fatalf("the fouled sonde's comparison did not breach: %+v / %+v", a.Report, b.Report)
	}
	if got := e.stateOf(t, "sonde-s05", "water_temp", alerts.KindCurveShift); got.State != alerts.StatePending || got.Numbers["fdr_family"] == nil {
		t.Errorf("the fouled sonde after the family's judgement: %+v", got)
	}
	if got := e.stateOf(t, "sonde-s07", "water_temp", alerts.KindCurveShift); got.State != alerts.StateNone {
		t.Errorf("the steady sonde: %+v", got)
	}
	var left int
	if err := e.db.pool.QueryRow(context.Background(), `SELECT count(*) FROM slot_tests`).Scan(&left); err != nil || left != 4 {
		t.Errorf("slot_tests rows %d (%v), want 4 (two slots of two models)", left, err)
	}
}

// windowRowsOnly appends windowHours of readings, fouling only the given
// site's when fouled, without refitting.
func (e *alertEnv) windowRowsOnly(t *testing.T, fouled bool, site string) {
	t.Helper()
	rows := make([][]any, 0, 2*windowHours)
	for h := e.hours; h < e.hours+windowHours; h++ {
		for _, s := range []string{"S05", "S07"} {
			amp := 1.0
			if fouled && s == site {
				amp = 0.2
			}
			temp := 4 + 20*e.rng.Float64()
			do := 12 - amp*0.25*temp + 0.8*math.Sin(temp/3) + 0.3*e.rng.NormFloat64()
			rows = append(rows, []any{e.t0.Add(time.Duration(h) * time.Hour), s, temp, do})
		}
	}
	if _, err := e.db.pool.CopyFrom(context.Background(), pgx.Identifier{"readings"},
		[]string{"observed_at", "site", "water_temp", "dissolved_oxygen"}, pgx.CopyFromRows(rows)); err != nil {
		t.Fatal(err)
	}
	e.hours += windowHours
}

func (e *alertEnv) stateOf(t *testing.T, model, term string, kind alerts.Kind) alerts.Status {
	t.Helper()
	got, err := e.store.Alerts(context.Background(), history.AlertFilter{Model: model})
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range got {
		if s.Term == term && s.Kind == kind {
			return s
		}
	}
	return alerts.Status{}
}

// A refit that overruns the job timeout is recorded as a failure like any
// other, alert states included: refits that keep timing out fire
// refit_failing.
func TestTimedOutRefitsFireRefitFailing(t *testing.T) {
	t.Parallel()
	db := newTestDB(t)
	cfg := testConfig(t, db, "@every 1s")
	// Every row costs 20 ms to read: far beyond the job timeout.
	cfg.Models[0].Source.Where = "pg_sleep(0.02) IS NOT NULL"
	cfg.Models[0].Watch.FailingRuns = 2
	a, _ := startApp(t, cfg, Options{Workers: 2, JobTimeout: 300 * time.Millisecond})
	waitReady(t, a, 15*time.Second)
	waitFor(t, 30*time.Second, "refit_failing firing", func() (bool, error) {
		return db.count(t, `SELECT count(*) FROM alert_states WHERE kind = 'refit_failing' AND state = 'firing'`) == 1, nil
	})
	var reason string
	if err := db.pool.QueryRow(context.Background(), `SELECT reason FROM fits WHERE status = 'failed' ORDER BY id LIMIT 1`).Scan(&reason); err != nil || !strings.Contains(reason, "timed out") {
		t.Errorf("first failure's reason %q (%v)", reason, err)
	}
}
