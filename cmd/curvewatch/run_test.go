package main

import (
	"context"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/internal/pgtest"
)

// recentReadings creates, in a fresh schema, a table of 500 invented
// hourly sonde readings ending an hour ago, with noise from a seeded
// generator (setseed), and returns the URL and schema.
func recentReadings(t *testing.T) (url, schema string) {
	t.Helper()
	url, schema = pgtest.Schema(t)
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	_, err = conn.Exec(ctx, `
		SELECT setseed(0.42);
		CREATE TABLE readings (observed_at timestamptz NOT NULL, site text NOT NULL, water_temp double precision, dissolved_oxygen double precision);
		INSERT INTO readings
		SELECT t, CASE WHEN n % 2 = 0 THEN 'S05' ELSE 'S07' END, temp,
		       12 - 0.25 * temp + 0.8 * sin(temp / 3) + 0.3 * (random() + random() + random() - 1.5)
		FROM (SELECT t, row_number() OVER (ORDER BY t) AS n, 4 + 20 * random() AS temp
		      FROM generate_series(now() - interval '500 hours', now() - interval '1 hour', interval '1 hour') AS t) AS g;`)
	if err != nil {
		t.Fatalf("create the source table: %v", err)
	}
	return url, schema
}

// run refits a model from a real table and records it; a second run is
// compared with the first (the baseline); history lists both.
func TestRunAndHistory(t *testing.T) {
	t.Parallel()
	url, schema := recentReadings(t)
	path := writeConfig(t, url, schema, configHead(url)+`  - name: sonde-oxygen
    schedule: "0 3 * * *"
    source:
      table: {SCHEMA}.readings
      time: observed_at
      window: 30d
    spec:
      response: dissolved_oxygen
      terms:
        - curve: water_temp
          size: 8
        - factor: site
`)
	r := cli(t, "run", "--config", path, "--model", "sonde-oxygen")
	r.wantCode(t, exitOK)
	if !strings.Contains(r.stdout, "recorded as fit") || !strings.Contains(r.stdout, "this fit becomes the baseline") {
		t.Errorf("first run printed:\n%s", r.stdout)
	}
	r = cli(t, "run", "--config", path, "--model", "sonde-oxygen")
	// The same rows again: the comparison refuses identical data, so the
	// second fit is recorded without a verdict, and says why.
	r.wantCode(t, exitOK)
	if !strings.Contains(r.stdout, "no comparison: not compared") {
		t.Errorf("second run printed:\n%s", r.stdout)
	}
	h := cli(t, "history", "--config", path, "--model", "sonde-oxygen")
	h.wantCode(t, exitOK)
	if strings.Count(h.stdout, "succeeded") != 2 || !strings.Contains(h.stdout, "manual") {
		t.Errorf("history:\n%s", h.stdout)
	}
	bad := cli(t, "run", "--config", path, "--model", "no-such-model")
	bad.wantCode(t, exitFailed)
	if !strings.Contains(bad.stderr, `no model "no-such-model"`) {
		t.Errorf("unknown model: %s", bad.stderr)
	}
}
