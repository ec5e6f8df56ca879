package daemon

import (
	"time"

	"github.com/robfig/cron/v3"
)

// A slot is the scheduled instant a refit is for: the fit's window ends at
// it, and the history holds at most one successful fit per (model, slot).
// Every replica must compute the same slots, so a slot depends only on the
// schedule and the clock, never on when a process started.
//
// Daylight saving: cron slots are robfig/cron v3.0.1's SpecSchedule.Next
// in the config's time zone, walked forward, so they follow its rules (see
// config.ParseSchedule): a wall-clock time inside the spring-forward gap is
// skipped that day, and one inside the repeated autumn hour gives two slots,
// one in each offset (two distinct instants, so two refits). Slots are
// stored and compared in UTC.

// schedule is a model's schedule as River's PeriodicSchedule, with slots.
type schedule struct {
	cron cron.Schedule
	// every is the delay of an @every schedule, 0 for a cron expression.
	every time.Duration
}

func newSchedule(s cron.Schedule) schedule {
	switch c := s.(type) {
	case cron.ConstantDelaySchedule:
		return schedule{cron: s, every: c.Delay}
	case *cron.ConstantDelaySchedule:
		return schedule{cron: s, every: c.Delay}
	}
	return schedule{cron: s}
}

// Next returns the first slot after t. @every d runs at the multiples of d
// since Go's zero time (for a d dividing a day: at UTC-aligned instants,
// 10:00, 10:10, … for @every 10m), not d after whenever a process started:
// robfig's ConstantDelaySchedule would give every leader its own phase.
func (s schedule) Next(t time.Time) time.Time {
	if s.every > 0 {
		return t.Truncate(s.every).Add(s.every)
	}
	return s.cron.Next(t)
}

// lookbacks are how far back latest starts walking the cron schedule,
// tried in turn until one holds a slot: short first, so that a frequent
// schedule takes a step or two; five years last, as far as robfig's Next
// searches.
var lookbacks = []time.Duration{
	2 * time.Minute, 2 * time.Hour, 49 * time.Hour, 32 * 24 * time.Hour,
	367 * 24 * time.Hour, 5 * 367 * 24 * time.Hour,
}

// maxSteps bounds the walk in one lookback (a schedule such as "* * 1 * *"
// can have 1,440 slots in the 32 days before the 2nd of a month).
const maxSteps = 100_000

// latest returns the latest slot at or before now, in UTC, and false when
// the schedule has none in the last five years.
func (s schedule) latest(now time.Time) (time.Time, bool) {
	if s.every > 0 {
		return now.Truncate(s.every).UTC(), true
	}
	for _, back := range lookbacks {
		var last time.Time
		t := now.Add(-back)
		for range maxSteps {
			n := s.cron.Next(t)
			// robfig's Next returns the zero time when nothing matches,
			// and must move forward; stop rather than loop otherwise.
			if n.IsZero() || n.After(now) || !n.After(t) {
				break
			}
			last, t = n, n
		}
		if !last.IsZero() {
			return last.UTC(), true
		}
	}
	return time.Time{}, false
}
