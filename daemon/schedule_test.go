package daemon

import (
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/daemon/config"
)

func mustSchedule(t *testing.T, expr string, loc *time.Location) schedule {
	t.Helper()
	s, err := config.ParseSchedule(expr, loc)
	if err != nil {
		t.Fatal(err)
	}
	return newSchedule(s)
}

func TestLatestSlot(t *testing.T) {
	london, err := time.LoadLocation("Europe/London")
	if err != nil {
		t.Fatal(err)
	}
	utc := func(s string) time.Time {
		v, err := time.Parse(time.RFC3339, s)
		if err != nil {
			t.Fatal(err)
		}
		return v
	}
	// Daylight-saving dates: the UK clocks went forward at 01:00 UTC on
	// 2025-03-30 and back at 01:00 UTC on 2025-10-26 (source: the UK
	// government's clock-change dates, as config.ParseSchedule's doc).
	cases := []struct {
		name, expr string
		loc        *time.Location
		now, want  string
	}{
		{"daily, later the same day", "0 3 * * *", time.UTC, "2026-05-01T10:00:00Z", "2026-05-01T03:00:00Z"},
		{"daily, just before", "0 3 * * *", time.UTC, "2026-05-01T02:59:59Z", "2026-04-30T03:00:00Z"},
		{"daily, exactly on it", "0 3 * * *", time.UTC, "2026-05-01T03:00:00Z", "2026-05-01T03:00:00Z"},
		{"every minute", "* * * * *", time.UTC, "2026-05-01T10:00:30.5Z", "2026-05-01T10:00:00Z"},
		{"yearly: five lookbacks", "0 0 1 1 *", time.UTC, "2026-05-01T10:00:00Z", "2026-01-01T00:00:00Z"},
		{"monthly on the 1st, many steps", "* * 1 * *", time.UTC, "2026-05-02T10:00:00Z", "2026-05-01T23:59:00Z"},
		{"zone: 03:00 London in summer is 02:00 UTC", "0 3 * * *", london, "2026-05-01T02:30:00Z", "2026-05-01T02:00:00Z"},
		{"gap: 01:30 on 30 March 2025 does not exist", "30 1 * * *", london, "2025-03-30T12:00:00Z", "2025-03-29T01:30:00Z"},
		{"repeated hour: first 01:30 (BST)", "30 1 * * *", london, "2025-10-26T01:00:00Z", "2025-10-26T00:30:00Z"},
		{"repeated hour: second 01:30 (GMT)", "30 1 * * *", london, "2025-10-26T01:45:00Z", "2025-10-26T01:30:00Z"},
		{"@every 10m is aligned", "@every 10m", time.UTC, "2026-05-01T10:17:42Z", "2026-05-01T10:10:00Z"},
		{"@every ignores the zone", "@every 1h", london, "2026-05-01T10:17:42Z", "2026-05-01T10:00:00Z"},
		{"@every 1s", "@every 1s", time.UTC, "2026-05-01T10:17:42.9Z", "2026-05-01T10:17:42Z"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			s := mustSchedule(t, c.expr, c.loc)
			got, ok := s.latest(utc(c.now))
			if !ok || !got.Equal(utc(c.want)) || got.Location() != time.UTC {
				t.Errorf("latest(%s) = %v (%v), want %s in UTC", c.now, got, ok, c.want)
			}
			// The slot is a run time: the schedule's next run after the
			// instant before it is the slot itself.
			if next := s.Next(got.Add(-time.Second)); !next.Equal(got) {
				t.Errorf("Next(slot - 1s) = %v, want the slot %v", next, got)
			}
		})
	}
}

// River's periodic enqueuer calls Next with the run time it just used;
// every replica must get the same sequence whenever it started.
func TestNextEveryIsAligned(t *testing.T) {
	s := mustSchedule(t, "@every 10m", time.UTC)
	start := time.Date(2026, 5, 1, 10, 3, 17, 250, time.UTC)
	n := s.Next(start)
	for i, want := range []string{"10:10:00", "10:20:00", "10:30:00"} {
		if got := n.Format("15:04:05"); got != want {
			t.Errorf("run %d at %s, want %s", i, got, want)
		}
		n = s.Next(n)
	}
}

// The periodic constructor looks periodicLead ahead: fired up to 100 ms
// early (River's margin) or late by less than the interval minus the lead,
// it still names the run time it was fired for.
func TestSlotAroundRunTime(t *testing.T) {
	s := mustSchedule(t, "@every 1s", time.UTC)
	run := time.Date(2026, 5, 1, 10, 0, 5, 0, time.UTC)
	for _, off := range []time.Duration{-100 * time.Millisecond, 0, 300 * time.Millisecond, 700 * time.Millisecond} {
		if got, _ := s.latest(run.Add(off).Add(periodicLead)); !got.Equal(run) {
			t.Errorf("fired at run%+v: slot %v, want %v", off, got, run)
		}
	}
}
