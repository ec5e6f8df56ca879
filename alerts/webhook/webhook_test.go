package webhook

import (
	"context"
	"encoding/json"
	"errors"
	"io"
	"net/http"
	"net/http/httptest"
	"slices"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
)

var t0 = time.Date(2024, 5, 6, 3, 0, 0, 0, time.UTC)

const secret = "whsec-0123456789abcdef"

// receiver is a webhook sink as a user would write one: it verifies each
// request, fails the first failFirst attempts with 503, and records each
// idempotency key once as a state change.
type receiver struct {
	secret    string
	failFirst int

	mu       sync.Mutex
	attempts int
	seen     map[string]bool
	changes  []Body
	rejected []error
}

func (r *receiver) ServeHTTP(w http.ResponseWriter, req *http.Request) {
	body, _ := io.ReadAll(req.Body)
	r.mu.Lock()
	defer r.mu.Unlock()
	r.attempts++
	if err := Verify(r.secret, req.Header, body, time.Now(), time.Minute); err != nil {
		r.rejected = append(r.rejected, err)
		http.Error(w, "bad signature", http.StatusUnauthorized)
		return
	}
	if r.attempts <= r.failFirst {
		http.Error(w, "warming up", http.StatusServiceUnavailable)
		return
	}
	key := req.Header.Get(HeaderIdempotencyKey)
	var b Body
	if err := json.Unmarshal(body, &b); err != nil || b.Delivery != key {
		http.Error(w, "bad body", http.StatusBadRequest)
		return
	}
	if r.seen == nil {
		r.seen = map[string]bool{}
	}
	if !r.seen[key] {
		r.seen[key] = true
		r.changes = append(r.changes, b)
	}
	w.WriteHeader(http.StatusNoContent)
}

func (r *receiver) snapshot() (attempts int, changes []Body, rejected []error) {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.attempts, slices.Clone(r.changes), slices.Clone(r.rejected)
}

func firing(at time.Time) alerts.Alert {
	s, _ := alerts.Step(alerts.Status{}, alerts.Finding{Model: "sonde-07-oxygen", Term: "water_temp",
		Kind: alerts.KindCurveShift, Breach: true, Summary: "curve water_temp shifted",
		Numbers: map[string]any{"score": 1.7}}, 1, at)
	return alerts.NewAlert(s, "http://127.0.0.1:9464")
}

func resolved(firedAt, at time.Time) alerts.Alert {
	prev := alerts.Status{Key: alerts.Key{Model: "sonde-07-oxygen", Term: "water_temp", Kind: alerts.KindCurveShift},
		State: alerts.StateFiring, Since: firedAt, FiringSince: firedAt, Consecutive: 1}
	s, _ := alerts.Step(prev, alerts.Finding{Model: "sonde-07-oxygen", Term: "water_temp",
		Kind: alerts.KindCurveShift, Summary: "back within the band"}, 1, at)
	return alerts.NewAlert(s, "http://127.0.0.1:9464")
}

