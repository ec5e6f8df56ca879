// Package alerts turns refit findings into alert states and delivers the
// state changes. It knows nothing of the database, HTTP routing or the
// engine: the daemon feeds it Findings, stores the States it returns, and
// hands Deliveries to a Dispatcher, whose receivers live in sub-packages
// (alertmanager, webhook).
//
// Each alert is keyed by (model, term, kind). Its state moves by Step:
//
//	none/resolved ──breach──▶ pending ──breach × confirm_runs──▶ firing
//	pending/firing ──clean run──▶ resolved
//
// A kind that a refit could not judge (no comparison was made) leaves the
// state as it is. Only two changes are delivered: entering firing, and
// leaving firing for resolved. A pending alert that resolves was never
// announced, so its resolution is recorded but not sent.
package alerts

import (
	"encoding/json"
	"fmt"
	"math"
	"net/url"
	"strconv"
	"strings"
	"time"
)

// Kind is what kind of finding an alert is about.
type Kind string

// Kinds of finding.
const (
	// KindCurveShift: a curve or surface moved beyond its simultaneous band
	// and the practical margin.
	KindCurveShift Kind = "curve_shift"
	// KindCoefficientShift: a linear or factor term's estimate moved.
	KindCoefficientShift Kind = "coefficient_shift"
	// KindLevelShift: the model's overall level moved.
	KindLevelShift Kind = "level_shift"
	// KindNoiseChange: the residual scale grew or shrank.
	KindNoiseChange Kind = "noise_change"
	// KindDegradation: the reference predicts the new rows worse than the
	// tolerance allows.
	KindDegradation Kind = "predictive_degradation"
	// KindRefitFailing: several refits in a row failed.
	KindRefitFailing Kind = "refit_failing"
	// KindDataStale: the source's newest row is older than the model's
	// max_age.
	KindDataStale Kind = "data_stale"
)

// Kinds lists every kind, in the order the dashboard shows them.
var Kinds = []Kind{KindCurveShift, KindCoefficientShift, KindLevelShift, KindNoiseChange,
	KindDegradation, KindRefitFailing, KindDataStale}

// AlertName is the Alertmanager alertname label of a kind.
func (k Kind) AlertName() string {
	switch k {
	case KindCurveShift:
		return "CurvewatchCurveShift"
	case KindCoefficientShift:
		return "CurvewatchCoefficientShift"
	case KindLevelShift:
		return "CurvewatchLevelShift"
	case KindNoiseChange:
		return "CurvewatchNoiseChange"
	case KindDegradation:
		return "CurvewatchPredictiveDegradation"
	case KindRefitFailing:
		return "CurvewatchRefitFailing"
	case KindDataStale:
		return "CurvewatchDataStale"
	}
	return "Curvewatch_" + string(k)
}

// Severity of a kind: "critical" when the model is not being watched at
// all (refits failing, data stopped), "warning" for a changed relationship,
// "info" for a noise change.
func (k Kind) Severity() string {
	switch k {
	case KindRefitFailing, KindDataStale:
		return "critical"
	case KindNoiseChange:
		return "info"
	}
	return "warning"
}

// State of an alert.
type State string

// Alert states, as stored in alert_states.state.
const (
	StateNone     State = ""
	StatePending  State = "pending"
	StateFiring   State = "firing"
	StateResolved State = "resolved"
)

// Finding is what one refit says about one (model, term, kind).
type Finding struct {
	Model string
	// Term is the term's name, "" for model-wide kinds.
	Term string
	Kind Kind
	// Breach is true when the refit breached the tolerance for this kind.
	Breach bool
	// Summary is one line for people ("curve water_temp shifted by 0.82
	// mg/L beyond its 99% band over 12–18 °C").
	Summary string
	// Numbers are the figures behind it (score, size, p-value, fit ids, …).
	Numbers map[string]any
	// Confirm overrides the model's confirm_runs for this finding when
	// above 0 (data_stale fires on first sight, say).
	Confirm int
}

// Key identifies an alert.
type Key struct {
	Model string `json:"model"`
	Term  string `json:"term"`
	Kind  Kind   `json:"kind"`
}

func (k Key) String() string {
	if k.Term == "" {
		return k.Model + "/" + string(k.Kind)
	}
	return k.Model + "/" + k.Term + "/" + string(k.Kind)
}

// Status is the stored state of one alert.
type Status struct {
	Key
	State State `json:"state"`
	// Since is when the alert entered State.
	Since time.Time `json:"since"`
	// FiringSince is when the alert last started firing (zero if never):
	// Alertmanager's startsAt, kept through resolution.
	FiringSince time.Time `json:"firing_since,omitzero"`
	// Consecutive counts breaching runs in a row.
	Consecutive int            `json:"consecutive"`
	Summary     string         `json:"summary"`
	Numbers     map[string]any `json:"numbers,omitempty"`
}

