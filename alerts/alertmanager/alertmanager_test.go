package alertmanager

import (
	"context"
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
)

var t0 = time.Date(2024, 5, 6, 3, 0, 0, 0, time.UTC)

// request is what the fake Alertmanager received.
type request struct {
	method, path, contentType string
	user, password            string
	basic                     bool
	alerts                    []map[string]any
}

// fakeAM answers every request with status and records it.
type fakeAM struct {
	mu     sync.Mutex
	status int
	body   string
	got    []request
}

func (f *fakeAM) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	b, _ := io.ReadAll(r.Body)
	req := request{method: r.Method, path: r.URL.Path, contentType: r.Header.Get("Content-Type")}
	req.user, req.password, req.basic = r.BasicAuth()
	_ = json.Unmarshal(b, &req.alerts)
	f.mu.Lock()
	f.got = append(f.got, req)
	status, body := f.status, f.body
	f.mu.Unlock()
	if status == 0 {
		status = http.StatusOK
	}
	w.WriteHeader(status)
	_, _ = io.WriteString(w, body)
}

func (f *fakeAM) requests() []request {
	f.mu.Lock()
	defer f.mu.Unlock()
	return append([]request(nil), f.got...)
}

func firing() alerts.Alert {
	s := alerts.Status{Key: alerts.Key{Model: "sonde-07-oxygen", Term: "water_temp", Kind: alerts.KindCurveShift},
		State: alerts.StateFiring, Since: t0, FiringSince: t0, Consecutive: 2,
		Summary: "curve water_temp shifted by 0.82 beyond its 99% band",
		Numbers: map[string]any{"score": 1.7, "size": 0.82}}
	return alerts.NewAlert(s, "http://127.0.0.1:9464")
}

func newNotifier(t *testing.T, base string) *Notifier {
	t.Helper()
	n := New(base, nil)
	n.Now = func() time.Time { return t0.Add(time.Hour) }
	return n
}

func TestNotifyFiring(t *testing.T) {
	am := &fakeAM{}
	srv := httptest.NewServer(am)
	defer srv.Close()
	n := newNotifier(t, srv.URL+"/prefix/")
	if n.Name() != "alertmanager:"+srv.URL+"/prefix" {
		t.Errorf("Name = %q", n.Name())
	}
	retry, err := n.Notify(context.Background(), alerts.Delivery{ID: 1, Receiver: n.Name(), Alert: firing()})
	if err != nil || retry {
		t.Fatalf("Notify: %v (retry %v)", err, retry)
	}
	reqs := am.requests()
	if len(reqs) != 1 {
		t.Fatalf("%d requests", len(reqs))
	}
	r := reqs[0]
	// from memory: Alertmanager's v2 API takes POST /api/v2/alerts with a
	// JSON array of postable alerts (labels, annotations, startsAt, endsAt,
	// generatorURL); e2e_test.go checks it against the real binary.
	if r.method != http.MethodPost || r.path != "/prefix/api/v2/alerts" || r.contentType != "application/json" {
		t.Errorf("%s %s (%s)", r.method, r.path, r.contentType)
	}
	if len(r.alerts) != 1 {
		t.Fatalf("body holds %d alerts", len(r.alerts))
	}
	a := r.alerts[0]
	wantLabels := map[string]any{"alertname": "CurvewatchCurveShift", "model": "sonde-07-oxygen",
		"term": "water_temp", "severity": "warning", "kind": "curve_shift"}
	if !mapsEqual(a["labels"].(map[string]any), wantLabels) {
		t.Errorf("labels %v, want %v", a["labels"], wantLabels)
	}
	wantAnn := map[string]any{"summary": "curve water_temp shifted by 0.82 beyond its 99% band",
		"numbers": `{"score":1.7,"size":0.82}`, "dashboard": "http://127.0.0.1:9464/models/sonde-07-oxygen"}
	if !mapsEqual(a["annotations"].(map[string]any), wantAnn) {
		t.Errorf("annotations %v, want %v", a["annotations"], wantAnn)
	}
	if a["startsAt"] != "2024-05-06T03:00:00Z" {
		t.Errorf("startsAt %v", a["startsAt"])
	}
	// Firing: endsAt = now + ResendHorizon = 04:00 + 5 min.
	if a["endsAt"] != "2024-05-06T04:05:00Z" {
		t.Errorf("endsAt %v, want now + %v", a["endsAt"], ResendHorizon)
	}
	if a["generatorURL"] != "http://127.0.0.1:9464/models/sonde-07-oxygen" {
		t.Errorf("generatorURL %v", a["generatorURL"])
	}
}