func TestDeliveredOnceThroughRetries(t *testing.T) {
	sink := &receiver{secret: secret, failFirst: 2}
	srv := httptest.NewServer(sink)
	defer srv.Close()
	n := New(srv.URL+"/hook", secret, nil)
	clk := &clock{t: t0}
	box := &outbox{clock: clk}
	var outcomes []string
	var mu sync.Mutex
	d := alerts.NewDispatcher(alerts.DispatcherConfig{Outbox: box, Notifiers: []alerts.Notifier{n}, Now: clk.Now,
		OnOutcome: func(_, o string) { mu.Lock(); outcomes = append(outcomes, o); mu.Unlock() }})

	// pass runs one dispatcher pass, then moves the clock to when the
	// next delivery is due.
	pass := func() alerts.Result {
		t.Helper()
		res, err := d.RunOnce(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		clk.Set(box.nextDue(clk.Now()))
		return res
	}
	box.add(n.Name(), firing(t0))
	for i := range 2 {
		if res := pass(); res.Retried != 1 {
			t.Fatalf("attempt %d: %+v, want a retry after the 503", i+1, res)
		}
	}
	if res := pass(); res.Delivered != 1 {
		t.Fatalf("third attempt: %+v, want delivered", res)
	}
	// The resolution; its acknowledgement is lost once (the outbox fails
	// to record it), so it is sent again after the lease.
	box.add(n.Name(), resolved(t0, t0.Add(time.Hour)))
	box.failDelivered = 1
	if _, err := d.RunOnce(context.Background()); err == nil {
		t.Fatal("want the outbox failure reported")
	}
	clk.Set(clk.Now().Add(alerts.DefaultDispatchLease))
	if res := pass(); res.Delivered != 1 {
		t.Fatalf("redelivery: %+v", res)
	}

	attempts, changes, rejected := sink.snapshot()
	if len(rejected) > 0 {
		t.Fatalf("receiver rejected signatures: %v", rejected)
	}
	if attempts != 5 { // two 503s, the firing, the resolution twice
		t.Errorf("receiver saw %d attempts, want 5", attempts)
	}
	if len(changes) != 2 || changes[0].Alert.State != "firing" || changes[1].Alert.State != "resolved" {
		t.Fatalf("receiver recorded %+v, want the firing then the resolution, once each", changes)
	}
	if changes[0].Delivery == changes[1].Delivery {
		t.Errorf("firing and resolution share the key %q", changes[0].Delivery)
	}
	if want := []string{"retried", "retried", "delivered", "delivered"}; !slices.Equal(outcomes, want) {
		t.Errorf("outcomes %v, want %v", outcomes, want)
	}
}

func TestBadRequestIsAbandoned(t *testing.T) {
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		http.Error(w, "unknown model", http.StatusBadRequest)
	}))
	defer srv.Close()
	n := New(srv.URL, secret, nil)
	clk := &clock{t: t0}
	box := &outbox{clock: clk}
	d := alerts.NewDispatcher(alerts.DispatcherConfig{Outbox: box, Notifiers: []alerts.Notifier{n}, Now: clk.Now})
	box.add(n.Name(), firing(t0))
	res, err := d.RunOnce(context.Background())
	if err != nil || res.Abandoned != 1 {
		t.Fatalf("%+v, %v", res, err)
	}
	if r := box.rows[0]; !r.abandoned || !strings.Contains(r.reason, "400") || !strings.Contains(r.reason, "unknown model") {
		t.Errorf("abandoned %v reason %q", r.abandoned, r.reason)
	}
}

func TestStatusClassification(t *testing.T) {
	// common practice (no source): 5xx, 429 and 408 are transient, other
	// 4xx are the request's fault.
	for _, tc := range []struct {
		status    int
		ok, retry bool
	}{
		{200, true, false}, {201, true, false}, {204, true, false},
		{500, false, true}, {503, false, true}, {429, false, true}, {408, false, true},
		{400, false, false}, {403, false, false}, {404, false, false}, {410, false, false},
	} {
		srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) { w.WriteHeader(tc.status) }))
		retry, err := New(srv.URL, "", nil).Notify(context.Background(), alerts.Delivery{Alert: firing(t0)})
		srv.Close()
		if (err == nil) != tc.ok || retry != tc.retry {
			t.Errorf("status %d: err %v retry %v, want ok %v retry %v", tc.status, err, retry, tc.ok, tc.retry)
		}
	}
	srv := httptest.NewServer(http.NotFoundHandler())
	srv.Close()
	if retry, err := New(srv.URL, "", nil).Notify(context.Background(), alerts.Delivery{Alert: firing(t0)}); err == nil || !retry {
		t.Errorf("nothing listening: err %v retry %v, want a retryable error", err, retry)
	}
}

