package config

import (
	"strings"
	"testing"
	"time"
)

// oddSchedules are inputs that have made cron parsers stumble: robfig/cron
// v3.0.1's ParseStandard panics on a TZ= prefix without a space (it slices
// with the index of a missing space). Each must come back as an error,
// never a panic. They also seed the fuzzers.
var oddSchedules = []string{
	"", " ", "\t\n", "TZ=UTC", "CRON_TZ=", "TZ=", "CRON_TZ=Europe/London", "TZ=Nowhere/City 0 3 * * *",
	"@", "@every", "@every ", "@every -5s", "@every 0s", "@every 1.5s", "@every 1d", "@every 9999999999999h",
	"@every 1e9999d", "@daily extra", "@DAILY", "@reboot",
	"* * * * * *", "60 * * * *", "* 24 * * *", "* * 0 * *", "* * 32 * *", "* * * 13 *", "* * * * 8",
	"*/0 * * * *", "1-2-3 * * * *", "5/ * * * *", "/5 * * * *", "-1 * * * *", "L * * * *", "? ? ? ? ?",
	"0 0 31 2 *", "0 0 30 2 *", "0 0 29 2 *", "0 0 31 4,6,9,11 *", "1,,2 * * * *", ", * * * *",
	"99999999999999999999 * * * *", "0-59/99999999999999999999 * * * *", "* * * jan-dec sun-sat",
	"* * * JAN SUN", "* * * feb-jan *", "\x00 * * * *", "0 3 * * *\x00", "０ ３ * * *",
}

func TestParseScheduleOddInputs(t *testing.T) {
	for _, s := range oddSchedules {
		func() {
			defer func() {
				if r := recover(); r != nil {
					t.Errorf("ParseSchedule(%q) panicked: %v", s, r)
				}
			}()
			sched, err := ParseSchedule(s, time.UTC)
			if (sched == nil) == (err == nil) {
				t.Errorf("ParseSchedule(%q) = %v, %v: want exactly one of a schedule and an error", s, sched, err)
			}
			if err != nil && !strings.Contains(err.Error(), "is not a 5-field cron expression or @every duration") {
				t.Errorf("ParseSchedule(%q): error does not say what a schedule is: %v", s, err)
			}
		}()
	}
}

func TestParseSchedule(t *testing.T) {
	london, err := time.LoadLocation("Europe/London")
	if err != nil {
		t.Fatal(err)
	}
	from := time.Date(2025, 6, 10, 12, 0, 0, 0, time.UTC) // a Tuesday; London is on BST (UTC+1)
	cases := []struct {
		expr string
		loc  *time.Location
		want string // the next run after from, RFC 3339 in UTC
	}{
		{"0 3 * * *", time.UTC, "2025-06-11T03:00:00Z"},
		{"0 3 * * *", london, "2025-06-11T02:00:00Z"},
		{"*/15 * * * *", time.UTC, "2025-06-10T12:15:00Z"},
		{"30 3 * * mon-fri", london, "2025-06-11T02:30:00Z"},
		{"0 0 1 jan *", time.UTC, "2026-01-01T00:00:00Z"},
		{"@daily", london, "2025-06-10T23:00:00Z"},
		{"@hourly", time.UTC, "2025-06-10T13:00:00Z"},
		{"@every 10m", london, "2025-06-10T12:10:00Z"},
		{"@every 1d", time.UTC, "2025-06-11T12:00:00Z"},
		{"  0 3 * * *  ", time.UTC, "2025-06-11T03:00:00Z"},
		{"0 0 29 2 *", time.UTC, "2028-02-29T00:00:00Z"},
	}
	for _, c := range cases {
		s, err := ParseSchedule(c.expr, c.loc)
		if err != nil {
			t.Errorf("ParseSchedule(%q): %v", c.expr, err)
			continue
		}
		if got := s.Next(from).UTC().Format(time.RFC3339); got != c.want {
			t.Errorf("%q in %s: next run after %s is %s, want %s", c.expr, c.loc, from.Format(time.RFC3339), got, c.want)
		}
	}
}

// What robfig/cron v3.0.1 does at daylight-saving changes in a zone that
// has them, as ParseSchedule's doc comment states. Europe/London went from
// 01:00 GMT to 02:00 BST on 2025-03-30 and from 02:00 BST back to 01:00
// GMT on 2025-10-26 (source: the IANA time zone database, tzdata's europe
// file, as shipped in Go's time/tzdata).
func TestScheduleDaylightSaving(t *testing.T) {
	london, err := time.LoadLocation("Europe/London")
	if err != nil {
		t.Fatal(err)
	}
	runs := func(expr string, from time.Time, n int) []string {
		s, err := ParseSchedule(expr, london)
		if err != nil {
			t.Fatal(err)
		}
		var out []string
		for range n {
			from = s.Next(from)
			out = append(out, from.In(london).Format("2006-01-02 15:04 MST"))
		}
		return out
	}
	cases := []struct {
		name, expr string
		from       time.Time
		want       []string
	}{
		{"a daily slot in the spring gap is skipped that day", "30 1 * * *", time.Date(2025, 3, 29, 12, 0, 0, 0, london),
			[]string{"2025-03-31 01:30 BST", "2025-04-01 01:30 BST"}},
		{"slots in the spring gap are skipped", "*/20 * * * *", time.Date(2025, 3, 30, 0, 30, 0, 0, london),
			[]string{"2025-03-30 00:40 GMT", "2025-03-30 02:00 BST", "2025-03-30 02:20 BST"}},
		{"a daily slot in the repeated autumn hour runs twice", "30 1 * * *", time.Date(2025, 10, 25, 12, 0, 0, 0, london),
			[]string{"2025-10-26 01:30 BST", "2025-10-26 01:30 GMT", "2025-10-27 01:30 GMT"}},
		{"a slot outside the change is untouched", "0 3 * * *", time.Date(2025, 3, 29, 12, 0, 0, 0, london),
			[]string{"2025-03-30 03:00 BST", "2025-03-31 03:00 BST"}},
		{"@every counts elapsed time across the change", "@every 1h", time.Date(2025, 3, 30, 0, 30, 0, 0, london),
			[]string{"2025-03-30 02:30 BST", "2025-03-30 03:30 BST"}},
	}
	for _, c := range cases {
		got := runs(c.expr, c.from, len(c.want))
		if strings.Join(got, ", ") != strings.Join(c.want, ", ") {
			t.Errorf("%s: %q from %s runs at %v, want %v", c.name, c.expr, c.from, got, c.want)
		}
	}
}

func TestParseDuration(t *testing.T) {
	cases := []struct {
		in   string
		want time.Duration
	}{
		{"720h", 720 * time.Hour}, {"30d", 720 * time.Hour}, {"2w", 336 * time.Hour}, {"1d12h", 36 * time.Hour},
		{"1.5d", 36 * time.Hour}, {"90m", 90 * time.Minute}, {"1h30m", 90 * time.Minute}, {"-1d", -24 * time.Hour}, {"0", 0},
	}
	for _, c := range cases {
		if got, err := ParseDuration(c.in); err != nil || got != c.want {
			t.Errorf("ParseDuration(%q) = %v, %v; want %v", c.in, got, err, c.want)
		}
	}
	for _, in := range []string{"", "30", "30 days", "d", "1e3d", "99999999d", "1y", "1dd"} {
		if got, err := ParseDuration(in); err == nil {
			t.Errorf("ParseDuration(%q) = %v, want an error", in, got)
		}
	}
}
