// Package alertmanager delivers alerts to a Prometheus Alertmanager through
// its v2 API: POST {base}/api/v2/alerts with a JSON array of postable
// alerts.
//
// Each curvewatch alert becomes one Alertmanager alert with the labels
//
//	alertname  the kind's name (CurvewatchCurveShift, …; alerts.Kind.AlertName)
//	model      the model
//	term       the term (absent for model-wide kinds)
//	severity   critical, warning or info (alerts.Kind.Severity)
//	kind       the kind (curve_shift, …)
//
// and the annotations summary (one line for people), numbers (the figures
// behind it, as compact JSON) and dashboard (the model's dashboard page,
// when the daemon knows its address; also the generatorURL). startsAt is
// when the alert started firing.
//
// Alertmanager forgets an alert at its endsAt. A resolved alert is sent
// with endsAt at its resolution. A firing alert is sent with endsAt
// ResendHorizon from now, and the daemon re-sends every firing alert (Resend)
// well within that horizon, as Prometheus does for its own rules: a firing
// alert stays active while curvewatch runs, and resolves by itself within
// the horizon if curvewatch stops for good.
package alertmanager

import (
	"bytes"
	"context"
	"encoding/base64"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"strings"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
)

// ResendEvery is the suggested interval between Resend calls: the
// daemon's alerting.resend_every default.
const ResendEvery = time.Minute

// ResendHorizon is how far ahead of now a firing alert's endsAt is set:
// five resend intervals at the default ResendEvery, so that four resends
// in a row may be lost before Alertmanager resolves the alert by itself.
// When resends are less frequent, set Notifier.Horizon with HorizonFor.
const ResendHorizon = 5 * ResendEvery

// HorizonFor returns the horizon that suits resends every resendEvery:
// ResendHorizon, or five intervals when that is longer.
func HorizonFor(resendEvery time.Duration) time.Duration {
	return max(ResendHorizon, 5*resendEvery)
}

// Limits on what is read of a response.
const (
	errBodyLimit   = 512     // bytes of an error response quoted in the error
	drainBodyLimit = 1 << 16 // bytes read and discarded so the connection is reused
)

// Notifier is one Alertmanager. It implements alerts.Notifier.
type Notifier struct {
	// Horizon is how long a firing alert stays active in Alertmanager
	// without a resend (New sets ResendHorizon). Keep it several times the
	// resend interval.
	Horizon time.Duration
	// Now is the clock (New sets time.Now).
	Now func() time.Time

	name     string
	endpoint string        // {base}/api/v2/alerts, without userinfo
	user     *url.Userinfo // basic auth from the base URL, or nil
	client   *http.Client
	err      error // a base URL that does not parse
}

// New returns the Notifier for the Alertmanager at baseURL (http or https,
// possibly with a path prefix; user:password@ in it is sent as basic
// authentication and appears nowhere else). client nil means a client of
// its own; the Dispatcher's context bounds each call.
func New(baseURL string, client *http.Client) *Notifier {
	if client == nil {
		client = &http.Client{}
	}
	n := &Notifier{Horizon: ResendHorizon, Now: time.Now, client: client}
	u, err := url.Parse(baseURL)
	if err != nil || (u.Scheme != "http" && u.Scheme != "https") || u.Host == "" {
		// url.Parse errors quote the URL, which may hold a password.
		n.name = "alertmanager:invalid-url"
		n.err = errors.New("alertmanager: the base URL is not an http:// or https:// URL with a host")
		return n
	}
	n.user = u.User
	u.User = nil
	u.RawQuery, u.Fragment = "", ""
	u.Path = strings.TrimRight(u.Path, "/")
	u.RawPath = ""
	n.name = "alertmanager:" + u.String()
	n.endpoint = u.JoinPath("api", "v2", "alerts").String()
	return n
}

// Name is "alertmanager:" and the base URL without userinfo or a trailing
// slash.
func (n *Notifier) Name() string { return n.name }

// Notify posts one alert state change. Failures on the way there (the
// network, a timeout), a 5xx, 429 or 408 may succeed later (retry true);
// any other status will not.
func (n *Notifier) Notify(ctx context.Context, d alerts.Delivery) (retry bool, err error) {
	p, err := n.postable(d.Alert)
	if err != nil {
		return false, err
	}
	return n.post(ctx, []postableAlert{p})
}