func TestRequest(t *testing.T) {
	var got *http.Request
	var body []byte
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		got = r.Clone(context.Background())
		body, _ = io.ReadAll(r.Body)
	}))
	defer srv.Close()
	n := New(srv.URL+"/hook", secret, nil)
	sentAt := time.Date(2024, 5, 6, 3, 1, 52, 0, time.UTC)
	n.Now = func() time.Time { return sentAt }
	a := resolved(t0, t0.Add(90*time.Minute))
	if _, err := n.Notify(context.Background(), alerts.Delivery{Alert: a}); err != nil {
		t.Fatal(err)
	}
	if got.Method != http.MethodPost || got.URL.Path != "/hook" || got.Header.Get("Content-Type") != "application/json" {
		t.Errorf("%s %s %q", got.Method, got.URL.Path, got.Header.Get("Content-Type"))
	}
	if k := got.Header.Get(HeaderIdempotencyKey); k != a.IdempotencyKey() {
		t.Errorf("Idempotency-Key %q, want %q", k, a.IdempotencyKey())
	}
	if ts := got.Header.Get(HeaderTimestamp); ts != "1714964512" {
		t.Errorf("timestamp %q", ts)
	}
	if err := Verify(secret, got.Header, body, sentAt, time.Minute); err != nil {
		t.Errorf("own signature does not verify: %v", err)
	}
	var doc map[string]any
	if err := json.Unmarshal(body, &doc); err != nil {
		t.Fatal(err)
	}
	alert := doc["alert"].(map[string]any)
	want := map[string]any{"model": "sonde-07-oxygen", "term": "water_temp", "kind": "curve_shift",
		"alertname": "CurvewatchCurveShift", "state": "resolved", "severity": "warning",
		"summary": "back within the band", "starts_at": "2024-05-06T03:00:00Z", "ends_at": "2024-05-06T04:30:00Z",
		"changed_at": "2024-05-06T04:30:00Z", "dashboard": "http://127.0.0.1:9464/models/sonde-07-oxygen"}
	for k, v := range want {
		if alert[k] != v {
			t.Errorf("alert.%s = %v, want %v", k, alert[k], v)
		}
	}
	if doc["format"] != Format || doc["delivery"] != a.IdempotencyKey() {
		t.Errorf("format %v delivery %v", doc["format"], doc["delivery"])
	}
	if nums, ok := alert["numbers"].(map[string]any); !ok || len(nums) != 0 {
		t.Errorf("numbers %v, want {}", alert["numbers"])
	}
	// Firing: ends_at is null, and the body is the same on every attempt.
	f := firing(t0)
	b1, _ := json.Marshal(NewBody(f))
	b2, _ := json.Marshal(NewBody(f))
	if string(b1) != string(b2) || !strings.Contains(string(b1), `"ends_at":null`) || !strings.Contains(string(b1), `"numbers":{"score":1.7}`) {
		t.Errorf("firing body %s", b1)
	}
	// Without a secret: a timestamp, no signature.
	n2 := New(srv.URL, "", nil)
	if _, err := n2.Notify(context.Background(), alerts.Delivery{Alert: f}); err != nil {
		t.Fatal(err)
	}
	if got.Header.Get(HeaderSignature) != "" || got.Header.Get(HeaderTimestamp) == "" {
		t.Errorf("unsigned request headers %v", got.Header)
	}
}

func TestSign(t *testing.T) {
	body := []byte(`{"format":"curvewatch-alert/1"}`)
	// source: Python 3.11 stdlib hmac.new(b"whsec-test",
	// b"1714964512." + body, hashlib.sha256).hexdigest()
	want := "v1=06d020c46caa7353eae9e0d51f1fd7e861519783ff9e189b3730dcb265a06b9c"
	if got := Sign("whsec-test", time.Unix(1714964512, 0), body); got != want {
		t.Errorf("Sign = %s, want %s", got, want)
	}
}