func TestNotifyResolvedModelWide(t *testing.T) {
	am := &fakeAM{}
	srv := httptest.NewServer(am)
	defer srv.Close()
	n := newNotifier(t, srv.URL)
	s := alerts.Status{Key: alerts.Key{Model: "m", Kind: alerts.KindDataStale}, State: alerts.StateResolved,
		Since: t0.Add(30 * time.Minute), FiringSince: t0, Summary: "fresh rows again"}
	if _, err := n.Notify(context.Background(), alerts.Delivery{Alert: alerts.NewAlert(s, "")}); err != nil {
		t.Fatal(err)
	}
	a := am.requests()[0].alerts[0]
	labels := a["labels"].(map[string]any)
	if _, ok := labels["term"]; ok {
		t.Errorf("model-wide kind has a term label: %v", labels)
	}
	if labels["severity"] != "critical" || labels["alertname"] != "CurvewatchDataStale" {
		t.Errorf("labels %v", labels)
	}
	if a["endsAt"] != "2024-05-06T03:30:00Z" || a["startsAt"] != "2024-05-06T03:00:00Z" {
		t.Errorf("startsAt %v endsAt %v, want the firing and resolution times", a["startsAt"], a["endsAt"])
	}
	if _, ok := a["generatorURL"]; ok {
		t.Errorf("generatorURL without a dashboard: %v", a["generatorURL"])
	}
	ann := a["annotations"].(map[string]any)
	if _, ok := ann["dashboard"]; ok {
		t.Errorf("dashboard annotation without a dashboard: %v", ann)
	}
	if _, ok := ann["numbers"]; ok {
		t.Errorf("numbers annotation without numbers: %v", ann)
	}
}

func TestStatusClassification(t *testing.T) {
	// common practice (no source): 5xx and 429 are transient, other 4xx
	// are the request's fault; Alertmanager's own notifiers classify so.
	for _, tc := range []struct {
		status    int
		ok, retry bool
	}{
		{200, true, false}, {202, true, false}, {204, true, false},
		{500, false, true}, {502, false, true}, {503, false, true}, {429, false, true}, {408, false, true},
		{400, false, false}, {401, false, false}, {404, false, false}, {422, false, false},
	} {
		am := &fakeAM{status: tc.status, body: "maybe an explanation"}
		srv := httptest.NewServer(am)
		n := newNotifier(t, srv.URL)
		retry, err := n.Notify(context.Background(), alerts.Delivery{Alert: firing()})
		srv.Close()
		if (err == nil) != tc.ok || retry != tc.retry {
			t.Errorf("status %d: err %v retry %v, want ok %v retry %v", tc.status, err, retry, tc.ok, tc.retry)
		}
		if err != nil && !strings.Contains(err.Error(), "maybe an explanation") {
			t.Errorf("status %d: error %q does not quote the response", tc.status, err)
		}
	}
}

func TestNetworkErrorRetries(t *testing.T) {
	srv := httptest.NewServer(http.NotFoundHandler())
	base := srv.URL
	srv.Close() // nothing listens there any more
	n := New(strings.Replace(base, "http://", "http://admin:hunter2@", 1), nil)
	retry, err := n.Notify(context.Background(), alerts.Delivery{Alert: firing()})
	if err == nil || !retry {
		t.Fatalf("err %v retry %v, want a retryable error", err, retry)
	}
	if strings.Contains(err.Error(), "hunter2") || strings.Contains(err.Error(), "admin") {
		t.Errorf("error leaks the credentials: %v", err)
	}
	if !strings.HasPrefix(err.Error(), "alertmanager:"+base) {
		t.Errorf("error %q does not name the receiver", err)
	}
}

