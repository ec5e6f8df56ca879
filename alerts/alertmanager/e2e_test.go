package alertmanager_test

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/alerts/alertmanager"
	"github.com/curvewatch/curvewatch/internal/promtest"
)

// gettableAlert is the part of Alertmanager's v2 gettableAlert the test
// reads.
type gettableAlert struct {
	Labels       map[string]string `json:"labels"`
	Annotations  map[string]string `json:"annotations"`
	StartsAt     time.Time         `json:"startsAt"`
	EndsAt       time.Time         `json:"endsAt"`
	GeneratorURL string            `json:"generatorURL"`
	Status       struct {
		State string `json:"state"`
	} `json:"status"`
}

// listAlerts is GET {base}/api/v2/alerts (the default filter: active,
// silenced, inhibited and unprocessed alerts).
func listAlerts(t *testing.T, base string) []gettableAlert {
	t.Helper()
	resp, err := http.Get(base + "/api/v2/alerts")
	if err != nil {
		t.Fatalf("GET alerts: %v", err)
	}
	defer resp.Body.Close()
	body, _ := io.ReadAll(resp.Body)
	if resp.StatusCode != http.StatusOK {
		t.Fatalf("GET alerts: %s: %s", resp.Status, body)
	}
	var as []gettableAlert
	if err := json.Unmarshal(body, &as); err != nil {
		t.Fatalf("GET alerts: %v: %s", err, body)
	}
	return as
}

// waitFor polls the alert list until cond holds for it, failing after 10 s.
func waitFor(t *testing.T, base, what string, cond func([]gettableAlert) bool) []gettableAlert {
	t.Helper()
	deadline := time.Now().Add(10 * time.Second)
	tick := time.NewTicker(50 * time.Millisecond)
	defer tick.Stop()
	for {
		as := listAlerts(t, base)
		if cond(as) {
			return as
		}
		if time.Now().After(deadline) {
			b, _ := json.MarshalIndent(as, "", "  ")
			t.Fatalf("Alertmanager never showed %s; alerts:\n%s", what, b)
		}
		<-tick.C
	}
}

func find(as []gettableAlert, model, term string) *gettableAlert {
	for i, a := range as {
		if a.Labels["model"] == model && a.Labels["term"] == term {
			return &as[i]
		}
	}
	return nil
}

