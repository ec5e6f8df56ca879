package alerts

import (
	"encoding/json"
	"math"
	"testing"
	"time"
)

var t0 = time.Date(2024, 5, 6, 3, 0, 0, 0, time.UTC)

// run is one refit's finding in a Step sequence.
type run struct {
	breach  bool
	confirm int // Finding.Confirm
}

// want is the expected outcome of one Step.
type want struct {
	state       State
	consecutive int
	// transition: nil when no transition is expected.
	transition *Transition
}

func TestStep(t *testing.T) {
	// The state machine is specified in the package comment and in
	// ../shared/DESIGN.md (watch.confirm_runs); these sequences walk each
	// of its edges. common practice (no source): hysteresis by consecutive
	// breaches, as in Prometheus' `for:` clause.
	breach, clean := run{breach: true}, run{}
	tests := []struct {
		name    string
		start   Status
		confirm int
		runs    []run
		want    []want
	}{
		{
			name: "one breach stays pending, a clean run resolves it unannounced", confirm: 2,
			runs: []run{breach, clean},
			want: []want{
				{StatePending, 1, &Transition{From: StateNone, To: StatePending}},
				{StateResolved, 0, &Transition{From: StatePending, To: StateResolved, Deliver: false}},
			},
		},
		{
			name: "two breaches in a row fire with confirm 2", confirm: 2,
			runs: []run{breach, breach},
			want: []want{
				{StatePending, 1, &Transition{From: StateNone, To: StatePending}},
				{StateFiring, 2, &Transition{From: StatePending, To: StateFiring, Deliver: true}},
			},
		},
		{
			name: "breach, clean, breach never fires with confirm 2", confirm: 2,
			runs: []run{breach, clean, breach, clean},
			want: []want{
				{StatePending, 1, &Transition{From: StateNone, To: StatePending}},
				{StateResolved, 0, &Transition{From: StatePending, To: StateResolved}},
				{StatePending, 1, &Transition{From: StateResolved, To: StatePending}},
				{StateResolved, 0, &Transition{From: StatePending, To: StateResolved}},
			},
		},
		{
			name: "confirm 1 fires at once", confirm: 1,
			runs: []run{breach},
			want: []want{{StateFiring, 1, &Transition{From: StateNone, To: StateFiring, Deliver: true}}},
		},
		{
			name: "confirm 0 means 1", confirm: 0,
			runs: []run{breach},
			want: []want{{StateFiring, 1, &Transition{From: StateNone, To: StateFiring, Deliver: true}}},
		},
		{
			name: "Finding.Confirm 1 overrides confirm_runs 3", confirm: 3,
			runs: []run{{breach: true, confirm: 1}},
			want: []want{{StateFiring, 1, &Transition{From: StateNone, To: StateFiring, Deliver: true}}},
		},
		{
			name: "Finding.Confirm 3 overrides confirm_runs 1", confirm: 1,
			runs: []run{{breach: true, confirm: 3}, {breach: true, confirm: 3}, {breach: true, confirm: 3}},
			want: []want{
				{StatePending, 1, &Transition{From: StateNone, To: StatePending}},
				{StatePending, 2, nil},
				{StateFiring, 3, &Transition{From: StatePending, To: StateFiring, Deliver: true}},
			},
		},
		{
			name: "firing stays firing without a transition, then resolves delivered", confirm: 2,
			runs: []run{breach, breach, breach, breach, clean},
			want: []want{
				{StatePending, 1, &Transition{From: StateNone, To: StatePending}},
				{StateFiring, 2, &Transition{From: StatePending, To: StateFiring, Deliver: true}},
				{StateFiring, 3, nil},
				{StateFiring, 4, nil},
				{StateResolved, 0, &Transition{From: StateFiring, To: StateResolved, Deliver: true}},
			},
		},
		{
			name: "resolved then breach is pending with consecutive 1", confirm: 2,
			start: Status{State: StateResolved, Consecutive: 0},
			runs:  []run{breach, breach},
			want: []want{
				{StatePending, 1, &Transition{From: StateResolved, To: StatePending}},
				{StateFiring, 2, &Transition{From: StatePending, To: StateFiring, Deliver: true}},
			},
		},
		{
			name: "clean runs with nothing open change nothing", confirm: 2,
			runs: []run{clean, clean},
			want: []want{{StateNone, 0, nil}, {StateNone, 0, nil}},
		},
		{
			name: "clean run after resolution changes nothing", confirm: 2,
			start: Status{State: StateResolved},
			runs:  []run{clean},
			want:  []want{{StateResolved, 0, nil}},
		},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			s := tt.start
			for i, r := range tt.runs {
				now := t0.Add(time.Duration(i) * 24 * time.Hour)
				f := Finding{Model: "sonde-07-oxygen", Term: "water_temp", Kind: KindCurveShift,
					Breach: r.breach, Confirm: r.confirm, Summary: "run"}
				prevState := s.State
				var tr *Transition
				s, tr = Step(s, f, tt.confirm, now)
				w := tt.want[i]
				if s.State != w.state || s.Consecutive != w.consecutive {
					t.Fatalf("run %d: state %q consecutive %d, want %q %d", i, s.State, s.Consecutive, w.state, w.consecutive)
				}
				switch {
				case w.transition == nil && tr != nil:
					t.Fatalf("run %d: transition %+v, want none", i, *tr)
				case w.transition != nil && tr == nil:
					t.Fatalf("run %d: no transition, want %+v", i, *w.transition)
				case tr != nil && *tr != *w.transition:
					t.Fatalf("run %d: transition %+v, want %+v", i, *tr, *w.transition)
				}
				if tr != nil && !s.Since.Equal(now) {
					t.Errorf("run %d: Since %v after a transition, want %v", i, s.Since, now)
				}
				if tr == nil && s.State == prevState && prevState != StateNone && s.Since.Equal(now) {
					t.Errorf("run %d: Since moved without a transition", i)
				}
				if tr != nil && tr.To == StateFiring && !s.FiringSince.Equal(now) {
					t.Errorf("run %d: FiringSince %v, want %v", i, s.FiringSince, now)
				}
			}
		})
	}
}

