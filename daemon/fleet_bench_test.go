package daemon

import (
	"context"
	"fmt"
	"log/slog"
	"os"
	"runtime"
	"runtime/pprof"
	"slices"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/curvewatch/curvewatch/daemon/config"
	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/internal/pgtest"
	"github.com/curvewatch/curvewatch/jobs/source"
)

// Fleet benchmark settings (bench/fleet.sh sets them).
const (
	envFleet         = "CURVEWATCH_FLEET"            // "1" runs BenchmarkFleet
	envFleetModels   = "CURVEWATCH_FLEET_MODELS"     // models in the fleet (default 1000)
	envFleetReplicas = "CURVEWATCH_FLEET_REPLICAS"   // daemons sharing the fleet (default 1)
	envFleetWorkers  = "CURVEWATCH_FLEET_WORKERS"    // refits computing at once per daemon (default: the CPUs)
	envFleetProfile  = "CURVEWATCH_FLEET_CPUPROFILE" // a file for a CPU profile of the daemons' phase only
	fleetRows        = 10_000                        // rows per model
)

const fleetSpec = "name: fleet\nresponse: y\nfamily: gaussian\nterms:\n  - curve: x1\n  - curve: x2\n  - curve: x3\n"

// BenchmarkFleet measures issue 5's fleet target: F small models (F from
// CURVEWATCH_FLEET_MODELS, default 1000; 10,000 rows and 3 curves each,
// gaussian) due in the same slot, run by one App with Workers = the number
// of CPUs. It reports
//
//   - wall_s: the slot's wall time, from the first refit's start to the last
//     refit's finish as the fits table records them (the jobs are all
//     enqueued before River starts: the schedule is yearly, so the bring-up's
//     catch-up enqueues this year's slot for every model);
//   - startup_wall_s: from Start to the poll that saw the last fit row
//     (includes migrations, enqueueing and the 100 ms poll granularity);
//   - purefit_s_per_core: the sum over models of fit.Fit on the same rows
//     held in memory (fit.Table), timed one model at a time, back to back,
//     divided by runtime.NumCPU(); the fits are timed before and after the
//     daemons' phase and the mean is used, since this machine's speed
//     drifts with its neighbours' load (purefit_before_s and
//     purefit_after_s show by how much);
//   - wall_over_purefit: wall_s / purefit_s_per_core (target ≤ 1.2);
//   - refit_s_per_core: the sum of the fits' recorded durations (pull, fit,
//     compare, record) divided by the cores, to tell the refits' own
//     overhead from time lost between jobs.
//   - db_cpu_s and db_cpu_ms_per_model: the CPU the PostgreSQL server used
//     from Start to the last fit, when it runs on this machine (it shares
//     the cores with the daemon here), and
//     startup_wall_less_db_over_purefit: (startup_wall_s × cores − db_cpu_s)
//     ÷ cores ÷ purefit_s_per_core, an estimate of the ratio with the
//     database on machines of its own.
//
// It is slow (the data alone is F × 10,000 rows), so it runs only with
// CURVEWATCH_FLEET=1, and once: use -benchtime 1x (bench/fleet.sh).
func BenchmarkFleet(b *testing.B) {
	if os.Getenv(envFleet) != "1" {
		b.Skip("set " + envFleet + "=1 to run the fleet benchmark (slow; see bench/fleet.sh)")
	}
	models := 1000
	if s := os.Getenv(envFleetModels); s != "" {
		n, err := strconv.Atoi(s)
		if err != nil || n < 1 {
			b.Fatalf("%s=%q: want a positive integer", envFleetModels, s)
		}
		models = n
	}
	cores := runtime.NumCPU()
	workers := cores
	if s := os.Getenv(envFleetWorkers); s != "" {
		n, err := strconv.Atoi(s)
		if err != nil || n < 1 {
			b.Fatalf("%s=%q: want a positive integer", envFleetWorkers, s)
		}
		workers = n
	}
	// The runtime settings serve runs with (GOMAXPROCS and GOGC, unless
	// the environment sets them), for the pure fits too: the ratio then
	// compares the daemon with fits under the same collector.
	rt := ServeRuntime(workers, os.Getenv)
	defer rt.Apply()()
	ctx := context.Background()
	url, schema := pgtest.Schema(b)
	pool, err := pgxpool.New(ctx, url)
	if err != nil {
		b.Fatal(err)
	}
	defer pool.Close()

	// Yearly slots: the latest is 1 January this year, 00:00 UTC, and the
	// rows lie in the 30 days before it.
	const schedule = "0 0 1 1 *"
	slot := time.Date(time.Now().UTC().Year(), 1, 1, 0, 0, 0, 0, time.UTC)
	const window = 30 * 24 * time.Hour

	b.Logf("fleet: %d models × %d rows, %d cores, %d workers; %s", models, fleetRows, cores, workers, rt)
	t0 := time.Now()
	if err := makeFleetTable(ctx, pool, models, slot); err != nil {
		b.Fatal(err)
	}
	b.Logf("fleet table made in %.1f s", time.Since(t0).Seconds())

	spec, err := fit.ParseSpec([]byte(fleetSpec))
	if err != nil {
		b.Fatal(err)
	}
	cron, err := config.ParseSchedule(schedule, time.UTC)
	if err != nil {
		b.Fatal(err)
	}
	cfg := &config.Config{
		Database: config.NewSecret(url), Schema: schema, Listen: "127.0.0.1:0",
		Timezone: "UTC", Location: time.UTC,
	}
	for k := range models {
		cfg.Models = append(cfg.Models, config.Model{
			Name: fmt.Sprintf("fleet-%04d", k), Schedule: schedule, Cron: cron, Spec: spec,
			Source: config.Source{Table: source.Table{Name: "fleet"}, Time: "observed_at", Where: fmt.Sprintf("sensor = %d", k),
				Window: window, Overlap: time.Hour},
			Watch: config.Watch{Against: config.AgainstBaseline, PracticalShift: config.DefaultPracticalShift, Level: config.DefaultLevel,
				DevianceIncrease: config.DefaultDevianceIncrease, ConfirmRuns: config.DefaultConfirmRuns},
		})
	}

	// (b) The pure fits, one model at a time, back to back, on the rows
	// held in memory; timed again after the daemons' phase (see below).
	tabs, err := fleetTables(ctx, pool, models)
	if err != nil {
		b.Fatal(err)
	}
	pureBefore, err := timePureFits(ctx, spec, tabs)
	if err != nil {
		b.Fatal(err)
	}
	b.Logf("pure fits before the slot: %.2f s in all, %.2f s per core", pureBefore.Seconds(), pureBefore.Seconds()/float64(cores))

	// (c) The best any scheduler could do: the same pure fits, a goroutine
	// per core, no database. Its ratio to (b) is the floor of the target's
	// ratio on this machine (cores that slow each other down).
	startPar := time.Now()
	var next atomic.Int64
	var wg sync.WaitGroup
	for range cores {
		wg.Go(func() {
			for k := int(next.Add(1) - 1); k < models; k = int(next.Add(1) - 1) {
				if _, err := fit.Fit(ctx, spec, tabs[k], fit.Options{TimeColumn: "observed_at", Workers: 1}); err != nil {
					b.Errorf("parallel pure fit of sensor %d: %v", k, err)
					return
				}
			}
		})
	}
	wg.Wait()
	parallelWall := time.Since(startPar).Seconds()
	// The daemons must not run beside a heap of every model's rows (a large
	// live heap makes collections rarer than the daemon's own would be).
	tabs = nil
	runtime.GC()

	// (a) The Apps (CURVEWATCH_FLEET_REPLICAS of them, default 1, each
	// with a worker per core) run the slot for every model.
	replicas := 1
	if s := os.Getenv(envFleetReplicas); s != "" {
		n, err := strconv.Atoi(s)
		if err != nil || n < 1 {
			b.Fatalf("%s=%q: want a positive integer", envFleetReplicas, s)
		}
		replicas = n
	}
	logs := &logBuffer{}
	var apps []*App
	for range replicas {
		a, err := New(cfg, Options{CPUs: cores, Workers: workers, RetryMin: 100 * time.Millisecond, RetryMax: 500 * time.Millisecond,
			Logger: slog.New(slog.NewTextHandler(logs, &slog.HandlerOptions{Level: slog.LevelInfo}))})
		if err != nil {
			b.Fatal(err)
		}
		apps = append(apps, a)
	}
	b.ResetTimer()
	stopProfile := func() {}
	if path := os.Getenv(envFleetProfile); path != "" {
		f, err := os.Create(path)
		if err != nil {
			b.Fatal(err)
		}
		if err := pprof.StartCPUProfile(f); err != nil {
			b.Fatal(err)
		}
		stopProfile = sync.OnceFunc(func() {
			pprof.StopCPUProfile()
			f.Close()
		})
		defer stopProfile()
	}
	dbKinds0, dbCPUOK := serverCPUByKind(ctx, pool)
	started := time.Now()
	for _, a := range apps {
		if err := a.Start(ctx); err != nil {
			b.Fatal(err)
		}
	}
	stopApps := sync.OnceFunc(func() {
		sctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		for _, a := range apps {
			if err := a.Stop(sctx); err != nil {
				b.Errorf("stop: %v", err)
			}
		}
		if b.Failed() || os.Getenv("CURVEWATCH_TEST_APPLOG") != "" {
			b.Logf("app log:\n%s", logs)
		}
	})
	defer stopApps()
	// Generous: ten times the pure fit time per core, plus start-up.
	deadline := time.Now().Add(2*time.Minute + 10*pureBefore/time.Duration(cores))
	for {
		var n int
		if err := pool.QueryRow(ctx, `SELECT count(*) FROM fits WHERE slot = $1`, slot).Scan(&n); err != nil {
			// The fits table appears with the App's migrations.
			if time.Now().After(deadline) {
				b.Fatalf("count fits: %v", err)
			}
		} else if n >= models {
			break
		}
		if time.Now().After(deadline) {
			b.Fatalf("%d of %d models have a fit for slot %s after %s", n, models, slot.Format(time.RFC3339), time.Since(started).Round(time.Second))
		}
		time.Sleep(100 * time.Millisecond)
	}
	startupWall := time.Since(started)
	dbKinds1, dbCPUOK1 := serverCPUByKind(ctx, pool)
	b.StopTimer()
	stopProfile()
	stopApps() // before the second pass of pure fits, which they would share the cores with

	// (b, again) The pure fits after the slot: the machine's speed drifts
	// (other tenants), so the ratio uses the mean of both passes.
	if tabs, err = fleetTables(ctx, pool, models); err != nil {
		b.Fatal(err)
	}
	pureAfter, err := timePureFits(ctx, spec, tabs)
	if err != nil {
		b.Fatal(err)
	}
	tabs = nil
	pureFitPerCore := (pureBefore + pureAfter).Seconds() / 2 / float64(cores)
	b.Logf("pure fits after the slot: %.2f s in all; the mean of both passes, %.2f s per core, is the ratio's denominator", pureAfter.Seconds(), pureFitPerCore)
	b.Logf("pure fits a goroutine per core: %.2f s wall, %.2f × the pure fits per core", parallelWall, parallelWall/pureFitPerCore)

	var bad int
	var wall, refits float64
	err = pool.QueryRow(ctx, `SELECT count(*) FILTER (WHERE status <> 'succeeded'),
		extract(epoch FROM max(finished_at) - min(started_at))::double precision, sum(duration_seconds)
		FROM fits WHERE slot = $1`, slot).Scan(&bad, &wall, &refits)
	if err != nil {
		b.Fatal(err)
	}
	if bad != 0 {
		var reason string
		_ = pool.QueryRow(ctx, `SELECT status || ': ' || coalesce(reason, '') FROM fits WHERE slot = $1 AND status <> 'succeeded' LIMIT 1`, slot).Scan(&reason)
		b.Fatalf("%d of %d fits did not succeed (first: %s)", bad, models, reason)
	}
	b.ReportMetric(wall, "wall_s")
	b.ReportMetric(parallelWall/pureFitPerCore, "parallel_pure_over_purefit")
	b.ReportMetric(float64(models)/wall, "models_per_s")
	b.ReportMetric(float64(replicas), "replicas")
	b.ReportMetric(startupWall.Seconds(), "startup_wall_s")
	b.ReportMetric(pureFitPerCore, "purefit_s_per_core")
	b.ReportMetric(pureBefore.Seconds(), "purefit_before_s")
	b.ReportMetric(pureAfter.Seconds(), "purefit_after_s")
	b.ReportMetric(wall/pureFitPerCore, "wall_over_purefit")
	// Where the time goes: the refits' own durations (pull, fit, compare,
	// record) per core, against the wall (the rest is queueing).
	b.ReportMetric(refits/float64(cores), "refit_s_per_core")
	b.Logf("slot wall %.2f s (%.2f s from Start), pure fits %.2f s per core: ratio %.2f (target ≤ 1.2); the refits' own durations %.2f s per core",
		wall, startupWall.Seconds(), pureFitPerCore, wall/pureFitPerCore, refits/float64(cores))
	// PostgreSQL shares these cores here. When its processes are visible
	// (a local server), its CPU time over the daemons' phase is reported,
	// and so is the ratio with that time taken off the cores: an estimate
	// of the ratio with the database on machines of its own.
	if dbCPUOK && dbCPUOK1 {
		db := sumCPU(dbKinds1) - sumCPU(dbKinds0)
		b.ReportMetric(db, "db_cpu_s")
		b.ReportMetric(1000*db/float64(models), "db_cpu_ms_per_model")
		rest := (startupWall.Seconds()*float64(cores) - db) / float64(cores)
		b.ReportMetric(rest/pureFitPerCore, "startup_wall_less_db_over_purefit")
		var kinds []string
		for k, v := range dbKinds1 {
			if d := v - dbKinds0[k]; d > 0 {
				kinds = append(kinds, fmt.Sprintf("%s %.1f", k, 1000*d/float64(models)))
			}
		}
		slices.Sort(kinds)
		b.Logf("the database's CPU by kind of process, ms per model: %s", strings.Join(kinds, "; "))
		b.Logf("the database used %.2f s of CPU (%.1f ms per model); from Start, with it taken off the cores: %.2f s per core, %.2f × the pure fits per core",
			db, 1000*db/float64(models), rest, rest/pureFitPerCore)
	}
}