// Resend posts alerts (normally every currently firing alert) in one
// request, so that Alertmanager keeps them active: call it every
// ResendEvery (alerting.resend_every) with the alerts whose stored state is
// firing, and again soon after a start. An empty list sends nothing. Alerts
// in other states are sent as they are (a resolved one with its EndsAt).
func (n *Notifier) Resend(ctx context.Context, firing []alerts.Alert) error {
	if len(firing) == 0 {
		return nil
	}
	ps := make([]postableAlert, 0, len(firing))
	for _, a := range firing {
		p, err := n.postable(a)
		if err != nil {
			return err
		}
		ps = append(ps, p)
	}
	_, err := n.post(ctx, ps)
	return err
}

// postableAlert is Alertmanager's v2 postableAlert.
type postableAlert struct {
	Labels       map[string]string `json:"labels"`
	Annotations  map[string]string `json:"annotations,omitempty"`
	StartsAt     time.Time         `json:"startsAt,omitzero"`
	EndsAt       time.Time         `json:"endsAt,omitzero"`
	GeneratorURL string            `json:"generatorURL,omitempty"`
}

func (n *Notifier) postable(a alerts.Alert) (postableAlert, error) {
	p := postableAlert{
		Labels: map[string]string{
			"alertname": a.Kind.AlertName(),
			"model":     a.Model,
			"severity":  a.Kind.Severity(),
			"kind":      string(a.Kind),
		},
		Annotations:  map[string]string{},
		StartsAt:     a.StartsAt.UTC(),
		GeneratorURL: a.URL,
	}
	if a.Term != "" {
		p.Labels["term"] = a.Term
	}
	for k, v := range map[string]string{"summary": a.Summary, "numbers": a.NumbersText(), "dashboard": a.URL} {
		if v != "" {
			p.Annotations[k] = v
		}
	}
	switch a.State {
	case alerts.StateFiring:
		h := n.Horizon
		if h <= 0 {
			h = ResendHorizon
		}
		p.EndsAt = n.Now().Add(h).UTC()
	case alerts.StateResolved:
		p.EndsAt = a.EndsAt
		if p.EndsAt.IsZero() {
			p.EndsAt = a.ChangedAt
		}
		if p.EndsAt.IsZero() {
			p.EndsAt = n.Now()
		}
		p.EndsAt = p.EndsAt.UTC()
	default:
		return p, fmt.Errorf("%s: alert %s is %q: only firing and resolved alerts are sent", n.name, a.Key, a.State)
	}
	if p.StartsAt.After(p.EndsAt) {
		// Alertmanager rejects an alert that ends before it starts.
		p.StartsAt = p.EndsAt
	}
	return p, nil
}

// post sends alerts and classifies the outcome.
func (n *Notifier) post(ctx context.Context, ps []postableAlert) (retry bool, err error) {
	if n.err != nil {
		return false, n.err
	}
	body, err := json.Marshal(ps)
	if err != nil {
		return false, fmt.Errorf("%s: encode alerts: %w", n.name, err)
	}
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, n.endpoint, bytes.NewReader(body))
	if err != nil {
		return false, fmt.Errorf("%s: build request: %w", n.name, err)
	}
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("User-Agent", "curvewatch")
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
		return true, fmt.Errorf("%s: post alerts: %w", n.name, err)
	}
	defer resp.Body.Close()
	snippet, _ := io.ReadAll(io.LimitReader(resp.Body, errBodyLimit))
	_, _ = io.Copy(io.Discard, io.LimitReader(resp.Body, drainBodyLimit))
	if resp.StatusCode >= 200 && resp.StatusCode < 300 {
		return false, nil
	}
	return alerts.StatusRetryable(resp.StatusCode),
		fmt.Errorf("%s: post alerts: %s: %s", n.name, resp.Status, n.redact(strings.TrimSpace(string(snippet))))
}

// redact removes the base URL's credentials from s (a response that
// echoes the request).
func (n *Notifier) redact(s string) string {
	if n.user == nil {
		return s
	}
	if pw, ok := n.user.Password(); ok && pw != "" {
		s = strings.ReplaceAll(s, pw, "<redacted>")
		basic := base64.StdEncoding.EncodeToString([]byte(n.user.Username() + ":" + pw))
		s = strings.ReplaceAll(s, basic, "<redacted>")
	}
	return s
}
