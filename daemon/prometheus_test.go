package daemon

import (
	"encoding/json"
	"fmt"
	"net/http"
	"path/filepath"
	"strconv"
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/internal/promtest"
)

// End to end: a real Prometheus scrapes a running App, gets the model's
// series, and evaluates the example alerting rules against them.
func TestPrometheusScrapesTheApp(t *testing.T) {
	t.Parallel()
	db := newTestDB(t)
	// Hourly: the latest slot (the last full hour, which the test data
	// cover) runs at start.
	a, _ := startApp(t, testConfig(t, db, "0 * * * *"), Options{Workers: 1})
	waitReady(t, a, 15*time.Second)
	waitFor(t, 30*time.Second, "the latest slot's fit", func() (bool, error) {
		return db.count(t, `SELECT count(*) FROM fits WHERE status = 'succeeded'`) >= 1, nil
	})

	rules, err := filepath.Abs(filepath.Join("..", "examples", "prometheus", "curvewatch-rules.yml"))
	if err != nil {
		t.Fatal(err)
	}
	prom := promtest.StartPrometheus(t, []string{a.Addr().String()}, []string{rules})

	const wait = 30 * time.Second
	refits := promtest.WaitForQuery(t, prom, `curvewatch_refits_total{model="sonde-oxygen"}`, wait)
	outcomes := map[string]bool{}
	for _, s := range refits {
		outcomes[s.Metric["outcome"]] = true
		if s.Metric["job"] != "curvewatch" {
			t.Errorf("series %v: job %q", s.Metric, s.Metric["job"])
		}
	}
	for _, o := range []string{"succeeded", "unconverged", "failed"} {
		if !outcomes[o] {
			t.Errorf("no curvewatch_refits_total series with outcome %q: %v", o, refits)
		}
	}

	last := promtest.WaitForQuery(t, prom, `curvewatch_last_refit_success_timestamp_seconds{model="sonde-oxygen"}`, wait)
	if len(last) != 1 {
		t.Fatalf("%d last-success series, want 1: %v", len(last), last)
	}
	got, err := strconv.ParseFloat(last[0].Value, 64)
	if err != nil {
		t.Fatal(err)
	}
	// source: the finished_at the history recorded (microseconds; the
	// exposition keeps them to within float64 rounding).
	if n := db.count(t, `SELECT count(*) FROM fits WHERE status = 'succeeded' AND abs(extract(epoch FROM finished_at) - $1) < 0.001`, got); n != 1 {
		t.Errorf("last success %.6f is the finished_at of %d succeeded fits, want 1", got, n)
	}
	for _, q := range []string{`curvewatch_rows_fitted{model="sonde-oxygen"}`, `curvewatch_term_edf{model="sonde-oxygen"}`,
		`curvewatch_alerts_firing{model="sonde-oxygen"}`, `curvewatch_refit_duration_seconds_bucket{model="sonde-oxygen"}`} {
		promtest.WaitForQuery(t, prom, q, wait)
	}

	// The example rules load and evaluate healthily against real series.
	waitFor(t, wait, "the example rules to evaluate healthily", func() (bool, error) {
		groups, err := ruleGroups(prom)
		if err != nil {
			return false, err
		}
		n := 0
		for _, g := range groups {
			for _, r := range g.Rules {
				n++
				if r.Health != "ok" {
					return false, nil
				}
			}
		}
		return n > 0, nil
	})
	groups, _ := ruleGroups(prom)
	for _, g := range groups {
		for _, r := range g.Rules {
			if r.Type != "alerting" {
				t.Errorf("rule %s is %s, want alerting", r.Name, r.Type)
			}
			if r.Name == "CurvewatchRefitsStale" || r.Name == "CurvewatchDown" {
				if r.State != "inactive" {
					t.Errorf("%s is %s right after a successful refit, want inactive", r.Name, r.State)
				}
			}
		}
	}
}

type ruleGroup struct {
	Name  string `json:"name"`
	Rules []struct {
		Name   string `json:"name"`
		Type   string `json:"type"`
		Health string `json:"health"`
		State  string `json:"state"`
	} `json:"rules"`
}

// ruleGroups reads Prometheus's /api/v1/rules.
func ruleGroups(base string) ([]ruleGroup, error) {
	client := http.Client{Timeout: 5 * time.Second}
	resp, err := client.Get(base + "/api/v1/rules")
	if err != nil {
		return nil, err
	}
	defer resp.Body.Close()
	var out struct {
		Status string `json:"status"`
		Data   struct {
			Groups []ruleGroup `json:"groups"`
		} `json:"data"`
	}
	if err := json.NewDecoder(resp.Body).Decode(&out); err != nil {
		return nil, err
	}
	if out.Status != "success" {
		return nil, fmt.Errorf("/api/v1/rules: %s", resp.Status)
	}
	return out.Data.Groups, nil
}