// makeFleetTable fills one source table with every model's rows: sensor k
// (0 ≤ k < models) has fleetRows rows, 200 s apart, ending just before
// slot, with y = sin(2π x1) + (x2 − ½)² · 4 + 0.5 x3 + N(0, 0.3²). One
// INSERT … SELECT, seeded with setseed on the same connection, so the data
// are the same every run.
func makeFleetTable(ctx context.Context, pool *pgxpool.Pool, models int, slot time.Time) error {
	conn, err := pool.Acquire(ctx)
	if err != nil {
		return err
	}
	defer conn.Release()
	for _, q := range []string{
		`CREATE TABLE fleet (sensor integer NOT NULL, observed_at timestamptz NOT NULL,
			x1 double precision, x2 double precision, x3 double precision, y double precision)`,
		`SELECT setseed(0.42)`,
	} {
		if _, err := conn.Exec(ctx, q); err != nil {
			return fmt.Errorf("%s: %w", q, err)
		}
	}
	const insert = `INSERT INTO fleet (sensor, observed_at, x1, x2, x3, y)
		SELECT sensor, observed_at, x1, x2, x3,
		       sin(2 * pi() * x1) + 4 * (x2 - 0.5)^2 + 0.5 * x3 + 0.3 * sqrt(-2 * ln(1 - u1)) * cos(2 * pi() * u2)
		FROM (SELECT s AS sensor, $1::timestamptz - i * interval '200 seconds' AS observed_at,
		             random() AS x1, random() AS x2, random() AS x3, random() AS u1, random() AS u2
		      FROM generate_series(0, $2::int - 1) AS s, generate_series(1, $3::int) AS i) AS g`
	if _, err := conn.Exec(ctx, insert, slot, models, fleetRows); err != nil {
		return fmt.Errorf("fill the fleet table: %w", err)
	}
	// A source table at rest, as a production one mostly is: vacuumed and
	// frozen, so that neither autovacuum nor first reads setting hint bits,
	// nor a checkpoint flushing the load, run during the daemons' phase.
	for _, q := range []string{`CREATE INDEX ON fleet (sensor, observed_at)`, `VACUUM (FREEZE, ANALYZE) fleet`} {
		if _, err := conn.Exec(ctx, q); err != nil {
			return fmt.Errorf("%s: %w", q, err)
		}
	}
	// CHECKPOINT needs a superuser or pg_checkpoint; without it the
	// checkpointer's CPU shows in the database's share.
	_, _ = conn.Exec(ctx, `CHECKPOINT`)
	return nil
}

