package daemon

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math"
	"math/rand/v2"
	"net/http"
	"os"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/curvewatch/curvewatch/daemon/config"
	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/internal/pgtest"
	"github.com/curvewatch/curvewatch/jobs/source"
)

func TestMain(m *testing.M) { pgtest.Main(m) }

// testDB is a fresh schema holding an invented source table of hourly
// sonde readings (dissolved oxygen against water temperature, two sites)
// over the 300 hours before now.
type testDB struct {
	url, schema string
	pool        *pgxpool.Pool
}

func newTestDB(t *testing.T) *testDB {
	t.Helper()
	url, schema := pgtest.Schema(t)
	ctx := context.Background()
	pool, err := pgxpool.New(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(pool.Close)
	if _, err := pool.Exec(ctx, `CREATE TABLE readings (observed_at timestamptz NOT NULL, site text NOT NULL, water_temp double precision, dissolved_oxygen double precision)`); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(7, 11))
	now := time.Now().Truncate(time.Hour)
	rows := make([][]any, 0, 300)
	for h := range 300 {
		temp := 4 + 20*rng.Float64()
		do := 12 - 0.25*temp + 0.8*math.Sin(temp/3) + 0.3*rng.NormFloat64()
		rows = append(rows, []any{now.Add(-time.Duration(h+1) * time.Hour), []string{"S05", "S07"}[h%2], temp, do})
	}
	if _, err := pool.CopyFrom(ctx, pgx.Identifier{"readings"}, []string{"observed_at", "site", "water_temp", "dissolved_oxygen"}, pgx.CopyFromRows(rows)); err != nil {
		t.Fatal(err)
	}
	return &testDB{url: url, schema: schema, pool: pool}
}

// testConfig is a config, built in code, with one model on the readings
// table and the given schedule.
func testConfig(t *testing.T, db *testDB, schedule string) *config.Config {
	t.Helper()
	cron, err := config.ParseSchedule(schedule, time.UTC)
	if err != nil {
		t.Fatal(err)
	}
	spec, err := fit.ParseSpec([]byte("name: sonde-oxygen\nresponse: dissolved_oxygen\nterms:\n  - curve: water_temp\n    size: 6\n  - factor: site\n"))
	if err != nil {
		t.Fatal(err)
	}
	return &config.Config{
		Database: config.NewSecret(db.url), Schema: db.schema, Listen: "127.0.0.1:0",
		Timezone: "UTC", Location: time.UTC,
		Models: []config.Model{{
			Name: "sonde-oxygen", Schedule: schedule, Cron: cron, Spec: spec,
			Source: config.Source{Table: source.Table{Name: "readings"}, Time: "observed_at", Window: 1000 * time.Hour, Overlap: time.Hour},
			Watch: config.Watch{Against: config.AgainstBaseline, PracticalShift: config.DefaultPracticalShift, Level: config.DefaultLevel,
				DevianceIncrease: config.DefaultDevianceIncrease, ConfirmRuns: config.DefaultConfirmRuns},
		}},
	}
}

// logBuffer collects a test App's log; it is shown when the test fails.
type logBuffer struct {
	mu  sync.Mutex
	buf bytes.Buffer
}

func (b *logBuffer) Write(p []byte) (int, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.Write(p)
}

func (b *logBuffer) String() string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.String()
}

// startApp starts an App on cfg and stops it when the test ends. Its log
// is shown when the test fails, or always with CURVEWATCH_TEST_APPLOG=1.
func startApp(t *testing.T, cfg *config.Config, opts Options) (*App, *logBuffer) {
	t.Helper()
	logs := &logBuffer{}
	opts.Logger = slog.New(slog.NewTextHandler(logs, &slog.HandlerOptions{Level: slog.LevelDebug}))
	opts.RetryMin = cmpOr(opts.RetryMin, 100*time.Millisecond)
	opts.RetryMax = cmpOr(opts.RetryMax, 500*time.Millisecond)
	a, err := New(cfg, opts)
	if err != nil {
		t.Fatal(err)
	}
	if err := a.Start(context.Background()); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		defer cancel()
		if err := a.Stop(ctx); err != nil {
			t.Errorf("stop: %v", err)
		}
		if t.Failed() || os.Getenv("CURVEWATCH_TEST_APPLOG") != "" {
			t.Logf("app log:\n%s", logs)
		}
	})
	return a, logs
}

func cmpOr(a, b time.Duration) time.Duration {
	if a != 0 {
		return a
	}
	return b
}

// waitReady waits for the App's database side, failing the test after d.
func waitReady(t *testing.T, a *App, d time.Duration) {
	t.Helper()
	select {
	case <-a.Ready():
	case <-time.After(d):
		t.Fatalf("the app was not ready within %s: %s", d, *a.lastErr.Load())
	}
}