func TestVerify(t *testing.T) {
	body := []byte(`{"format":"curvewatch-alert/1","delivery":"m/curve_shift/firing/1"}`)
	now := time.Unix(1714964512, 0)
	signed := func(secret string, at time.Time, b []byte) http.Header {
		h := http.Header{}
		h.Set(HeaderTimestamp, strconvUnix(at))
		h.Set(HeaderSignature, Sign(secret, at, b))
		return h
	}
	good := signed(secret, now, body)
	tampered := append([]byte(nil), body...)
	tampered[len(tampered)-2] = '2'
	rotated := signed(secret, now, body)
	rotated.Set(HeaderSignature, Sign("old-secret", now, body)+", v0=abcd, "+rotated.Get(HeaderSignature))
	twoHeaders := signed("old-secret", now, body)
	twoHeaders.Add(HeaderSignature, Sign(secret, now, body))
	noSig := signed(secret, now, body)
	noSig.Del(HeaderSignature)
	noTS := signed(secret, now, body)
	noTS.Del(HeaderTimestamp)
	badTS := signed(secret, now, body)
	badTS.Set(HeaderTimestamp, "+1714964512")
	otherScheme := signed(secret, now, body)
	otherScheme.Set(HeaderSignature, strings.Replace(otherScheme.Get(HeaderSignature), "v1=", "v2=", 1))
	upper := signed(secret, now, body)
	upper.Set(HeaderSignature, "v1="+strings.ToUpper(strings.TrimPrefix(upper.Get(HeaderSignature), "v1=")))

	for _, tc := range []struct {
		name   string
		secret string
		header http.Header
		body   []byte
		now    time.Time
		want   error
	}{
		{"good", secret, good, body, now, nil},
		{"good, 59 s late", secret, good, body, now.Add(59 * time.Second), nil},
		{"good, receiver clock 59 s behind", secret, good, body, now.Add(-59 * time.Second), nil},
		{"rotation: one of several matches", secret, rotated, body, now, nil},
		{"rotation: two header lines", secret, twoHeaders, body, now, nil},
		{"upper-case hex", secret, upper, body, now, nil},
		{"tampered body", secret, good, tampered, now, ErrBadSignature},
		{"wrong secret", "not-the-secret", good, body, now, ErrBadSignature},
		{"stale", secret, good, body, now.Add(61 * time.Second), ErrStale},
		{"from the future", secret, good, body, now.Add(-61 * time.Second), ErrStale},
		{"no signature", secret, noSig, body, now, ErrNoSignature},
		{"only another scheme", secret, otherScheme, body, now, ErrNoSignature},
		{"no timestamp", secret, noTS, body, now, ErrNoTimestamp},
		{"signed timestamp", secret, badTS, body, now, ErrNoTimestamp},
		{"no secret", "", good, body, now, ErrNoSecret},
	} {
		err := Verify(tc.secret, tc.header, tc.body, tc.now, time.Minute)
		if !errors.Is(err, tc.want) || (tc.want == nil && err != nil) {
			t.Errorf("%s: Verify = %v, want %v", tc.name, err, tc.want)
		}
		if err != nil && tc.secret != "" && strings.Contains(err.Error(), tc.secret) {
			t.Errorf("%s: error holds the secret: %v", tc.name, err)
		}
	}
	// A timestamp changed after signing breaks the signature.
	moved := signed(secret, now, body)
	moved.Set(HeaderTimestamp, strconvUnix(now.Add(time.Second)))
	if err := Verify(secret, moved, body, now, time.Minute); !errors.Is(err, ErrBadSignature) {
		t.Errorf("re-dated request: %v", err)
	}
	// maxSkew 0 means DefaultMaxSkew.
	if err := Verify(secret, good, body, now.Add(DefaultMaxSkew-time.Second), 0); err != nil {
		t.Errorf("within the default skew: %v", err)
	}
	if err := Verify(secret, good, body, now.Add(DefaultMaxSkew+time.Second), 0); !errors.Is(err, ErrStale) {
		t.Errorf("beyond the default skew: %v", err)
	}
}

func TestSecretsStayOut(t *testing.T) {
	// A receiver that refuses and echoes everything it got.
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		w.WriteHeader(http.StatusForbidden)
		_ = r.Header.Write(w)
		_, _ = io.WriteString(w, "expected "+secret)
	}))
	defer srv.Close()
	raw := strings.Replace(srv.URL, "http://", "http://hookuser:hunter2@", 1) + "/hook?token=tok-s3cr3t&x=1"
	n := New(raw, secret, nil)
	if want := "webhook:" + srv.URL + "/hook?token=redacted&x=redacted"; n.Name() != want {
		t.Errorf("Name = %q, want %q", n.Name(), want)
	}
	retry, err := n.Notify(context.Background(), alerts.Delivery{Alert: firing(t0)})
	if err == nil || retry {
		t.Fatalf("403: err %v retry %v", err, retry)
	}
	for _, s := range []string{secret, "hunter2", "tok-s3cr3t"} {
		if strings.Contains(n.Name(), s) {
			t.Errorf("Name holds %q: %s", s, n.Name())
		}
		if strings.Contains(err.Error(), s) {
			t.Errorf("error holds %q: %v", s, err)
		}
	}
	srv.Close()
	_, err = n.Notify(context.Background(), alerts.Delivery{Alert: firing(t0)})
	for _, s := range []string{secret, "hunter2", "tok-s3cr3t", "hookuser"} {
		if err == nil || strings.Contains(err.Error(), s) {
			t.Errorf("network error holds %q (or is nil): %v", s, err)
		}
	}
	for _, bad := range []string{"::hunter2", "mailto:x@hunter2", "http://"} {
		n := New(bad, secret, nil)
		retry, err := n.Notify(context.Background(), alerts.Delivery{Alert: firing(t0)})
		if err == nil || retry || strings.Contains(err.Error()+n.Name(), "hunter2") {
			t.Errorf("bad URL %q: err %v retry %v name %s", bad, err, retry, n.Name())
		}
	}
}

