package main

import (
	"context"
	"fmt"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// baselineModel is a model of the recentReadings table; NAME is replaced.
const baselineModel = `  - name: NAME
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
`

// baseline pin replaces the automatic baseline with a named succeeded fit
// and says what it replaced; show prints it; a fit of another model, a
// failed or unconverged fit, and an unknown id are refused with exit 1.
func TestBaselinePinAndShow(t *testing.T) {
	t.Parallel()
	url, schema := recentReadings(t)
	path := writeConfig(t, url, schema, configHead(url)+
		strings.ReplaceAll(baselineModel, "NAME", "sonde-oxygen")+
		strings.ReplaceAll(baselineModel, "NAME", "other-oxygen"))

	// Before any fit: the tables do not exist yet, then no baseline.
	cli(t, "migrate", "--config", path).wantCode(t, exitOK)
	r := cli(t, "baseline", "show", "--config", path, "--model", "sonde-oxygen")
	r.wantCode(t, exitOK)
	if !strings.Contains(r.stdout, "has no baseline yet") {
		t.Errorf("show before any fit:\n%s", r.stdout)
	}

	cli(t, "run", "--config", path, "--model", "sonde-oxygen").wantCode(t, exitOK)
	cli(t, "run", "--config", path, "--model", "sonde-oxygen").wantCode(t, exitOK)
	cli(t, "run", "--config", path, "--model", "other-oxygen").wantCode(t, exitOK)

	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(context.Background())
	var first, second, other int64
	if err := conn.QueryRow(ctx, `SELECT min(id), max(id) FROM fits WHERE model = 'sonde-oxygen'`).Scan(&first, &second); err != nil {
		t.Fatal(err)
	}
	if err := conn.QueryRow(ctx, `SELECT id FROM fits WHERE model = 'other-oxygen'`).Scan(&other); err != nil {
		t.Fatal(err)
	}
	// A failed refit and an unconverged fit of the model (a copy of the
	// first fit's document with the unconverged status).
	var failed, unconverged int64
	if err := conn.QueryRow(ctx, `INSERT INTO fits (model, status, reason, started_at, finished_at)
		VALUES ('sonde-oxygen', 'failed', 'no rows in the window', now(), now()) RETURNING id`).Scan(&failed); err != nil {
		t.Fatal(err)
	}
	if err := conn.QueryRow(ctx, `INSERT INTO fits (model, status, started_at, finished_at, rows_read, rows_used, converged, document)
		SELECT model, 'unconverged', started_at, finished_at, rows_read, rows_used, false, document FROM fits WHERE id = $1 RETURNING id`, first).Scan(&unconverged); err != nil {
		t.Fatal(err)
	}

	r = cli(t, "baseline", "show", "--config", path, "--model", "sonde-oxygen")
	r.wantCode(t, exitOK)
	if !strings.Contains(r.stdout, fmt.Sprintf("baseline is fit %d (succeeded", first)) {
		t.Errorf("show after the first run (auto-pinned):\n%s", r.stdout)
	}

	r = cli(t, "baseline", "pin", "--config", path, "--model", "sonde-oxygen", "--fit", fmt.Sprint(second))
	r.wantCode(t, exitOK)
	for _, want := range []string{
		fmt.Sprintf("model sonde-oxygen: pinned fit %d (succeeded", second),
		fmt.Sprintf("it replaces fit %d (succeeded", first),
		"manual run",
	} {
		if !strings.Contains(r.stdout, want) {
			t.Errorf("pin lacks %q:\n%s", want, r.stdout)
		}
	}
	var pinned int64
	var by string
	if err := conn.QueryRow(ctx, `SELECT fit_id, pinned_by FROM baselines WHERE model = 'sonde-oxygen'`).Scan(&pinned, &by); err != nil {
		t.Fatal(err)
	}
	if pinned != second || by != "operator" {
		t.Errorf("baselines row: fit %d by %s, want fit %d by operator", pinned, by, second)
	}
	r = cli(t, "baseline", "show", "--config", path, "--model", "sonde-oxygen")
	r.wantCode(t, exitOK)
	if !strings.Contains(r.stdout, fmt.Sprintf("baseline is fit %d (succeeded", second)) {
		t.Errorf("show after pin:\n%s", r.stdout)
	}
	// Pinning the baseline again says so.
	r = cli(t, "baseline", "pin", "--config", path, "--model", "sonde-oxygen", "--fit", fmt.Sprint(second))
	r.wantCode(t, exitOK)
	if !strings.Contains(r.stdout, "was already its baseline") {
		t.Errorf("pin of the baseline again:\n%s", r.stdout)
	}

	refused := []struct {
		name string
		args []string
		code int
		want []string
	}{
		{"fit of another model", []string{"pin", "--model", "sonde-oxygen", "--fit", fmt.Sprint(other)}, exitFailed,
			[]string{fmt.Sprintf("fit %d is a fit of model \"other-oxygen\", not of \"sonde-oxygen\"", other)}},
		{"failed fit", []string{"pin", "--model", "sonde-oxygen", "--fit", fmt.Sprint(failed)}, exitFailed,
			[]string{fmt.Sprintf("fit %d failed (no rows in the window)", failed), "only a succeeded fit"}},
		{"unconverged fit", []string{"pin", "--model", "sonde-oxygen", "--fit", fmt.Sprint(unconverged)}, exitFailed,
			[]string{fmt.Sprintf("fit %d is unconverged", unconverged), "only a succeeded fit"}},
		{"unknown id", []string{"pin", "--model", "sonde-oxygen", "--fit", "987654"}, exitFailed,
			[]string{"there is no fit 987654", "curvewatch history"}},
		{"unknown model", []string{"pin", "--model", "no-such", "--fit", fmt.Sprint(second)}, exitFailed,
			[]string{`no model "no-such"`}},
		{"no fit flag", []string{"pin", "--model", "sonde-oxygen"}, exitUsage, []string{"--fit is required"}},
		{"fit flag on show", []string{"show", "--model", "sonde-oxygen", "--fit", "1"}, exitUsage, []string{"unknown flag --fit"}},
	}
	for _, c := range refused {
		args := append([]string{"baseline", c.args[0], "--config", path}, c.args[1:]...)
		r := cli(t, args...)
		if r.code != c.code {
			t.Errorf("%s: exit %d, want %d\nstdout:\n%s\nstderr:\n%s", c.name, r.code, c.code, r.stdout, r.stderr)
			continue
		}
		r.wantStderr(t, c.want...)
	}
	// None of the refusals moved the baseline.
	if err := conn.QueryRow(ctx, `SELECT fit_id FROM baselines WHERE model = 'sonde-oxygen'`).Scan(&pinned); err != nil {
		t.Fatal(err)
	}
	if pinned != second {
		t.Errorf("after the refusals the baseline is fit %d, want %d", pinned, second)
	}
}

// baseline without an action, or with an unknown one, is a usage error.
func TestBaselineUsage(t *testing.T) {
	r := cli(t, "baseline")
	r.wantCode(t, exitUsage)
	r.wantStderr(t, "baseline pin or baseline show")
	r = cli(t, "baseline", "unpin", "--model", "m")
	r.wantCode(t, exitUsage)
	r.wantStderr(t, `unknown baseline action "unpin"`, "curvewatch baseline --help")
}