// Transition is a change of state made by Step.
type Transition struct {
	From, To State
	// Deliver is true when the receivers are told: entering firing, or
	// resolving a firing alert.
	Deliver bool
}

// Step applies one finding to an alert's status and returns the new
// status and the transition, nil when the state did not change. confirm is
// the number of consecutive breaching runs before the alert fires
// (watch.confirm_runs; at least 1); f.Confirm overrides it when above 0.
func Step(prev Status, f Finding, confirm int, now time.Time) (Status, *Transition) {
	if f.Confirm > 0 {
		confirm = f.Confirm
	}
	confirm = max(confirm, 1)
	next := prev
	next.Key = Key{Model: f.Model, Term: f.Term, Kind: f.Kind}
	next.Summary, next.Numbers = f.Summary, f.Numbers
	if f.Breach {
		if prev.State == StatePending || prev.State == StateFiring {
			next.Consecutive = prev.Consecutive + 1
		} else {
			next.Consecutive = 1
		}
		switch {
		case prev.State == StateFiring:
			return next, nil
		case next.Consecutive >= confirm:
			next.State, next.Since, next.FiringSince = StateFiring, now, now
			return next, &Transition{From: prev.State, To: StateFiring, Deliver: true}
		case prev.State == StatePending:
			return next, nil
		default:
			next.State, next.Since = StatePending, now
			return next, &Transition{From: prev.State, To: StatePending}
		}
	}
	next.Consecutive = 0
	switch prev.State {
	case StatePending, StateFiring:
		next.State, next.Since = StateResolved, now
		return next, &Transition{From: prev.State, To: StateResolved, Deliver: prev.State == StateFiring}
	}
	// Nothing was open: keep the previous summary and numbers of a
	// resolved alert, which say why it last fired.
	return prev, nil
}

// Alert is what receivers are told about one state change.
type Alert struct {
	Key
	// State is StateFiring or StateResolved.
	State    State  `json:"state"`
	Severity string `json:"severity"`
	Summary  string `json:"summary"`
	// Numbers are the figures behind the change.
	Numbers map[string]any `json:"numbers,omitempty"`
	// StartsAt is when the alert started firing; EndsAt when it resolved
	// (zero while firing).
	StartsAt time.Time `json:"starts_at"`
	EndsAt   time.Time `json:"ends_at,omitzero"`
	// URL links to the model's dashboard page ("" when the daemon does not
	// know its own address).
	URL string `json:"url,omitempty"`
	// ChangedAt is when the state changed.
	ChangedAt time.Time `json:"changed_at"`
}

// NewAlert builds the Alert for a delivered transition of status s (after
// Step). dashboard is the base URL of the daemon's dashboard, or "".
func NewAlert(s Status, dashboard string) Alert {
	a := Alert{Key: s.Key, State: s.State, Severity: s.Kind.Severity(), Summary: s.Summary,
		Numbers: s.Numbers, StartsAt: s.FiringSince, ChangedAt: s.Since}
	if s.State == StateResolved {
		a.EndsAt = s.Since
	}
	if dashboard != "" {
		a.URL = strings.TrimSuffix(dashboard, "/") + "/models/" + url.PathEscape(s.Model)
	}
	return a
}

// IdempotencyKey names one state change of one alert: the same change
// always has the same key, however often it is delivered, and different
// changes have different keys.
func (a Alert) IdempotencyKey() string {
	return fmt.Sprintf("%s/%s/%d", a.Key, a.State, a.ChangedAt.UTC().UnixNano())
}

// NumbersText formats the numbers as compact JSON for annotations, with
// the keys sorted. JSON has no NaN or infinity, so a non-finite number is
// written as the string "NaN", "+Inf" or "-Inf" (a p-value that could not
// be computed still shows). It is "" when there are no numbers, or when a
// value cannot be written as JSON at all.
func (a Alert) NumbersText() string {
	if len(a.Numbers) == 0 {
		return ""
	}
	b, err := json.Marshal(jsonSafe(a.Numbers))
	if err != nil {
		return ""
	}
	return string(b)
}

// jsonSafe returns v with every non-finite float replaced by its name,
// looking inside maps and slices of the kinds JSON decoding produces.
func jsonSafe(v any) any {
	switch x := v.(type) {
	case float64:
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return strconv.FormatFloat(x, 'g', -1, 64)
		}
	case float32:
		return jsonSafe(float64(x))
	case map[string]any:
		out := make(map[string]any, len(x))
		for k, e := range x {
			out[k] = jsonSafe(e)
		}
		return out
	case []any:
		out := make([]any, len(x))
		for i, e := range x {
			out[i] = jsonSafe(e)
		}
		return out
	case []float64:
		out := make([]any, len(x))
		for i, e := range x {
			out[i] = jsonSafe(e)
		}
		return out
	}
	return v
}