func TestStepKeepsFiringSinceThroughResolution(t *testing.T) {
	f := Finding{Model: "m", Kind: KindDegradation, Breach: true, Summary: "worse"}
	s, _ := Step(Status{}, f, 1, t0)
	f.Breach, f.Summary = false, "fine"
	s, tr := Step(s, f, 1, t0.Add(time.Hour))
	if tr == nil || !tr.Deliver {
		t.Fatalf("firing → resolved: transition %+v, want a delivered one", tr)
	}
	if !s.FiringSince.Equal(t0) || !s.Since.Equal(t0.Add(time.Hour)) {
		t.Errorf("FiringSince %v Since %v, want %v and %v", s.FiringSince, s.Since, t0, t0.Add(time.Hour))
	}
	if s.Key != (Key{Model: "m", Kind: KindDegradation}) {
		t.Errorf("key %v", s.Key)
	}
	// A later clean run keeps the summary that says why it last fired.
	f.Summary = "still fine"
	s2, tr := Step(s, f, 1, t0.Add(2*time.Hour))
	if tr != nil || s2.Summary != "fine" {
		t.Errorf("clean run after resolution: transition %v summary %q, want none and %q", tr, s2.Summary, "fine")
	}
}

func TestIdempotencyKey(t *testing.T) {
	fire := func(model, term string, kind Kind, at time.Time) Alert {
		s, _ := Step(Status{}, Finding{Model: model, Term: term, Kind: kind, Breach: true}, 1, at)
		return NewAlert(s, "")
	}
	a := fire("m", "water_temp", KindCurveShift, t0)
	// The same change built twice (a redelivery, a rebuilt Alert) has the
	// same key, whatever the dashboard URL or the summary says.
	b := a
	b.URL, b.Summary = "http://x/models/m", "different words"
	if a.IdempotencyKey() != b.IdempotencyKey() {
		t.Errorf("same change, keys %q and %q", a.IdempotencyKey(), b.IdempotencyKey())
	}
	// The same instant in another zone is the same change.
	c := a
	c.ChangedAt = a.ChangedAt.In(time.FixedZone("CEST", 2*3600))
	if a.IdempotencyKey() != c.IdempotencyKey() {
		t.Errorf("same instant in another zone, keys %q and %q", a.IdempotencyKey(), c.IdempotencyKey())
	}
	s, _ := Step(Status{Key: a.Key, State: StateFiring, FiringSince: t0, Since: t0, Consecutive: 1},
		Finding{Model: "m", Term: "water_temp", Kind: KindCurveShift}, 1, t0.Add(time.Hour))
	resolved := NewAlert(s, "")
	others := map[string]Alert{
		"resolution of the same alert":   resolved,
		"later firing of the same alert": fire("m", "water_temp", KindCurveShift, t0.Add(2*time.Hour)),
		"firing a nanosecond later":      fire("m", "water_temp", KindCurveShift, t0.Add(time.Nanosecond)),
		"another term":                   fire("m", "flow", KindCurveShift, t0),
		"another kind":                   fire("m", "water_temp", KindCoefficientShift, t0),
		"another model":                  fire("n", "water_temp", KindCurveShift, t0),
		"a model-wide kind":              fire("m", "", KindCurveShift, t0),
	}
	seen := map[string]string{a.IdempotencyKey(): "the first firing"}
	for name, o := range others {
		k := o.IdempotencyKey()
		if prev, ok := seen[k]; ok {
			t.Errorf("%s has the same key %q as %s", name, k, prev)
		}
		seen[k] = name
	}
}

