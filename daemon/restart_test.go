package daemon

import (
	"bytes"
	"context"
	"fmt"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/curvewatch/curvewatch/internal/pgtest"
)

// pgCtl runs pg_ctl on the cluster's data directory, as the postgres user
// when the test runs as root (as pgtest does; pgtest.Cluster has no way to
// stop and start its server without removing it, so the test drives
// pg_ctl itself).
func pgCtl(t *testing.T, c *pgtest.Cluster, args ...string) {
	t.Helper()
	bin := ""
	if out, err := exec.Command("pg_config", "--bindir").Output(); err == nil {
		bin = strings.TrimSpace(string(out))
	}
	if _, err := os.Stat(filepath.Join(bin, "pg_ctl")); bin == "" || err != nil {
		matches, _ := filepath.Glob("/usr/lib/postgresql/*/bin/pg_ctl")
		if len(matches) == 0 {
			t.Fatal("no pg_ctl found")
		}
		bin = filepath.Dir(matches[len(matches)-1])
	}
	argv := []string{filepath.Join(bin, "pg_ctl"), "-D", filepath.Join(c.Dir, "data")}
	if os.Geteuid() == 0 {
		argv = append([]string{"runuser", "-u", "postgres", "--"}, argv...)
	}
	argv = append(argv, args...)
	cmd := exec.Command(argv[0], argv[1:]...)
	cmd.Dir = c.Dir
	var out bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &out
	if err := cmd.Run(); err != nil {
		t.Fatalf("%s: %v: %s", strings.Join(argv, " "), err, out.String())
	}
}

// readyz returns the status code of /readyz, or 0 when it cannot be reached.
func readyz(a *App) int {
	client := http.Client{Timeout: 5 * time.Second}
	resp, err := client.Get(fmt.Sprintf("http://%s/readyz", a.Addr()))
	if err != nil {
		return 0
	}
	resp.Body.Close()
	return resp.StatusCode
}

// PostgreSQL restarted mid-run: the test stops its own throwaway cluster
// for a few seconds while refits are due and starts it again on the same
// data directory and port. The daemon recovers by itself: /readyz goes to
// 503 and back to 200, and slots after the restart get their fits.
func TestRecoversFromDatabaseRestart(t *testing.T) {
	if testing.Short() {
		t.Skip("starts and restarts a cluster of its own; skipped with -short")
	}
	t.Parallel()
	ctx := context.Background()
	cluster, err := pgtest.StartCluster(ctx)
	if err != nil {
		t.Fatalf("start a throwaway cluster: %v", err)
	}
	t.Cleanup(func() {
		if err := cluster.Stop(); err != nil {
			t.Error(err)
		}
	})
	const schema = "restart_test"
	url, err := pgtest.WithSearchPath(cluster.URL, schema)
	if err != nil {
		t.Fatal(err)
	}
	pool, err := pgxpool.New(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(pool.Close)
	if _, err := pool.Exec(ctx, `
		CREATE SCHEMA `+pgx.Identifier{schema}.Sanitize()+`;
		SELECT setseed(0.23);
		CREATE TABLE readings (observed_at timestamptz NOT NULL, site text NOT NULL, water_temp double precision, dissolved_oxygen double precision);
		INSERT INTO readings
		SELECT now() - interval '1 hour' - i * interval '1 hour', CASE WHEN i % 2 = 0 THEN 'S05' ELSE 'S07' END, temp,
		       12 - 0.25 * temp + 0.8 * sin(temp / 3) + 0.3 * (random() + random() + random() - 1.5)
		FROM (SELECT i, 4 + 20 * random() AS temp FROM generate_series(0, 299) AS i) AS g;`); err != nil {
		t.Fatalf("create the source table: %v", err)
	}
	db := &testDB{url: url, schema: schema, pool: pool}
	a, _ := startApp(t, testConfig(t, db, "@every 1s"), Options{Workers: 2, JobTimeout: 10 * time.Second})
	waitReady(t, a, 15*time.Second)
	waitFor(t, 15*time.Second, "two succeeded fits before the restart", func() (bool, error) {
		return db.count(t, `SELECT count(*) FROM fits WHERE status = 'succeeded'`) >= 2, nil
	})
	if code := readyz(a); code != http.StatusOK {
		t.Fatalf("/readyz before the restart: %d", code)
	}

	// Stop the server (fast: connections are closed, as in a restart).
	pool.Reset()
	pgCtl(t, cluster, "-m", "fast", "-w", "stop")
	down := time.Now()
	waitFor(t, 10*time.Second, "/readyz to say not ready with the database down", func() (bool, error) {
		return readyz(a) == http.StatusServiceUnavailable, nil
	})
	// Keep it down for 3 s: three slots fall due meanwhile.
	time.Sleep(3*time.Second - time.Since(down))
	opts := fmt.Sprintf("-p %d -c listen_addresses=127.0.0.1 -c unix_socket_directories=%s -c fsync=off -c synchronous_commit=off -c full_page_writes=off -c max_connections=200", cluster.Port, cluster.Dir)
	pgCtl(t, cluster, "-o", opts, "-l", filepath.Join(cluster.Dir, "server.log"), "-w", "-t", "60", "start")
	up := time.Now()
	t.Logf("the database was down for %s", up.Sub(down).Round(time.Millisecond))

	waitFor(t, 30*time.Second, "/readyz to return to 200", func() (bool, error) {
		return readyz(a) == http.StatusOK, nil
	})
	readyAfter := time.Since(up)
	waitFor(t, 30*time.Second, "two succeeded fits for slots after the restart", func() (bool, error) {
		var n int
		err := pool.QueryRow(ctx, `SELECT count(*) FROM fits WHERE status = 'succeeded' AND slot > $1`, up).Scan(&n)
		return err == nil && n >= 2, nil
	})
	fitsAfter := time.Since(up)
	var downSlots int
	if err := pool.QueryRow(ctx, `SELECT count(*) FROM fits WHERE status = 'succeeded' AND slot BETWEEN $1 AND $2`, down, up).Scan(&downSlots); err != nil {
		t.Fatal(err)
	}
	t.Logf("/readyz 200 again %s after the start; two new slots fitted %s after it; %d slots due while down were fitted",
		readyAfter.Round(time.Millisecond), fitsAfter.Round(time.Millisecond), downSlots)
	if n := db.count(t, `SELECT count(*) FROM (SELECT 1 FROM fits GROUP BY model, slot HAVING count(*) > 1) d`); n != 0 {
		t.Errorf("%d slots have more than one fit", n)
	}
	if n := db.count(t, `SELECT count(*) FROM fits WHERE status <> 'succeeded'`); n != 0 {
		t.Errorf("%d fits did not succeed (refits due while the database was down should be retried, not recorded as failed)", n)
	}
	if code, _ := get(t, a, "/healthz"); code != http.StatusOK {
		t.Errorf("/healthz after the restart: %d", code)
	}
}
