package daemon

import (
	"context"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/curvewatch/curvewatch/internal/pgtest"
)

// The crash test runs the daemon in a child process: the test binary
// itself, re-run with -test.run=^TestCrashChild$ and these variables set.
const (
	envCrashChild  = "CURVEWATCH_CRASH_CHILD"
	envCrashURL    = "CURVEWATCH_CRASH_URL"
	envCrashSchema = "CURVEWATCH_CRASH_SCHEMA"
)

// Child-side options: a short job timeout so that the lease of a refit
// killed with its process (RescueAfter) runs out within the test.
const (
	crashJobTimeout  = 3 * time.Second
	crashRescueAfter = 4 * time.Second // at least JobTimeout + 1 s
	crashRows        = 100_000         // rows in the window: a refit takes some hundreds of ms
	crashTrials      = 20
)

// TestCrashChild is not a test of its own: it is the daemon process of
// TestCrashRecovery, which starts this binary with envCrashChild=1. It runs
// an App on an "@every 1s" schedule until it is killed.
func TestCrashChild(t *testing.T) {
	if os.Getenv(envCrashChild) != "1" {
		t.Skip("the child process of TestCrashRecovery; runs only when it starts it")
	}
	db := &testDB{url: os.Getenv(envCrashURL), schema: os.Getenv(envCrashSchema)}
	cfg := testConfig(t, db, "@every 1s")
	a, err := New(cfg, Options{
		Logger:      slog.New(slog.NewTextHandler(os.Stderr, &slog.HandlerOptions{Level: slog.LevelDebug})),
		Workers:     2,
		JobTimeout:  crashJobTimeout,
		RescueAfter: crashRescueAfter,
		BusyRetry:   200 * time.Millisecond,
		RetryMin:    100 * time.Millisecond,
		RetryMax:    500 * time.Millisecond,
	})
	if err != nil {
		t.Fatal(err)
	}
	if err := a.Start(context.Background()); err != nil {
		t.Fatal(err)
	}
	select {} // until SIGKILL (or the child's -test.timeout)
}

// crashChild is one run of the daemon in a child process.
type crashChild struct {
	cmd     *exec.Cmd
	started time.Time
	done    chan struct{}
}

func startCrashChild(t *testing.T, url, schema, logPath string) *crashChild {
	t.Helper()
	logf, err := os.OpenFile(logPath, os.O_CREATE|os.O_WRONLY|os.O_APPEND, 0o644)
	if err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(os.Args[0], "-test.run=^TestCrashChild$", "-test.timeout=3m")
	cmd.Env = append(os.Environ(), envCrashChild+"=1", envCrashURL+"="+url, envCrashSchema+"="+schema)
	cmd.Stdout, cmd.Stderr = logf, logf
	c := &crashChild{cmd: cmd, started: time.Now(), done: make(chan struct{})}
	if err := cmd.Start(); err != nil {
		logf.Close()
		t.Fatal(err)
	}
	go func() {
		cmd.Wait()
		logf.Close()
		close(c.done)
	}()
	t.Cleanup(c.kill)
	return c
}

// kill sends SIGKILL and waits for the process to be gone.
func (c *crashChild) kill() {
	select {
	case <-c.done:
		return
	default:
	}
	c.cmd.Process.Signal(syscall.SIGKILL)
	<-c.done
}

// exited reports whether the child has ended by itself (a crash).
func (c *crashChild) exited() bool {
	select {
	case <-c.done:
		return true
	default:
		return false
	}
}

