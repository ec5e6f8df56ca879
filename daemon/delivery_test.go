package daemon

import (
	"context"
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"sync"
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/alerts/webhook"
	"github.com/curvewatch/curvewatch/daemon/config"
	"github.com/curvewatch/curvewatch/internal/promtest"
)

// hookSink is a webhook receiver that checks every signature, refuses
// the first failFirst deliveries with 503, and keeps each accepted body by
// idempotency key.
type hookSink struct {
	t         *testing.T
	secret    string
	failFirst int

	mu       sync.Mutex
	attempts int
	byKey    map[string][]webhook.Body
}

func (h *hookSink) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	body, err := io.ReadAll(r.Body)
	if err != nil {
		http.Error(w, err.Error(), http.StatusBadRequest)
		return
	}
	if err := webhook.Verify(h.secret, r.Header, body, time.Now(), webhook.DefaultMaxSkew); err != nil {
		h.t.Errorf("a delivery with a bad signature: %v", err)
		http.Error(w, err.Error(), http.StatusUnauthorized)
		return
	}
	h.mu.Lock()
	defer h.mu.Unlock()
	h.attempts++
	if h.attempts <= h.failFirst {
		http.Error(w, "busy", http.StatusServiceUnavailable)
		return
	}
	var b webhook.Body
	if err := json.Unmarshal(body, &b); err != nil {
		h.t.Errorf("a delivery that is not JSON: %v", err)
		return
	}
	key := r.Header.Get(webhook.HeaderIdempotencyKey)
	if key == "" || key != b.Delivery {
		h.t.Errorf("idempotency key %q, body's %q", key, b.Delivery)
	}
	h.byKey[key] = append(h.byKey[key], b)
}

// states returns the accepted states of the model's alerts of one kind,
// in arrival order, and whether any key arrived twice.
func (h *hookSink) states(kind string) (states []string, repeated bool, attempts int) {
	h.mu.Lock()
	defer h.mu.Unlock()
	type keyed struct {
		at    time.Time
		state string
	}
	var all []keyed
	for _, bs := range h.byKey {
		repeated = repeated || len(bs) > 1
		if bs[0].Alert.Kind == kind {
			all = append(all, keyed{bs[0].Alert.ChangedAt, bs[0].Alert.State})
		}
	}
	for i := range all {
		for j := i + 1; j < len(all); j++ {
			if all[j].at.Before(all[i].at) {
				all[i], all[j] = all[j], all[i]
			}
		}
	}
	for _, k := range all {
		states = append(states, k.state)
	}
	return states, repeated, h.attempts
}

// amAlert is the part of Alertmanager's GET /api/v2/alerts we read.
type amAlert struct {
	Labels      map[string]string `json:"labels"`
	Annotations map[string]string `json:"annotations"`
}

func amAlerts(t *testing.T, base string) []amAlert {
	t.Helper()
	resp, err := http.Get(base + "/api/v2/alerts")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	var out []amAlert
	if err := json.NewDecoder(resp.Body).Decode(&out); err != nil {
		t.Fatal(err)
	}
	return out
}

// End to end with the real Alertmanager and a signing webhook receiver:
// a model whose refits keep failing fires a refit-failing alert after
// watch.failing_runs failures; the webhook sees the failed first attempts
// retried, and Alertmanager shows the alert through its own API. A
// restarted daemon with the spec fixed refits successfully, the alert
// resolves, and both receivers hear of it — each state change once per
// idempotency key.
func TestAlertsReachReceivers(t *testing.T) {
	t.Parallel()
	db := newTestDB(t)
	am := promtest.StartAlertmanager(t)
	sink := &hookSink{t: t, secret: "sonde-hook-secret-for-tests", failFirst: 2, byKey: map[string][]webhook.Body{}}
	hook := httptest.NewServer(sink)
	t.Cleanup(hook.Close)

	cfg := testConfig(t, db, "@every 1s")
	cfg.PublicURL = "http://dashboards.river.example"
	cfg.Alerting = config.Alerting{Alertmanager: []string{am}, ResendEvery: time.Second,
		Webhooks: []config.Webhook{{URL: hook.URL, Secret: config.NewSecret(sink.secret)}}}
	good := cfg.Models[0].Spec
	bad := *good
	bad.Terms = append(bad.Terms[:0:0], good.Terms...)
	bad.Terms[0].Columns = []string{"conductivity"}
	cfg.Models[0].Spec = &bad
	cfg.Models[0].Watch.FailingRuns = 2
	a, _ := startApp(t, cfg, Options{Workers: 2, DeliveryRetryMin: 100 * time.Millisecond})
	waitReady(t, a, 15*time.Second)

	waitFor(t, 30*time.Second, "the firing alert at the webhook", func() (bool, error) {
		states, _, _ := sink.states("refit_failing")
		return len(states) >= 1, nil
	})
	if states, _, attempts := sink.states("refit_failing"); states[0] != "firing" || attempts < 3 {
		t.Errorf("webhook saw %v after %d attempts; want firing after the 2 refused attempts were retried", states, attempts)
	}
	waitFor(t, 30*time.Second, "the alert in Alertmanager", func() (bool, error) {
		for _, al := range amAlerts(t, am) {
			if al.Labels["alertname"] == "CurvewatchRefitFailing" && al.Labels["model"] == "sonde-oxygen" &&
				al.Labels["severity"] == "critical" && al.Annotations["summary"] != "" {
				return true, nil
			}
		}
		return false, nil
	})
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if err := a.Stop(ctx); err != nil {
		t.Fatal(err)
	}

	// The spec fixed; a new daemon on the same database.
	fixed := *cfg
	fixed.Models = append([]config.Model(nil), cfg.Models...)
	fixed.Models[0].Spec = good
	b, _ := startApp(t, &fixed, Options{Workers: 2, DeliveryRetryMin: 100 * time.Millisecond})
	waitReady(t, b, 15*time.Second)
	waitFor(t, 30*time.Second, "the resolution at the webhook", func() (bool, error) {
		states, _, _ := sink.states("refit_failing")
		return len(states) >= 2, nil
	})
	states, repeated, _ := sink.states("refit_failing")
	if len(states) != 2 || states[0] != "firing" || states[1] != "resolved" {
		t.Errorf("webhook states %v, want [firing resolved]", states)
	}
	if repeated {
		t.Error("a state change arrived twice under one idempotency key")
	}
	waitFor(t, 30*time.Second, "the alert resolved in Alertmanager", func() (bool, error) {
		for _, al := range amAlerts(t, am) {
			if al.Labels["alertname"] == "CurvewatchRefitFailing" {
				return false, nil
			}
		}
		return true, nil
	})
	code, body := get(t, b, "/metrics")
	if code != http.StatusOK || !containsAll(body, `curvewatch_alert_deliveries_total{outcome="delivered"}`, `curvewatch_refits_total{model="sonde-oxygen",outcome="succeeded"}`) {
		t.Errorf("/metrics: %d\n%s", code, body)
	}
}

func containsAll(s string, subs ...string) bool {
	for _, sub := range subs {
		if !contains(s, sub) {
			return false
		}
	}
	return true
}

func contains(s, sub string) bool {
	for i := 0; i+len(sub) <= len(s); i++ {
		if s[i:i+len(sub)] == sub {
			return true
		}
	}
	return false
}
