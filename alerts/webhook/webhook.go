// Package webhook delivers alert state changes as signed JSON POSTs, and
// gives receivers Verify to check them.
//
// # Request
//
// Each state change (an alert starting to fire, or a firing alert
// resolving) is one request:
//
//	POST <url>
//	Content-Type: application/json
//	User-Agent: curvewatch
//	Idempotency-Key: sonde-07-oxygen/water_temp/curve_shift/firing/1714964400000000000
//	Curvewatch-Timestamp: 1714964512
//	Curvewatch-Signature: v1=<64 hex digits>
//
//	{"format":"curvewatch-alert/1",
//	 "delivery":"sonde-07-oxygen/water_temp/curve_shift/firing/1714964400000000000",
//	 "alert":{
//	  "model":"sonde-07-oxygen", "term":"water_temp", "kind":"curve_shift",
//	  "alertname":"CurvewatchCurveShift", "state":"firing", "severity":"warning",
//	  "summary":"curve water_temp shifted by 0.82 mg/L beyond its 99% band",
//	  "numbers":{"score":1.7,"size":0.82},
//	  "starts_at":"2024-05-06T03:00:00Z", "ends_at":null,
//	  "changed_at":"2024-05-06T03:00:00Z",
//	  "dashboard":"http://127.0.0.1:9464/models/sonde-07-oxygen"}}
//
// The body, format "curvewatch-alert/1" (a later, incompatible layout gets
// another format name; new fields may be added to this one):
//
//   - delivery: the change's idempotency key, also in the Idempotency-Key
//     header. A change may arrive more than once (a retry after a lost
//     answer, two replicas); it always has the same key, and different
//     changes have different keys, so a receiver acts on each key once.
//   - alert.model, alert.term ("" for model-wide kinds), alert.kind
//     (curve_shift, coefficient_shift, level_shift, noise_change,
//     predictive_degradation, refit_failing, data_stale): which alert.
//   - alert.alertname, alert.severity (critical, warning, info): as the
//     Alertmanager labels of the same alert.
//   - alert.state: "firing" or "resolved".
//   - alert.summary: one line for people; alert.numbers: the figures behind
//     it (an object, {} when there are none; a figure that is not a finite
//     number is the string "NaN", "+Inf" or "-Inf").
//   - alert.starts_at: when the alert started firing; alert.ends_at: when it
//     resolved (null while firing); alert.changed_at: when this change
//     happened. Changes of one alert may arrive out of order after retries:
//     order them by changed_at. Times are RFC 3339 in UTC.
//   - alert.dashboard: the model's dashboard page ("" when the daemon does
//     not know its own address).
//
// The body of a change is the same on every attempt; the timestamp and
// signature are made afresh for each.
//
// # Signature
//
// With a secret configured, Curvewatch-Signature is "v1=" and the hex
// HMAC-SHA256, keyed with the secret, of the Curvewatch-Timestamp value (unix
// seconds), a ".", and the raw body bytes. A receiver checks it with Verify
// before parsing the body, which also rejects timestamps too far from its
// clock (replays). The header may carry several comma-separated
// signatures; one valid "v1" one is enough (room for rotating secrets).
// Without a secret the two signature headers still come, without the
// signature.
//
// # Answers
//
// Any 2xx acknowledges the delivery. A 5xx, 429 or 408, or no answer, is
// retried with backoff; any other status abandons the delivery, so answer
// 2xx to a duplicate and 4xx only to a request that can never succeed.
package webhook

import (
	"bytes"
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
)

// Format names the body layout.
const Format = "curvewatch-alert/1"

// Header names.
const (
	HeaderIdempotencyKey = "Idempotency-Key"
	HeaderTimestamp      = "Curvewatch-Timestamp"
	HeaderSignature      = "Curvewatch-Signature"
)

// DefaultMaxSkew is Verify's tolerance for a timestamp away from the
// receiver's clock when it is given none.
const DefaultMaxSkew = 5 * time.Minute

// Limits on what is read of a response.
const (
	errBodyLimit   = 512
	drainBodyLimit = 1 << 16
)

// Body is the JSON document POSTed for one state change (see the package
// comment).
type Body struct {
	Format   string `json:"format"`
	Delivery string `json:"delivery"`
	Alert    Alert  `json:"alert"`
}

// Alert is the alert in a Body.
type Alert struct {
	Model     string          `json:"model"`
	Term      string          `json:"term"`
	Kind      string          `json:"kind"`
	AlertName string          `json:"alertname"`
	State     string          `json:"state"`
	Severity  string          `json:"severity"`
	Summary   string          `json:"summary"`
	Numbers   json.RawMessage `json:"numbers"`
	StartsAt  time.Time       `json:"starts_at"`
	EndsAt    *time.Time      `json:"ends_at"`
	ChangedAt time.Time       `json:"changed_at"`
	Dashboard string          `json:"dashboard"`
}