// crashDB creates, in a fresh schema, the readings table of newTestDB with
// crashRows invented rows over the 300 hours before now.
func crashDB(t *testing.T) *testDB {
	t.Helper()
	url, schema := pgtest.Schema(t)
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	pool, err := pgxpool.New(context.Background(), url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(pool.Close)
	_, err = pool.Exec(ctx, fmt.Sprintf(`
		SELECT setseed(0.17);
		CREATE TABLE readings (observed_at timestamptz NOT NULL, site text NOT NULL, water_temp double precision, dissolved_oxygen double precision);
		INSERT INTO readings
		SELECT now() - interval '1 hour' - (i * interval '300 hours') / %[1]d,
		       CASE WHEN i %% 2 = 0 THEN 'S05' ELSE 'S07' END, temp,
		       12 - 0.25 * temp + 0.8 * sin(temp / 3) + 0.3 * (random() + random() + random() - 1.5)
		FROM (SELECT i, 4 + 20 * random() AS temp FROM generate_series(0, %[1]d - 1) AS i) AS g;
		ANALYZE readings;`, crashRows))
	if err != nil {
		t.Fatalf("create the source table: %v", err)
	}
	return &testDB{url: url, schema: schema, pool: pool}
}

// The daemon killed with SIGKILL at random moments during refits, then
// restarted, crashTrials times: afterwards every slot that was enqueued has
// exactly one successful fit, and no fit or comparison is partial.
//
// A killed process cannot resign River's leadership; its lease would hold
// for River's leader TTL (15 s, not configurable), during which no periodic
// job is enqueued and no stuck job rescued. The process is certainly dead
// when the test deletes the leader row, so deleting it only stands for that
// TTL having run out, and keeps each trial to a second or two.
func TestCrashRecovery(t *testing.T) {
	if testing.Short() {
		t.Skip("the crash test takes about a minute; skipped with -short")
	}
	t.Parallel()
	db := crashDB(t)
	logPath := filepath.Join(t.TempDir(), "children.log")
	if p := os.Getenv("CURVEWATCH_CRASH_LOG"); p != "" {
		logPath = p // kept after the test, for a look
	}
	ctx := context.Background()
	rng := rand.New(rand.NewPCG(2026, 5))
	defer func() {
		if t.Failed() || os.Getenv("CURVEWATCH_TEST_APPLOG") != "" {
			if b, err := os.ReadFile(logPath); err == nil {
				s := string(b)
				if len(s) > 20000 {
					s = "…" + s[len(s)-20000:]
				}
				t.Logf("children's log (tail):\n%s", s)
			}
			t.Logf("refit jobs:\n%s", dumpJobs(db))
		}
	}()

	midRefit, fitsBefore := 0, 0
	for trial := range crashTrials {
		fmt.Fprintf(logFile(t, logPath), "=== trial %d\n", trial)
		c := startCrashChild(t, db.url, db.schema, logPath)
		// Wait until this child is working: a refit job attempted since
		// it started (the catch-up slot, or a periodic or rescued one).
		waitFor(t, 20*time.Second, fmt.Sprintf("trial %d: a refit started by the child", trial), func() (bool, error) {
			if c.exited() {
				return false, fmt.Errorf("the child exited by itself: %v", c.cmd.ProcessState)
			}
			// River's tables appear with the first child's migrations.
			var n int
			err := db.pool.QueryRow(ctx, `SELECT count(*) FROM river_job WHERE kind = 'curvewatch_refit' AND attempted_at >= $1`, c.started).Scan(&n)
			return err == nil && n > 0, nil
		})
		// Kill at a random moment within the next 1.5 s: a refit takes a
		// few hundred ms, so some kills land mid-refit and some between.
		time.Sleep(time.Duration(rng.Int64N(int64(1500 * time.Millisecond))))
		running := db.count(t, `SELECT count(*) FROM river_job WHERE kind = 'curvewatch_refit' AND state = 'running'`)
		c.kill()
		if running > 0 {
			midRefit++
		}
		if _, err := db.pool.Exec(ctx, `DELETE FROM river_leader`); err != nil {
			t.Fatal(err)
		}
	}
	fitsBefore = db.count(t, `SELECT count(*) FROM fits WHERE status = 'succeeded'`)
	t.Logf("%d trials; %d killed with a refit job running; %d succeeded fits recorded during the trials", crashTrials, midRefit, fitsBefore)

	// Let the leases of the refits killed last run out, so that the final
	// child's leader rescues them at once (River's rescuer runs when a
	// leader is elected, then every 30 s).
	var lastAttempt *time.Time
	if err := db.pool.QueryRow(ctx, `SELECT max(attempted_at) FROM river_job WHERE state = 'running'`).Scan(&lastAttempt); err != nil {
		t.Fatal(err)
	}
	if lastAttempt != nil {
		waitFor(t, 2*crashRescueAfter, "the killed refits' leases to run out", func() (bool, error) {
			var expired bool
			err := db.pool.QueryRow(ctx, `SELECT now() > $1::timestamptz + $2::interval`, *lastAttempt, (crashRescueAfter + 500*time.Millisecond).String()).Scan(&expired)
			return expired, err
		})
	}

	// The final run: every refit job enqueued before it starts must end
	// completed, and each such slot have one succeeded fit.
	var cutoff time.Time
	if err := db.pool.QueryRow(ctx, `SELECT now()`).Scan(&cutoff); err != nil {
		t.Fatal(err)
	}
	fmt.Fprintf(logFile(t, logPath), "=== final run\n")
	final := startCrashChild(t, db.url, db.schema, logPath)
	pending := `SELECT count(*) FROM river_job WHERE kind = 'curvewatch_refit' AND created_at < $1 AND state NOT IN ('completed', 'cancelled', 'discarded')`
	waitFor(t, 120*time.Second, "every refit job enqueued before the final run to finish", func() (bool, error) {
		if final.exited() {
			return false, fmt.Errorf("the final child exited by itself: %v", final.cmd.ProcessState)
		}
		return db.count(t, pending, cutoff) == 0, nil
	})
	final.kill()

	jobs := db.count(t, `SELECT count(*) FROM river_job WHERE kind = 'curvewatch_refit' AND created_at < $1`, cutoff)
	succeeded := db.count(t, `SELECT count(*) FROM fits WHERE status = 'succeeded'`)
	comparisons := db.count(t, `SELECT count(*) FROM comparisons`)
	rescued := db.count(t, `SELECT count(*) FROM river_job WHERE kind = 'curvewatch_refit' AND attempt > 1`)
	var meanSecs float64
	if err := db.pool.QueryRow(ctx, `SELECT coalesce(avg(duration_seconds), 0) FROM fits WHERE status = 'succeeded'`).Scan(&meanSecs); err != nil {
		t.Fatal(err)
	}
	t.Logf("final: %d refit jobs enqueued before the final run; %d succeeded fits (mean refit %.0f ms); %d jobs took more than one attempt; %d comparisons",
		jobs, succeeded, 1000*meanSecs, rescued, comparisons)

	checks := []struct {
		what  string
		query string
		args  []any
	}{
		{"slots enqueued before the final run without exactly one succeeded fit", `
			SELECT count(*) FROM (
				SELECT j.args->>'slot' AS slot, count(f.id) FILTER (WHERE f.status = 'succeeded') AS n
				FROM river_job j LEFT JOIN fits f ON f.model = j.args->>'model' AND f.slot = (j.args->>'slot')::timestamptz
				WHERE j.kind = 'curvewatch_refit' AND j.created_at < $1
				GROUP BY 1) s
			WHERE n <> 1`, []any{cutoff}},
		{"refit jobs enqueued before the final run that did not complete", `
			SELECT count(*) FROM river_job WHERE kind = 'curvewatch_refit' AND created_at < $1 AND state <> 'completed'`, []any{cutoff}},
		{"slots with more than one fit of any status", `
			SELECT count(*) FROM (SELECT 1 FROM fits GROUP BY model, slot HAVING count(*) > 1) d`, nil},
		{"failed fits", `SELECT count(*) FROM fits WHERE status <> 'succeeded'`, nil},
		{"succeeded fits without curve points", `
			SELECT count(*) FROM fits f WHERE f.status = 'succeeded'
			AND NOT EXISTS (SELECT 1 FROM fit_curve_points p WHERE p.fit_id = f.id)`, nil},
		{"comparisons without terms", `
			SELECT count(*) FROM comparisons c WHERE NOT EXISTS (SELECT 1 FROM comparison_terms t WHERE t.comparison_id = c.id)`, nil},
		{"fits with more than one comparison as candidate", `
			SELECT count(*) FROM (SELECT 1 FROM comparisons GROUP BY candidate_fit_id HAVING count(*) > 1) d`, nil},
		{"models without a baseline", `
			SELECT count(*) FROM models m WHERE NOT EXISTS (SELECT 1 FROM baselines b WHERE b.model = m.name)`, nil},
	}
	for _, c := range checks {
		if n := db.count(t, c.query, c.args...); n != 0 {
			t.Errorf("%d %s", n, c.what)
		}
	}
	if jobs < crashTrials {
		t.Errorf("only %d refit jobs were enqueued over %d trials", jobs, crashTrials)
	}
	if midRefit == 0 {
		t.Errorf("no kill landed while a refit job was running; make the refits longer")
	}
	if b, err := os.ReadFile(logPath); err == nil && strings.Contains(string(b), "panic:") {
		t.Errorf("a child panicked (see its log)")
	}
}

// logFile opens the children's log for appending a marker line; the file
// is closed when the test ends.
func logFile(t *testing.T, path string) *os.File {
	t.Helper()
	f, err := os.OpenFile(path, os.O_CREATE|os.O_WRONLY|os.O_APPEND, 0o644)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { f.Close() })
	return f
}

// dumpJobs lists the refit jobs for a failure message.
func dumpJobs(db *testDB) string {
	rows, err := db.pool.Query(context.Background(), `SELECT id, state, attempt, args::text, created_at, attempted_at, coalesce(errors::text, '') FROM river_job WHERE kind = 'curvewatch_refit' ORDER BY id`)
	if err != nil {
		return err.Error()
	}
	defer rows.Close()
	var b strings.Builder
	for rows.Next() {
		var id int64
		var attempt int
		var state, args, errs string
		var created time.Time
		var attempted *time.Time
		if err := rows.Scan(&id, &state, &attempt, &args, &created, &attempted, &errs); err != nil {
			return err.Error()
		}
		at := "-"
		if attempted != nil {
			at = attempted.Format("15:04:05.000")
		}
		if len(errs) > 300 {
			errs = errs[:300]
		}
		fmt.Fprintf(&b, "%d %s attempt=%d %s created=%s attempted=%s %s\n", id, state, attempt, args, created.Format("15:04:05.000"), at, errs)
	}
	return b.String()
}
