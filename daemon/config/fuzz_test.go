package config

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"strconv"
	"testing"
	"time"
)

// scheduleTemplate is a valid config with its schedule left to %s.
func withSchedule(s string) []byte {
	return []byte("database: ${DATABASE_URL}\ntimezone: Europe/London\nmodels:\n  - name: s1\n    schedule: " + strconv.Quote(s) +
		"\n    source: {table: river.r, time: t, window: 1d}\n    spec: {response: y, terms: [{curve: x}]}\n")
}

// FuzzParseConfig feeds Parse arbitrary bytes, seeded with the golden
// configs and with the odd schedules. Parse must not panic; what it
// rejects it rejects with an *Error whose problems are in line order; what
// it accepts must keep every promise of the Config doc comments.
func FuzzParseConfig(f *testing.F) {
	files, _ := filepath.Glob(filepath.Join(goldenDir, "*", "curvewatch.yaml"))
	for _, file := range files {
		data, err := os.ReadFile(file)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
	}
	for _, s := range oddSchedules {
		f.Add(withSchedule(s))
	}
	f.Add([]byte("a: &a [*a, *a]\n"))
	f.Add([]byte("database: x=1\nmodels:\n  - &m {name: a, spec: &s {terms: [*s, *s]}}\n  - *m\n"))
	dir := filepath.Join(goldenDir, "valid-river-authority")
	f.Fuzz(func(t *testing.T, data []byte) {
		c, err := Parse(bytes.NewReader(data), ParseOptions{Dir: dir, Getenv: getenv(testEnv)})
		if err != nil {
			var e *Error
			if !errors.As(err, &e) {
				t.Fatalf("Parse returned %T, want *Error: %v", err, err)
			}
			checkProblems(t, e)
			return
		}
		checkConfig(t, c)
	})
}

// checkConfig checks an accepted config against its doc comments.
func checkConfig(t *testing.T, c *Config) {
	t.Helper()
	if c == nil || c.Database.IsZero() || c.Location == nil || c.Schema == "" || c.Listen == "" || len(c.Models) == 0 {
		t.Fatalf("an accepted config lacks a required part: %+v", c)
	}
	names := map[string]bool{}
	for _, m := range c.Models {
		switch {
		case m.Name == "" || names[m.Name]:
			t.Fatalf("model name %q is empty or repeated", m.Name)
		case checkModelName(m.Name) != "":
			t.Fatalf("model name %q breaks the rule", m.Name)
		case m.Cron == nil:
			t.Fatalf("model %s has no parsed schedule", m.Name)
		case m.Spec == nil || m.Spec.Name != m.Name:
			t.Fatalf("model %s has no spec, or a spec of another name", m.Name)
		case m.Source.Table.Name == "" || m.Source.Time == "":
			t.Fatalf("model %s has no table or time column: %+v", m.Name, m.Source)
		case m.Source.Window <= 0 || m.Source.Overlap < 0 || m.Source.Overlap >= m.Source.Window:
			t.Fatalf("model %s: window %v, overlap %v", m.Name, m.Source.Window, m.Source.Overlap)
		case m.Watch.Against != AgainstBaseline && m.Watch.Against != AgainstPrevious:
			t.Fatalf("model %s: against %q", m.Name, m.Watch.Against)
		case m.Watch.PracticalShift <= 0 || m.Watch.Level <= 0 || m.Watch.Level >= 1 || m.Watch.DevianceIncrease <= 0 || m.Watch.ConfirmRuns < 1:
			t.Fatalf("model %s: watch out of range: %+v", m.Name, m.Watch)
		case m.MaxAge < 0:
			t.Fatalf("model %s: max_age %v", m.Name, m.MaxAge)
		}
		names[m.Name] = true
		from := time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)
		if next := m.Cron.Next(from); !next.After(from) {
			t.Fatalf("model %s: schedule %q never runs after %v (next %v)", m.Name, m.Schedule, from, next)
		}
	}
}

// FuzzParseSchedule feeds the schedule parser arbitrary text: it must
// return a schedule or an error, never panic, whatever robfig/cron does.
func FuzzParseSchedule(f *testing.F) {
	for _, s := range oddSchedules {
		f.Add(s)
	}
	f.Add("0 3 * * *")
	f.Add("@every 10m")
	london, err := time.LoadLocation("Europe/London")
	if err != nil {
		f.Fatal(err)
	}
	f.Fuzz(func(t *testing.T, s string) {
		sched, err := ParseSchedule(s, london)
		if (sched == nil) == (err == nil) {
			t.Fatalf("ParseSchedule(%q) = %v, %v", s, sched, err)
		}
		if sched != nil {
			from := time.Date(2025, 3, 30, 0, 30, 0, 0, london)
			if next := sched.Next(from); !next.After(from) {
				t.Fatalf("ParseSchedule(%q): next run %v is not after %v", s, next, from)
			}
		}
	})
}