func TestNewAlert(t *testing.T) {
	firing := Status{Key: Key{Model: "sonde-07-oxygen", Term: "water_temp", Kind: KindCurveShift},
		State: StateFiring, Since: t0, FiringSince: t0, Consecutive: 2, Summary: "moved",
		Numbers: map[string]any{"score": 1.7}}
	a := NewAlert(firing, "http://127.0.0.1:9464")
	if !a.EndsAt.IsZero() {
		t.Errorf("firing alert EndsAt = %v, want zero", a.EndsAt)
	}
	if !a.StartsAt.Equal(t0) || !a.ChangedAt.Equal(t0) {
		t.Errorf("StartsAt %v ChangedAt %v, want %v", a.StartsAt, a.ChangedAt, t0)
	}
	if a.URL != "http://127.0.0.1:9464/models/sonde-07-oxygen" {
		t.Errorf("URL = %q", a.URL)
	}
	if a.Severity != "warning" || a.State != StateFiring || a.Summary != "moved" {
		t.Errorf("alert %+v", a)
	}

	resolvedAt := t0.Add(48 * time.Hour)
	resolved := firing
	resolved.State, resolved.Since, resolved.Consecutive = StateResolved, resolvedAt, 0
	r := NewAlert(resolved, "https://cw.example.org/")
	if !r.EndsAt.Equal(resolvedAt) || !r.StartsAt.Equal(t0) || !r.ChangedAt.Equal(resolvedAt) {
		t.Errorf("resolved: StartsAt %v EndsAt %v ChangedAt %v, want %v, %v, %v", r.StartsAt, r.EndsAt, r.ChangedAt, t0, resolvedAt, resolvedAt)
	}
	if r.URL != "https://cw.example.org/models/sonde-07-oxygen" {
		t.Errorf("URL with a trailing slash on the base = %q", r.URL)
	}
	if u := NewAlert(firing, "").URL; u != "" {
		t.Errorf("no dashboard: URL = %q, want empty", u)
	}
	if s := NewAlert(Status{Key: Key{Kind: KindDataStale}, State: StateFiring}, "").Severity; s != "critical" {
		t.Errorf("data_stale severity %q, want critical", s)
	}
}

func TestNumbersText(t *testing.T) {
	a := Alert{Numbers: map[string]any{"score": 1.5, "p": math.NaN(), "sizes": []float64{1, math.Inf(1)}}}
	got := a.NumbersText()
	want := `{"p":"NaN","score":1.5,"sizes":[1,"+Inf"]}`
	if got != want {
		t.Errorf("NumbersText = %s, want %s", got, want)
	}
	if !json.Valid([]byte(got)) {
		t.Errorf("not JSON: %s", got)
	}
	if (Alert{}).NumbersText() != "" {
		t.Errorf("no numbers: want empty text")
	}
}