// TestAlertmanagerEndToEnd posts to a real Alertmanager (Debian package
// prometheus-alertmanager): a firing alert shows with our labels and
// annotations, a resend keeps it, and its resolution removes it from the
// list of alerts.
func TestAlertmanagerEndToEnd(t *testing.T) {
	base := promtest.StartAlertmanager(t)
	n := alertmanager.New(base, nil)
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()

	firedAt := time.Now().Add(-time.Minute).Truncate(time.Second)
	s := alerts.Status{Key: alerts.Key{Model: "sonde-07-oxygen", Term: "water_temp", Kind: alerts.KindCurveShift},
		State: alerts.StateFiring, Since: firedAt, FiringSince: firedAt, Consecutive: 2,
		Summary: "curve water_temp shifted by 0.82 mg/L beyond its 99% band",
		Numbers: map[string]any{"score": 1.7}}
	fire := alerts.NewAlert(s, "http://127.0.0.1:9464")
	if retry, err := n.Notify(ctx, alerts.Delivery{ID: 1, Receiver: n.Name(), Alert: fire}); err != nil {
		t.Fatalf("post firing alert: %v (retry %v)", err, retry)
	}
	// A model-wide alert alongside, to see that it is kept apart.
	stale := alerts.NewAlert(alerts.Status{Key: alerts.Key{Model: "sonde-07-oxygen", Kind: alerts.KindDataStale},
		State: alerts.StateFiring, Since: firedAt, FiringSince: firedAt, Summary: "no rows for 3 days"}, "")
	if _, err := n.Notify(ctx, alerts.Delivery{ID: 2, Receiver: n.Name(), Alert: stale}); err != nil {
		t.Fatalf("post model-wide alert: %v", err)
	}

	as := waitFor(t, base, "the firing alerts", func(as []gettableAlert) bool {
		return find(as, "sonde-07-oxygen", "water_temp") != nil && find(as, "sonde-07-oxygen", "") != nil
	})
	got := find(as, "sonde-07-oxygen", "water_temp")
	wantLabels := map[string]string{"alertname": "CurvewatchCurveShift", "model": "sonde-07-oxygen",
		"term": "water_temp", "severity": "warning", "kind": "curve_shift"}
	if fmt.Sprint(got.Labels) != fmt.Sprint(wantLabels) {
		t.Errorf("labels %v, want %v", got.Labels, wantLabels)
	}
	wantAnn := map[string]string{"summary": fire.Summary, "numbers": `{"score":1.7}`,
		"dashboard": "http://127.0.0.1:9464/models/sonde-07-oxygen"}
	if fmt.Sprint(got.Annotations) != fmt.Sprint(wantAnn) {
		t.Errorf("annotations %v, want %v", got.Annotations, wantAnn)
	}
	if !got.StartsAt.Equal(firedAt) {
		t.Errorf("startsAt %v, want %v", got.StartsAt, firedAt)
	}
	if d := time.Until(got.EndsAt); d < alertmanager.ResendHorizon-time.Minute || d > alertmanager.ResendHorizon {
		t.Errorf("endsAt %v is %v away, want about %v", got.EndsAt, d, alertmanager.ResendHorizon)
	}
	if got.GeneratorURL != fire.URL {
		t.Errorf("generatorURL %q, want %q", got.GeneratorURL, fire.URL)
	}
	if got.Status.State != "active" && got.Status.State != "unprocessed" {
		t.Errorf("status %q, want active (or unprocessed, just after the post)", got.Status.State)
	}
	if s := find(as, "sonde-07-oxygen", ""); s.Labels["severity"] != "critical" || s.Labels["alertname"] != "CurvewatchDataStale" {
		t.Errorf("model-wide alert labels %v", s.Labels)
	}

	// A resend keeps the alert, with endsAt pushed forward.
	before := got.EndsAt
	n.Now = func() time.Time { return time.Now().Add(time.Minute) }
	if err := n.Resend(ctx, []alerts.Alert{fire, stale}); err != nil {
		t.Fatalf("resend: %v", err)
	}
	waitFor(t, base, "the resent alert with a later endsAt", func(as []gettableAlert) bool {
		a := find(as, "sonde-07-oxygen", "water_temp")
		return a != nil && a.EndsAt.After(before)
	})
	n.Now = time.Now

	// Resolved now: Alertmanager's list no longer shows it; the other
	// alert stays. (Checked against Alertmanager 0.25: GET /api/v2/alerts
	// leaves out alerts whose endsAt has passed, whatever the active,
	// silenced, inhibited and unprocessed filters say; they never show
	// with a "resolved" state.)
	s.State, s.Since, s.Consecutive = alerts.StateResolved, time.Now(), 0
	res := alerts.NewAlert(s, "http://127.0.0.1:9464")
	if retry, err := n.Notify(ctx, alerts.Delivery{ID: 3, Receiver: n.Name(), Alert: res}); err != nil {
		t.Fatalf("post resolved alert: %v (retry %v)", err, retry)
	}
	waitFor(t, base, "the resolved alert gone", func(as []gettableAlert) bool {
		return find(as, "sonde-07-oxygen", "water_temp") == nil && find(as, "sonde-07-oxygen", "") != nil
	})
}

// TestAlertmanagerWrongPath checks the classification against the real
// binary: a base URL with a path Alertmanager does not serve gets a 4xx,
// which is not retried.
func TestAlertmanagerWrongPath(t *testing.T) {
	base := promtest.StartAlertmanager(t)
	n := alertmanager.New(base+"/not-alertmanager", nil)
	a := alerts.NewAlert(alerts.Status{Key: alerts.Key{Model: "m", Kind: alerts.KindLevelShift},
		State: alerts.StateFiring, Since: time.Now(), FiringSince: time.Now()}, "")
	retry, err := n.Notify(context.Background(), alerts.Delivery{Alert: a})
	if err == nil || retry {
		t.Fatalf("wrong path: err %v retry %v, want a 4xx that is not retried", err, retry)
	}
	t.Logf("Alertmanager said: %v", err)
}