func TestNotifyRejectsOtherStates(t *testing.T) {
	a := firing(t0)
	a.State = alerts.StatePending
	if retry, err := New("http://127.0.0.1:1/hook", "", nil).Notify(context.Background(), alerts.Delivery{Alert: a}); err == nil || retry {
		t.Errorf("pending: err %v retry %v", err, retry)
	}
}

// clock is a settable clock.
type clock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *clock) Now() time.Time  { c.mu.Lock(); defer c.mu.Unlock(); return c.t }
func (c *clock) Set(t time.Time) { c.mu.Lock(); defer c.mu.Unlock(); c.t = t }

// outbox is a small in-memory alerts.Outbox (the PostgreSQL one is tested
// in jobs/history).
type outbox struct {
	clock         *clock
	mu            sync.Mutex
	rows          []*row
	failDelivered int
}

type row struct {
	d                    alerts.Delivery
	due, leased          time.Time
	delivered, abandoned bool
	reason               string
}

func (o *outbox) add(receiver string, a alerts.Alert) {
	o.mu.Lock()
	defer o.mu.Unlock()
	o.rows = append(o.rows, &row{d: alerts.Delivery{ID: int64(len(o.rows) + 1), Receiver: receiver, Alert: a}, due: o.clock.Now()})
}

// nextDue is the earliest time an open delivery is due, or now.
func (o *outbox) nextDue(now time.Time) time.Time {
	o.mu.Lock()
	defer o.mu.Unlock()
	next := time.Time{}
	for _, r := range o.rows {
		if !r.delivered && !r.abandoned && (next.IsZero() || r.due.Before(next)) {
			next = r.due
		}
	}
	if next.Before(now) {
		return now
	}
	return next
}

func (o *outbox) Claim(_ context.Context, limit int, lease time.Duration) ([]alerts.Delivery, error) {
	o.mu.Lock()
	defer o.mu.Unlock()
	now := o.clock.Now()
	var out []alerts.Delivery
	for _, r := range o.rows {
		if len(out) < limit && !r.delivered && !r.abandoned && !r.due.After(now) && !r.leased.After(now) {
			r.leased = now.Add(lease)
			out = append(out, r.d)
		}
	}
	return out, nil
}

func (o *outbox) Delivered(_ context.Context, id int64) error {
	o.mu.Lock()
	defer o.mu.Unlock()
	if o.failDelivered > 0 {
		o.failDelivered--
		return errors.New("outbox unavailable")
	}
	o.rows[id-1].delivered = true
	return nil
}

func (o *outbox) Retry(_ context.Context, id int64, next time.Time, reason string) error {
	o.mu.Lock()
	defer o.mu.Unlock()
	r := o.rows[id-1]
	r.d.Attempts++
	r.due, r.leased, r.reason = next, time.Time{}, reason
	return nil
}

func (o *outbox) Abandon(_ context.Context, id int64, reason string) error {
	o.mu.Lock()
	defer o.mu.Unlock()
	r := o.rows[id-1]
	r.d.Attempts++
	r.abandoned, r.reason = true, reason
	return nil
}

func strconvUnix(t time.Time) string { return strconv.FormatInt(t.Unix(), 10) }