// waitFor polls cond every 50 ms until it holds, failing the test when it
// does not within d.
func waitFor(t *testing.T, d time.Duration, what string, cond func() (bool, error)) {
	t.Helper()
	deadline := time.Now().Add(d)
	for {
		ok, err := cond()
		if err != nil {
			t.Fatalf("waiting for %s: %v", what, err)
		}
		if ok {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("%s did not happen within %s", what, d)
		}
		time.Sleep(50 * time.Millisecond)
	}
}

func (db *testDB) count(t *testing.T, query string, args ...any) int {
	t.Helper()
	var n int
	if err := db.pool.QueryRow(context.Background(), query, args...).Scan(&n); err != nil {
		t.Fatalf("%s: %v", query, err)
	}
	return n
}

// (a) A model on "@every 1s" gets scheduled fits within a few seconds, each
// for a whole-second slot.
func TestRefitsOnSchedule(t *testing.T) {
	t.Parallel()
	db := newTestDB(t)
	a, _ := startApp(t, testConfig(t, db, "@every 1s"), Options{Workers: 2})
	waitReady(t, a, 15*time.Second)
	waitFor(t, 15*time.Second, "two succeeded fits", func() (bool, error) {
		return db.count(t, `SELECT count(*) FROM fits WHERE model = 'sonde-oxygen' AND status = 'succeeded'`) >= 2, nil
	})
	if n := db.count(t, `SELECT count(*) FROM fits WHERE slot IS NULL OR slot <> date_trunc('second', slot)`); n != 0 {
		t.Errorf("%d fits without a whole-second slot", n)
	}
	if n := db.count(t, `SELECT count(*) FROM fit_curve_points`); n == 0 {
		t.Error("no curve points recorded")
	}
}

// (b) Two replicas on one database and one schedule: each slot is run
// exactly once — one fit row of any status per slot, and one River job.
func TestReplicasRunEachSlotOnce(t *testing.T) {
	t.Parallel()
	db := newTestDB(t)
	cfg := testConfig(t, db, "@every 1s")
	a1, _ := startApp(t, cfg, Options{Workers: 2})
	a2, _ := startApp(t, cfg, Options{Workers: 2})
	waitReady(t, a1, 15*time.Second)
	waitReady(t, a2, 15*time.Second)
	waitFor(t, 15*time.Second, "five slots with a succeeded fit", func() (bool, error) {
		return db.count(t, `SELECT count(DISTINCT slot) FROM fits WHERE status = 'succeeded'`) >= 5, nil
	})
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	for _, a := range []*App{a1, a2} {
		if err := a.Stop(ctx); err != nil {
			t.Fatal(err)
		}
	}
	rows, err := db.pool.Query(ctx, `SELECT slot, count(*), string_agg(status, ',') FROM fits GROUP BY slot HAVING count(*) <> 1`)
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var slot time.Time
		var n int
		var statuses string
		if err := rows.Scan(&slot, &n, &statuses); err != nil {
			t.Fatal(err)
		}
		t.Errorf("slot %s has %d fits (%s), want 1", slot.Format(time.RFC3339), n, statuses)
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	if n := db.count(t, `SELECT count(*) FROM fits WHERE status <> 'succeeded'`); n != 0 {
		t.Errorf("%d fits did not succeed", n)
	}
	if n := db.count(t, `SELECT count(*) FROM (SELECT args FROM river_job GROUP BY args HAVING count(*) > 1) d`); n != 0 {
		t.Errorf("%d (model, slot) pairs were enqueued more than once", n)
	}
}