func TestCredentialsStayOut(t *testing.T) {
	// A server that refuses and echoes what it was sent.
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		u, p, _ := r.BasicAuth()
		w.WriteHeader(http.StatusUnauthorized)
		_, _ = io.WriteString(w, "no entry for "+u+":"+p+" ("+r.Header.Get("Authorization")+")")
	}))
	defer srv.Close()
	base := strings.Replace(srv.URL, "http://", "http://admin:hunter2@", 1)
	n := New(base, nil)
	if strings.Contains(n.Name(), "hunter2") || strings.Contains(n.Name(), "admin") {
		t.Errorf("Name leaks the credentials: %q", n.Name())
	}
	retry, err := n.Notify(context.Background(), alerts.Delivery{Alert: firing()})
	if err == nil || retry {
		t.Fatalf("401: err %v retry %v", err, retry)
	}
	if strings.Contains(err.Error(), "hunter2") || strings.Contains(err.Error(), "YWRtaW46aHVudGVyMg") {
		t.Errorf("error leaks the credentials: %v", err)
	}
	if !strings.Contains(err.Error(), "401") {
		t.Errorf("error %q does not give the status", err)
	}
	// The credentials were sent as basic authentication.
	am := &fakeAM{}
	srv2 := httptest.NewServer(am)
	defer srv2.Close()
	n2 := New(strings.Replace(srv2.URL, "http://", "http://admin:hunter2@", 1), nil)
	if _, err := n2.Notify(context.Background(), alerts.Delivery{Alert: firing()}); err != nil {
		t.Fatal(err)
	}
	if r := am.requests()[0]; !r.basic || r.user != "admin" || r.password != "hunter2" {
		t.Errorf("basic auth %v %q %q", r.basic, r.user, r.password)
	}
}

func TestBadBaseURL(t *testing.T) {
	for _, base := range []string{"::not a url:hunter2", "ftp://host", "http://", "/relative"} {
		n := New(base, nil)
		retry, err := n.Notify(context.Background(), alerts.Delivery{Alert: firing()})
		if err == nil || retry {
			t.Errorf("%q: err %v retry %v, want a final error", base, err, retry)
		}
		if strings.Contains(err.Error()+n.Name(), "hunter2") {
			t.Errorf("%q: the URL leaks: %v / %s", base, err, n.Name())
		}
	}
}

func TestNotifyRejectsOtherStates(t *testing.T) {
	am := &fakeAM{}
	srv := httptest.NewServer(am)
	defer srv.Close()
	a := firing()
	a.State = alerts.StatePending
	if retry, err := newNotifier(t, srv.URL).Notify(context.Background(), alerts.Delivery{Alert: a}); err == nil || retry {
		t.Errorf("pending alert: err %v retry %v", err, retry)
	}
	if len(am.requests()) != 0 {
		t.Error("a pending alert was posted")
	}
}

func TestResend(t *testing.T) {
	am := &fakeAM{}
	srv := httptest.NewServer(am)
	defer srv.Close()
	n := newNotifier(t, srv.URL)
	n.Horizon = HorizonFor(2 * time.Minute)
	if err := n.Resend(context.Background(), nil); err != nil || len(am.requests()) != 0 {
		t.Fatalf("empty resend: %v, %d requests", err, len(am.requests()))
	}
	a, b := firing(), firing()
	b.Term = "flow"
	if err := n.Resend(context.Background(), []alerts.Alert{a, b}); err != nil {
		t.Fatal(err)
	}
	reqs := am.requests()
	if len(reqs) != 1 || len(reqs[0].alerts) != 2 {
		t.Fatalf("want one request with two alerts, got %d requests", len(reqs))
	}
	for _, p := range reqs[0].alerts {
		// 04:00 + 5 × 2 min.
		if p["endsAt"] != "2024-05-06T04:10:00Z" {
			t.Errorf("endsAt %v, want now + 10 min", p["endsAt"])
		}
	}
	am.mu.Lock()
	am.status = http.StatusServiceUnavailable
	am.mu.Unlock()
	if err := n.Resend(context.Background(), []alerts.Alert{a}); err == nil {
		t.Error("resend to a failing Alertmanager: no error")
	}
}

func TestHorizonFor(t *testing.T) {
	// Five resend intervals, at least ResendHorizon; the Prometheus
	// default is four (common practice, no source): five leaves a margin.
	for every, want := range map[time.Duration]time.Duration{
		time.Second: 5 * time.Minute, time.Minute: 5 * time.Minute, 10 * time.Minute: 50 * time.Minute,
	} {
		if got := HorizonFor(every); got != want {
			t.Errorf("HorizonFor(%v) = %v, want %v", every, got, want)
		}
	}
}

func mapsEqual(a, b map[string]any) bool {
	if len(a) != len(b) {
		return false
	}
	for k, v := range a {
		if b[k] != v {
			return false
		}
	}
	return true
}