// NewBody builds the body for alert a.
func NewBody(a alerts.Alert) Body {
	numbers := json.RawMessage(a.NumbersText())
	if len(numbers) == 0 {
		numbers = json.RawMessage("{}")
	}
	b := Body{Format: Format, Delivery: a.IdempotencyKey(), Alert: Alert{
		Model: a.Model, Term: a.Term, Kind: string(a.Kind), AlertName: a.Kind.AlertName(),
		State: string(a.State), Severity: a.Severity, Summary: a.Summary, Numbers: numbers,
		StartsAt: a.StartsAt.UTC(), ChangedAt: a.ChangedAt.UTC(), Dashboard: a.URL,
	}}
	if b.Alert.Severity == "" {
		b.Alert.Severity = a.Kind.Severity()
	}
	if !a.EndsAt.IsZero() {
		end := a.EndsAt.UTC()
		b.Alert.EndsAt = &end
	}
	return b
}

// Notifier posts to one webhook. It implements alerts.Notifier.
type Notifier struct {
	// Now is the clock for the timestamp header (New sets time.Now).
	Now func() time.Time

	name   string
	target string        // the URL without userinfo
	user   *url.Userinfo // basic auth from the URL, or nil
	secret string
	client *http.Client
	err    error // a URL that does not parse
}

// New returns the Notifier for url (http or https; user:password@ in it is
// sent as basic authentication). secret, when not "", signs every request.
// client nil means a client of its own; the Dispatcher's context bounds each
// call.
func New(rawURL string, secret string, client *http.Client) *Notifier {
	if client == nil {
		client = &http.Client{}
	}
	n := &Notifier{Now: time.Now, secret: secret, client: client}
	u, err := url.Parse(rawURL)
	if err != nil || (u.Scheme != "http" && u.Scheme != "https") || u.Host == "" {
		// url.Parse errors quote the URL, which may hold a password.
		n.name = "webhook:invalid-url"
		n.err = errors.New("webhook: the URL is not an http:// or https:// URL with a host")
		return n
	}
	n.user = u.User
	u.User = nil
	u.Fragment = ""
	n.target = u.String()
	n.name = "webhook:" + redactQuery(*u)
	return n
}

// redactQuery returns u with its query values hidden: a token in the query
// string is a secret that must not reach logs or the outbox.
func redactQuery(u url.URL) string {
	if u.RawQuery == "" {
		return u.String()
	}
	q, err := url.ParseQuery(u.RawQuery)
	if err != nil {
		u.RawQuery = "redacted"
		return u.String()
	}
	keys := make([]string, 0, len(q))
	for k := range q {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	parts := make([]string, len(keys))
	for i, k := range keys {
		parts[i] = url.QueryEscape(k) + "=redacted"
	}
	u.RawQuery = strings.Join(parts, "&")
	return u.String()
}

// Name is "webhook:" and the URL without userinfo (query values are
// replaced by "redacted").
func (n *Notifier) Name() string { return n.name }

// Notify posts one alert state change. Failures on the way there, a 5xx,
// 429 or 408 may succeed later (retry true); any other status will not.
func (n *Notifier) Notify(ctx context.Context, d alerts.Delivery) (retry bool, err error) {
	if n.err != nil {
		return false, n.err
	}
	a := d.Alert
	if a.State != alerts.StateFiring && a.State != alerts.StateResolved {
		return false, fmt.Errorf("%s: alert %s is %q: only firing and resolved alerts are sent", n.name, a.Key, a.State)
	}
	body, err := json.Marshal(NewBody(a))
	if err != nil {
		return false, fmt.Errorf("%s: encode alert %s: %w", n.name, a.Key, err)
	}
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, n.target, bytes.NewReader(body))
	if err != nil {
		return false, fmt.Errorf("%s: build request: %w", n.name, err)
	}
	ts := n.Now()
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("User-Agent", "curvewatch")
	req.Header.Set(HeaderIdempotencyKey, a.IdempotencyKey())
	req.Header.Set(HeaderTimestamp, strconv.FormatInt(ts.Unix(), 10))
	if n.secret != "" {
		req.Header.Set(HeaderSignature, Sign(n.secret, ts, body))
	}
	if n.user != nil {
		pw, _ := n.user.Password()
		req.SetBasicAuth(n.user.Username(), pw)
	}
	resp, err := n.client.Do(req)
	if err != nil {
		// A *url.Error quotes the URL; keep only what went wrong.
		if ue, ok := errors.AsType[*url.Error](err); ok {
			err = ue.Err
		}
		return true, fmt.Errorf("%s: post alert %s: %w", n.name, a.Key, err)
	}
	defer resp.Body.Close()
	snippet, _ := io.ReadAll(io.LimitReader(resp.Body, errBodyLimit))
	_, _ = io.Copy(io.Discard, io.LimitReader(resp.Body, drainBodyLimit))
	if resp.StatusCode >= 200 && resp.StatusCode < 300 {
		return false, nil
	}
	return alerts.StatusRetryable(resp.StatusCode),
		fmt.Errorf("%s: post alert %s: %s: %s", n.name, a.Key, resp.Status, n.redact(strings.TrimSpace(string(snippet))))
}