// (c) After downtime the latest missed slot runs once, not once per missed
// slot; a slot already in the history is neither enqueued on start nor run
// again when a job for it turns up (River forgets completed jobs after a
// day).
func TestMissedSlotRunsOnce(t *testing.T) {
	t.Parallel()
	db := newTestDB(t)
	// Yearly: every year since the data began is "missed"; the latest is 1
	// January this year.
	cfg := testConfig(t, db, "0 0 1 1 *")
	slot := time.Date(time.Now().UTC().Year(), 1, 1, 0, 0, 0, 0, time.UTC)
	if time.Now().UTC().Equal(slot) {
		t.Skip("run exactly at the new year")
	}
	a1, logs1 := startApp(t, cfg, Options{Workers: 2})
	waitReady(t, a1, 15*time.Second)
	waitFor(t, 15*time.Second, "the missed slot's fit", func() (bool, error) {
		return db.count(t, `SELECT count(*) FROM fits`) >= 1, nil
	})
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if err := a1.Stop(ctx); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(logs1.String(), "enqueued the latest slot") {
		t.Errorf("the first start did not enqueue the missed slot")
	}
	// River forgets its completed jobs (after a day, by default).
	if _, err := db.pool.Exec(ctx, `DELETE FROM river_job`); err != nil {
		t.Fatal(err)
	}

	a2, logs2 := startApp(t, cfg, Options{Workers: 2})
	waitReady(t, a2, 15*time.Second)
	if strings.Contains(logs2.String(), "enqueued the latest slot") {
		t.Errorf("the second start enqueued a slot the history already holds")
	}
	res, err := a2.client.Insert(ctx, newRefitArgs("sonde-oxygen", slot), nil)
	if err != nil {
		t.Fatal(err)
	}
	waitFor(t, 15*time.Second, "the repeated job to complete", func() (bool, error) {
		return db.count(t, `SELECT count(*) FROM river_job WHERE id = $1 AND state = 'completed'`, res.Job.ID) == 1, nil
	})
	var got time.Time
	if err := db.pool.QueryRow(ctx, `SELECT slot FROM fits`).Scan(&got); err != nil {
		t.Fatalf("want exactly one fit: %v", err)
	}
	if !got.Equal(slot) {
		t.Errorf("the fit is for slot %v, want %v", got, slot)
	}
	if n := db.count(t, `SELECT count(*) FROM fits`); n != 1 {
		t.Errorf("%d fits, want 1", n)
	}
}

// (d) Stop before Start and a second Stop do nothing; a stopped App cannot
// be restarted.
func TestStopBeforeStartAndTwice(t *testing.T) {
	t.Parallel()
	db := newTestDB(t)
	a, err := New(testConfig(t, db, "0 3 * * *"), Options{})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if err := a.Stop(ctx); err != nil {
		t.Fatalf("stop before start: %v", err)
	}
	if err := a.Start(ctx); err != nil {
		t.Fatal(err)
	}
	waitReady(t, a, 15*time.Second)
	var wg sync.WaitGroup
	errs := make([]error, 3)
	for i := range errs {
		wg.Go(func() { errs[i] = a.Stop(ctx) })
	}
	wg.Wait()
	for i, err := range errs {
		if err != nil {
			t.Errorf("stop %d: %v", i, err)
		}
	}
	if err := a.Stop(ctx); err != nil {
		t.Errorf("stop after stop: %v", err)
	}
	if err := a.Start(ctx); !errors.Is(err, ErrStopped) {
		t.Errorf("start after stop: %v, want ErrStopped", err)
	}
}

// get fetches path from the App's listener.
func get(t *testing.T, a *App, path string) (int, string) {
	t.Helper()
	resp, err := http.Get(fmt.Sprintf("http://%s%s", a.Addr(), path))
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	body, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatal(err)
	}
	return resp.StatusCode, string(body)
}

// (e) /healthz answers while the process runs; /readyz only once the
// database side is up, and not while the database is unreachable — which
// the daemon survives, retrying.
func TestHealthAndReady(t *testing.T) {
	t.Parallel()
	db := newTestDB(t)
	a, _ := startApp(t, testConfig(t, db, "0 3 * * *"), Options{})
	if code, body := get(t, a, "/healthz"); code != http.StatusOK || body != "ok\n" {
		t.Errorf("/healthz: %d %q", code, body)
	}
	waitReady(t, a, 15*time.Second)
	if code, body := get(t, a, "/readyz"); code != http.StatusOK || body != "ok\n" {
		t.Errorf("/readyz when up: %d %q", code, body)
	}

	// A database that is not there: a port nothing listens on.
	down := testConfig(t, db, "0 3 * * *")
	const password = "pw-Rz41-never-shown"
	down.Database = config.NewSecret("postgres://curvewatch:" + password + "@127.0.0.1:1/nowhere?sslmode=disable&connect_timeout=2")
	b, logs := startApp(t, down, Options{})
	waitFor(t, 10*time.Second, "a failed connection attempt", func() (bool, error) {
		return strings.Contains(logs.String(), "database side not up"), nil
	})
	code, body := get(t, b, "/readyz")
	if code != http.StatusServiceUnavailable || !strings.HasPrefix(body, "not ready: ") {
		t.Errorf("/readyz with the database down: %d %q", code, body)
	}
	if code, _ := get(t, b, "/healthz"); code != http.StatusOK {
		t.Errorf("/healthz with the database down: %d", code)
	}
	for _, s := range []string{body, logs.String()} {
		if strings.Contains(s, password) {
			t.Errorf("the password shows: %s", s)
		}
	}
	if code, _ := get(t, b, "/nothing"); code != http.StatusNotFound {
		t.Errorf("/nothing: %d, want 404", code)
	}
}