// fleetTables reads every model's rows (fleetRowsOf).
func fleetTables(ctx context.Context, pool *pgxpool.Pool, models int) ([]*fit.Table, error) {
	tabs := make([]*fit.Table, models)
	for k := range tabs {
		tab, err := fleetRowsOf(ctx, pool, k)
		if err != nil {
			return nil, fmt.Errorf("rows of sensor %d: %w", k, err)
		}
		tabs[k] = tab
	}
	return tabs, nil
}

// timePureFits fits each table in turn on this goroutine and returns the
// sum of the fits' times: the time one core spends on them, which is what
// dividing by the cores assumes (the daemon fits each model on one
// goroutine too).
func timePureFits(ctx context.Context, spec *fit.Spec, tabs []*fit.Table) (time.Duration, error) {
	var pure time.Duration
	for k, tab := range tabs {
		start := time.Now()
		doc, err := fit.Fit(ctx, spec, tab, fit.Options{TimeColumn: "observed_at", Workers: 1})
		pure += time.Since(start)
		if err != nil {
			return 0, fmt.Errorf("pure fit of sensor %d: %w", k, err)
		}
		if doc.N != fleetRows {
			return 0, fmt.Errorf("pure fit of sensor %d used %d rows, want %d", k, doc.N, fleetRows)
		}
	}
	return pure, nil
}

// fleetRowsOf reads sensor k's rows, in time order, into a fit.Table with
// the time as seconds since 1970 (as the daemon's source delivers it).
func fleetRowsOf(ctx context.Context, pool *pgxpool.Pool, k int) (*fit.Table, error) {
	rows, err := pool.Query(ctx, `SELECT extract(epoch FROM observed_at)::double precision, x1, x2, x3, y
		FROM fleet WHERE sensor = $1 ORDER BY observed_at`, k)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	cols := []string{"observed_at", "x1", "x2", "x3", "y"}
	tab := &fit.Table{Numeric: map[string][]float64{}}
	vals := make([]float64, len(cols))
	ptrs := make([]any, len(cols))
	for i := range vals {
		ptrs[i] = &vals[i]
	}
	for rows.Next() {
		if err := rows.Scan(ptrs...); err != nil {
			return nil, err
		}
		for i, c := range cols {
			tab.Numeric[c] = append(tab.Numeric[c], vals[i])
		}
	}
	return tab, rows.Err()
}