// redact removes the secret and the URL's credentials from s (a response
// that echoes the request).
func (n *Notifier) redact(s string) string {
	if n.secret != "" {
		s = strings.ReplaceAll(s, n.secret, "<redacted>")
	}
	if n.user != nil {
		if pw, ok := n.user.Password(); ok && pw != "" {
			s = strings.ReplaceAll(s, pw, "<redacted>")
			basic := base64.StdEncoding.EncodeToString([]byte(n.user.Username() + ":" + pw))
			s = strings.ReplaceAll(s, basic, "<redacted>")
		}
	}
	return s
}

// Sign returns the Curvewatch-Signature value for body sent at ts:
// "v1=" + hex(HMAC-SHA256(secret, "<unix seconds>." + body)).
func Sign(secret string, ts time.Time, body []byte) string {
	return "v1=" + hex.EncodeToString(mac(secret, strconv.FormatInt(ts.Unix(), 10), body))
}

func mac(secret, ts string, body []byte) []byte {
	h := hmac.New(sha256.New, []byte(secret))
	h.Write([]byte(ts))
	h.Write([]byte{'.'})
	h.Write(body)
	return h.Sum(nil)
}

// Errors of Verify; the error it returns wraps one of them.
var (
	ErrNoSecret     = errors.New("webhook: no secret to verify with")
	ErrNoTimestamp  = errors.New("webhook: missing or malformed " + HeaderTimestamp)
	ErrStale        = errors.New("webhook: timestamp too far from now")
	ErrNoSignature  = errors.New("webhook: no v1 signature in " + HeaderSignature)
	ErrBadSignature = errors.New("webhook: signature does not match")
)

// maxSignatures bounds how many signatures of a header are checked.
const maxSignatures = 8

// Verify checks a delivery's signature: header holds the request's
// headers and body its raw bytes, exactly as received. It fails when the
// Curvewatch-Timestamp is missing or more than maxSkew away from now (0 or
// less means DefaultMaxSkew), or when no "v1" signature in
// Curvewatch-Signature matches (compared in constant time). An empty secret
// always fails: an unsigned request cannot be verified.
func Verify(secret string, header http.Header, body []byte, now time.Time, maxSkew time.Duration) error {
	if secret == "" {
		return ErrNoSecret
	}
	if maxSkew <= 0 {
		maxSkew = DefaultMaxSkew
	}
	tsText := strings.TrimSpace(header.Get(HeaderTimestamp))
	ts, err := parseTimestamp(tsText)
	if err != nil {
		return err
	}
	if skew := now.Sub(ts); skew > maxSkew || skew < -maxSkew {
		return fmt.Errorf("%w: %s is %s from now, more than %s", ErrStale, tsText, skew.Round(time.Second), maxSkew)
	}
	sigs := ParseSignature(strings.Join(header.Values(HeaderSignature), ","))
	if len(sigs) == 0 {
		return ErrNoSignature
	}
	want := mac(secret, tsText, body)
	ok := false
	for _, s := range sigs {
		// Check every signature, so the time taken does not say which one
		// matched.
		ok = hmac.Equal(s, want) || ok
	}
	if !ok {
		return ErrBadSignature
	}
	return nil
}

// parseTimestamp reads unix seconds: decimal digits only, as Sign writes
// them.
func parseTimestamp(s string) (time.Time, error) {
	if s == "" || len(s) > 12 || strings.TrimLeft(s, "0123456789") != "" {
		return time.Time{}, ErrNoTimestamp
	}
	sec, err := strconv.ParseInt(s, 10, 64)
	if err != nil {
		return time.Time{}, ErrNoTimestamp
	}
	return time.Unix(sec, 0), nil
}

// ParseSignature returns the v1 signatures in a Curvewatch-Signature value:
// comma-separated "scheme=hex" entries, with spaces around entries
// ignored, entries of other schemes and malformed entries skipped, and at
// most 8 signatures kept.
func ParseSignature(v string) [][]byte {
	var out [][]byte
	for entry := range strings.SplitSeq(v, ",") {
		scheme, value, ok := strings.Cut(strings.TrimSpace(entry), "=")
		if !ok || scheme != "v1" || len(value) != 2*sha256.Size {
			continue
		}
		b, err := hex.DecodeString(value)
		if err != nil {
			continue
		}
		out = append(out, b)
		if len(out) == maxSignatures {
			break
		}
	}
	return out
}
