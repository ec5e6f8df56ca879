package main

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/internal/pgtest"
)

func TestMain(m *testing.M) { pgtest.Main(m) }

// riverDB creates, in a fresh test schema, a sonde table with a day of
// invented hourly readings from two sites, and returns the database URL
// (its search_path is the schema) and the schema.
func riverDB(t *testing.T) (url, schema string) {
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
		CREATE TYPE site_kind AS ENUM ('pool', 'riffle');
		CREATE TABLE sonde_readings (
			observed_at      timestamptz NOT NULL,
			logged_text      text,
			site             text NOT NULL,
			habitat          site_kind,
			dissolved_oxygen double precision,
			water_temp       real,
			flow             double precision,
			hour_of_day      integer,
			conductivity     numeric(7,1),
			probe_serial     bigint,
			extra            jsonb
		);
		INSERT INTO sonde_readings
		SELECT t, t::text, s, CASE WHEN s = 'S07' THEN 'pool' ELSE 'riffle' END::site_kind,
		       9 - 0.2 * h, 12 + 0.1 * h, 3.5 + 0.05 * h, h, 410 + h, 7001, '{}'
		FROM generate_series(timestamptz '2025-06-01 00:00Z', '2025-06-01 23:00Z', interval '1 hour') AS t,
		     LATERAL (SELECT extract(hour FROM t AT TIME ZONE 'UTC')::int AS h) AS hh,
		     unnest(ARRAY['S07', 'S12']) AS s;`)
	if err != nil {
		t.Fatalf("create the source table: %v", err)
	}
	return url, schema
}

// writeConfig writes a config for one or more models under dir and
// returns its path; {DB}, {SCHEMA} and {TABLE} are filled in.
func writeConfig(t *testing.T, url, schema, text string) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "curvewatch.yaml")
	text = strings.NewReplacer("{DB}", url, "{SCHEMA}", schema, "{TABLE}", schema+".sonde_readings").Replace(text)
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// goodModel is a model the river table satisfies; the cases below change
// one thing in it.
const goodModel = `  - name: sonde-07-oxygen
    schedule: "0 3 * * *"
    source:
      table: {TABLE}
      time: observed_at
      where: site = 'S07'
      window: 30d
    spec:
      response: dissolved_oxygen
      terms:
        - curve: water_temp
        - curve: flow
        - curve: hour_of_day
          basis: cyclic
          period: [0, 24]
        - linear: conductivity
        - factor: habitat
`

func configHead(url string) string {
	return "database: " + url + "\nschema: {SCHEMA}\ntimezone: Europe/London\nmodels:\n"
}

func TestValidateGood(t *testing.T) {
	t.Parallel()
	url, schema := riverDB(t)
	second := strings.NewReplacer("sonde-07-oxygen", "sonde-12-flow", "site = 'S07'", "site = 'S12' AND probe_serial > 7000",
		`"0 3 * * *"`, `"@every 6h"`, "- factor: habitat", "- factor: probe_serial").Replace(goodModel)
	path := writeConfig(t, url, schema, configHead(url)+goodModel+second)
	r := cli(t, "validate", "--config", path)
	r.wantCode(t, exitOK)
	if r.stderr != "" {
		t.Errorf("stderr is not empty:\n%s", r.stderr)
	}
	wants := []string{
		"config " + path + ": 2 models; schema " + schema + "; listen 127.0.0.1:9464; time zone Europe/London\n",
		"database: connected to 127.0.0.1 port ",
		"; schema " + schema + " not migrated yet",
		"model sonde-07-oxygen: table " + schema + ".sonde_readings (time observed_at timestamp with time zone; where site = 'S07'; window 30d, overlap 1h); " +
			"columns dissolved_oxygen double precision, water_temp real, flow double precision, hour_of_day integer, conductivity numeric(7,1), habitat site_kind; " +
			`schedule "0 3 * * *", next run `,
		"model sonde-12-flow: table " + schema + ".sonde_readings (time observed_at timestamp with time zone; where site = 'S12' AND probe_serial > 7000;",
		`probe_serial bigint; schedule "@every 6h", next run `,
	}
	for _, w := range wants {
		if !strings.Contains(r.stdout, w) {
			t.Errorf("stdout lacks %q:\n%s", w, r.stdout)
		}
	}
	if !regexp.MustCompile(`next run \d{4}-\d\d-\d\d 03:00 (BST|GMT) \(Europe/London\)\n`).MatchString(r.stdout) {
		t.Errorf("the first model's next run is not at 03:00 London time:\n%s", r.stdout)
	}
	if strings.Contains(r.stdout, "sslmode") || strings.Contains(r.stdout, "postgres://") {
		t.Errorf("stdout shows the connection string:\n%s", r.stdout)
	}
	if !strings.HasSuffix(r.stdout, "\nno problems found in "+path+"\n") {
		t.Errorf("stdout does not end by saying all is well:\n%s", r.stdout)
	}
	if n := strings.Count(r.stdout, "\nmodel "); n != 2 {
		t.Errorf("%d model lines, want one per model:\n%s", n, r.stdout)
	}

	// Migrated, validate says so.
	if r := cli(t, "migrate", "--config", path); r.code != exitOK {
		t.Fatalf("migrate: %d\n%s", r.code, r.stderr)
	}
	r = cli(t, "validate", "--config", path)
	r.wantCode(t, exitOK)
	if !regexp.MustCompile(`; schema ` + schema + ` at migration \d+ \(up to date\)`).MatchString(r.stdout) {
		t.Errorf("validate does not report the migration:\n%s", r.stdout)
	}
}

// Each broken model gives exit 1 and one clear line naming the config
// line, the key and what is wrong.
func TestValidateProblems(t *testing.T) {
	t.Parallel()
	url, schema := riverDB(t)
	cases := []struct {
		name    string
		replace []string // old, new pairs applied to goodModel
		want    string   // the problem line (after "curvewatch.yaml:")
	}{
		{"missing column", []string{"response: dissolved_oxygen", "response: dissolved_oxygn"},
			`:13: models[0].spec: response column "dissolved_oxygn" is not in table {TABLE}: did you mean "dissolved_oxygen"?`},
		{"missing term column", []string{"curve: flow", "curve: discharge"},
			`:16: models[0].spec.terms[1]: curve column "discharge" is not in table {TABLE} (it has observed_at, logged_text, site, habitat, dissolved_oxygen, water_temp, flow, hour_of_day and 3 more)`},
		{"bad where", []string{"where: site = 'S07'", "where: sitee = 'S07'"},
			`:10: models[0].source.where: PostgreSQL rejects the where predicate: column "sitee" does not exist`},
		{"where not boolean", []string{"where: site = 'S07'", "where: site"},
			`:10: models[0].source.where: PostgreSQL rejects the where predicate: argument of WHERE must be type boolean, not type text`},
		{"where with a second statement", []string{"where: site = 'S07'", `where: "true); DELETE FROM {TABLE}; SELECT (true"`},
			`:10: models[0].source.where: PostgreSQL rejects the where predicate: cannot insert multiple commands into a prepared statement`},
		{"time column of text", []string{"time: observed_at", "time: logged_text"},
			`:9: models[0].source.time: column logged_text has type text, not a time type: the window and the watermark need timestamp, timestamp with time zone or date`},
		{"missing time column", []string{"time: observed_at", "time: observed"},
			`:9: models[0].source.time: column "observed" is not in table {TABLE}: did you mean "observed_at"?`},
		{"factor of decimals", []string{"linear: conductivity", "factor: conductivity"},
			`:20: models[0].spec.terms[3]: factor column conductivity has type numeric(7,1): a factor is read as levels`},
		{"curve of text", []string{"curve: water_temp", "curve: site"},
			`:15: models[0].spec.terms[0]: curve column site has type text: a curve is read as a number`},
		{"curve of json", []string{"linear: conductivity", "linear: extra"},
			`:20: models[0].spec.terms[3]: linear column extra has type jsonb: a linear is read as a number`},
		{"missing table", []string{"table: {TABLE}", "table: {SCHEMA}.sonde_reading"},
			`:8: models[0].source.table: table {SCHEMA}.sonde_reading does not exist in schema "{SCHEMA}"`},
		{"missing schema", []string{"table: {TABLE}", "table: nowhere_schema.sonde_readings"},
			`:8: models[0].source.table: schema "nowhere_schema" does not exist`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			t.Parallel()
			model := goodModel
			for i := 0; i < len(c.replace); i += 2 {
				if !strings.Contains(model, c.replace[i]) {
					t.Fatalf("the model has no %q", c.replace[i])
				}
				model = strings.Replace(model, c.replace[i], c.replace[i+1], 1)
			}
			path := writeConfig(t, url, schema, configHead(url)+model)
			r := cli(t, "validate", "--config", path)
			r.wantCode(t, exitFailed)
			want := path + strings.NewReplacer("{TABLE}", schema+".sonde_readings", "{SCHEMA}", schema).Replace(c.want)
			r.wantStderr(t, want, "validate: "+path+": 1 problem (listed above); fix them and run again\n")
			if n := strings.Count(r.stderr, "\n"); n != 2 {
				t.Errorf("want one problem line and the count, got %d lines:\n%s", n, r.stderr)
			}
			if !strings.Contains(r.stdout, "model sonde-07-oxygen: ") {
				t.Errorf("stdout lacks the model line:\n%s", r.stdout)
			}
		})
	}
	// The where with a second statement deleted nothing.
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	var n int
	if err := conn.QueryRow(ctx, "SELECT count(*) FROM sonde_readings").Scan(&n); err != nil || n != 48 {
		t.Errorf("the source table has %d rows (%v), want the 48 it was given", n, err)
	}
}

// Problems in a spec file name the spec file's line; config problems and
// database problems are reported together.
func TestValidateSpecFileAndConfigProblems(t *testing.T) {
	t.Parallel()
	url, schema := riverDB(t)
	path := writeConfig(t, url, schema, configHead(url)+`  - name: sonde-12
    schedule: "0 3 * *"
    source: {table: {TABLE}, time: observed_at, window: 30d}
    spec_file: sonde.yaml
`)
	spec := "name: x\nresponse: dissolved_oxygen\nterms:\n  - curve: water_temperature\n"
	if err := os.WriteFile(filepath.Join(filepath.Dir(path), "sonde.yaml"), []byte(spec), 0o644); err != nil {
		t.Fatal(err)
	}
	r := cli(t, "validate", "--config", path)
	r.wantCode(t, exitFailed)
	r.wantStderr(t,
		path+`:6: models[0].schedule: "0 3 * *" is not a 5-field cron expression or @every duration: it has 4 fields`,
		path+`:8: models[0].spec_file: sonde.yaml line 4: terms[0]: curve column "water_temperature" is not in table `+schema+`.sonde_readings: did you mean "water_temp"?`,
		"2 problems (listed above)")
}

func TestValidateOffline(t *testing.T) {
	t.Parallel()
	path := writeConfig(t, "postgres://nobody@127.0.0.1:1/none", "cw", configHead("postgres://nobody@127.0.0.1:1/none")+goodModel)
	r := cli(t, "validate", "--config", path, "--offline")
	r.wantCode(t, exitOK)
	for _, w := range []string{"database: not checked (--offline)\n", "model sonde-07-oxygen: table cw.sonde_readings (time observed_at; where site = 'S07'; window 30d, overlap 1h); columns dissolved_oxygen, water_temp, flow, hour_of_day, conductivity, habitat; schedule \"0 3 * * *\", next run "} {
		if !strings.Contains(r.stdout, w) {
			t.Errorf("stdout lacks %q:\n%s", w, r.stdout)
		}
	}
}

// An unreachable database is one clear line naming the server and what to
// check, with no password in it.
func TestValidateUnreachable(t *testing.T) {
	t.Parallel()
	const password = "pw-Zq81-never-shown"
	db := fmt.Sprintf("postgres://curvewatch:%s@127.0.0.1:1/river?connect_timeout=2", password)
	path := writeConfig(t, db, "cw", configHead(db)+goodModel)
	r := cli(t, "validate", "--config", path, "--timeout", "3s")
	r.wantCode(t, exitFailed)
	r.wantStderr(t, path+":1: database: cannot reach the database at 127.0.0.1 port 1 (database river, user curvewatch): ",
		"check that PostgreSQL is running there", "1 problem (listed above)")
	if strings.Contains(r.stdout+r.stderr, password) {
		t.Errorf("the output shows the password:\n%s\n%s", r.stdout, r.stderr)
	}
	if n := strings.Count(r.stderr, "\n"); n != 2 {
		t.Errorf("want one problem line and the count:\n%s", r.stderr)
	}
}

func TestValidateUsage(t *testing.T) {
	r := cli(t, "validate")
	r.wantCode(t, exitUsage)
	r.wantStderr(t, "--config is required")
	r = cli(t, "validate", "--config", filepath.Join(t.TempDir(), "none.yaml"))
	r.wantCode(t, exitFailed)
	r.wantStderr(t, "cannot read the config")
}
