package main

import (
	"context"
	"fmt"
	"regexp"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/internal/pgtest"
	"github.com/curvewatch/curvewatch/migrations"
)

// migrate up, again (nothing to do), down and up again, printing the
// version before and after each time; the source table is never touched.
func TestMigrateUpDownUp(t *testing.T) {
	t.Parallel()
	url, schema := riverDB(t)
	path := writeConfig(t, url, schema, configHead(url)+goodModel)
	latest := fmt.Sprintf("version %d (the latest)", migrations.Latest())
	steps := []struct {
		args          []string
		before, after string
	}{
		{nil, "version 0 (no migration applied)", latest},
		{nil, latest, latest},
		{[]string{"--down"}, latest, "version 0 (no migration applied)"},
		{nil, "version 0 (no migration applied)", latest},
	}
	for i, s := range steps {
		r := cli(t, append([]string{"migrate", "--config", path}, s.args...)...)
		r.wantCode(t, exitOK)
		want := fmt.Sprintf("schema %s: before: %s\nschema %s: after:  %s\n", schema, s.before, schema, s.after)
		if r.stdout != want {
			t.Errorf("step %d (%v): stdout\n%s\nwant\n%s", i, s.args, r.stdout, want)
		}
		if r.stderr != "" {
			t.Errorf("step %d: stderr: %s", i, r.stderr)
		}
	}
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	var n int
	if err := conn.QueryRow(ctx, "SELECT count(*) FROM sonde_readings").Scan(&n); err != nil || n != 48 {
		t.Errorf("the source table has %d rows (%v), want 48", n, err)
	}
}

// migrate needs only database and schema: other problems are a note.
func TestMigrateConfigProblems(t *testing.T) {
	t.Parallel()
	url, schema := pgtest.Schema(t)
	path := writeConfig(t, url, schema, configHead(url)+strings.Replace(goodModel, `"0 3 * * *"`, `"0 3 * *"`, 1))
	r := cli(t, "migrate", "--config", path)
	r.wantCode(t, exitOK)
	r.wantStderr(t, "migrate: note: "+path+" has 1 problem outside database and schema (run 'curvewatch validate --config "+path+"'); migrating anyway")

	for name, head := range map[string]string{
		"no database": "schema: {SCHEMA}\nmodels:\n",
		"bad schema":  "database: " + url + "\nschema: curve-watch\nmodels:\n",
		"unset env":   "database: ${CURVEWATCH_TEST_UNSET_VARIABLE}\nmodels:\n",
	} {
		path := writeConfig(t, url, schema, head+goodModel)
		r := cli(t, "migrate", "--config", path)
		r.wantCode(t, exitFailed)
		if !strings.Contains(r.stderr, "migrate: "+path+": 1 problem (listed above)") || !regexp.MustCompile(`\.yaml:\d+: (database|schema): |\.yaml:1: missing key "database"`).MatchString(r.stderr) {
			t.Errorf("%s: stderr does not name the problem:\n%s", name, r.stderr)
		}
	}
}

func TestMigrateUnreachable(t *testing.T) {
	t.Parallel()
	const password = "pw-Mg77-never-shown"
	db := "postgres://curvewatch:" + password + "@127.0.0.1:1/river?connect_timeout=2"
	path := writeConfig(t, db, "cw", configHead(db)+goodModel)
	r := cli(t, "migrate", "--config", path)
	r.wantCode(t, exitFailed)
	r.wantStderr(t, "cannot reach the database at 127.0.0.1:1")
	if strings.Contains(r.stdout+r.stderr, password) {
		t.Errorf("the output shows the password:\n%s", r.stderr)
	}
}
