package config

import (
	"fmt"
	"strings"
	"time"

	"github.com/robfig/cron/v3"
)

// descriptors are the named schedules robfig/cron's standard parser knows
// (@every aside).
var descriptors = []string{"@yearly", "@annually", "@monthly", "@weekly", "@daily", "@midnight", "@hourly"}

// ParseSchedule reads a model's schedule in the time zone loc:
//   - a 5-field cron expression, minute hour day-of-month month
//     day-of-week ("0 3 * * *" is 03:00 every day), with the standard
//     syntax (*, lists, ranges, steps, month and weekday names), read by
//     github.com/robfig/cron/v3's standard parser;
//   - a descriptor: @yearly (@annually), @monthly, @weekly, @daily
//     (@midnight) or @hourly;
//   - @every DURATION: runs DURATION apart (ParseDuration's units, at
//     least 1s, whole seconds), whatever the time zone.
//
// A CRON_TZ= or TZ= prefix is refused: the config's timezone key sets the
// zone for every model. An expression that matches no date (30 February)
// is refused too. The parser is called under recover, since it can panic
// on odd input; a panic becomes an error.
//
// Daylight-saving changes (robfig/cron v3.0.1's SpecSchedule.Next, which
// steps through local wall-clock time in loc; checked in
// TestScheduleDaylightSaving): a slot whose wall-clock time falls in the
// gap when clocks go forward does not run that day (in Europe/London on
// 2025-03-30, "30 1 * * *" skips from 29 March to 31 March, and "*/20 * * *
// *" goes from 00:40 straight to 02:00); a slot in the hour repeated when
// clocks go back runs twice, once in each offset ("30 1 * * *" runs at
// 01:30 BST and again at 01:30 GMT on 2025-10-26). Schedules in UTC, the
// default, and @every schedules have neither effect.
func ParseSchedule(expr string, loc *time.Location) (s cron.Schedule, err error) {
	spec := strings.TrimSpace(expr)
	bad := func(format string, args ...any) (cron.Schedule, error) {
		return nil, fmt.Errorf("%q is not a 5-field cron expression or @every duration: %s", clip(expr), fmt.Sprintf(format, args...))
	}
	switch {
	case spec == "":
		return bad(`it is blank; write e.g. "0 3 * * *" (03:00 every day) or @every 10m`)
	case strings.HasPrefix(spec, "TZ=") || strings.HasPrefix(spec, "CRON_TZ="):
		return bad("a time zone prefix is not allowed in a schedule; set the zone for every model with the top-level timezone key")
	case spec == "@every" || strings.HasPrefix(spec, "@every "):
		d, err := ParseDuration(strings.TrimSpace(strings.TrimPrefix(spec, "@every")))
		switch {
		case err != nil:
			return bad("%v", err)
		case d < time.Second:
			return bad("@every needs a duration of at least 1s")
		case d%time.Second != 0:
			return bad("@every needs a whole number of seconds, not %s", d)
		}
		return cron.Every(d), nil
	case strings.HasPrefix(spec, "@"):
		if !contains(descriptors, spec) {
			return bad("%q is not a descriptor; use @yearly, @monthly, @weekly, @daily, @hourly or @every DURATION", clip(spec))
		}
	default:
		if n := len(strings.Fields(spec)); n != 5 {
			return bad("it has %s; write minute hour day-of-month month day-of-week, e.g. \"0 3 * * *\" (03:00 every day)", count(n, "field", "fields"))
		}
	}
	defer func() {
		if r := recover(); r != nil {
			s, err = bad("the cron parser failed on it (%v)", r)
		}
	}()
	parsed, err := cron.ParseStandard(spec)
	if err != nil {
		return bad("%v", err)
	}
	ss, ok := parsed.(*cron.SpecSchedule)
	if !ok {
		return bad("unexpected schedule type %T", parsed)
	}
	ss.Location = loc
	// SpecSchedule.Next looks five years ahead and returns the zero time
	// when nothing matches, e.g. for 30 February.
	if ss.Next(time.Now()).IsZero() {
		return bad("no date matches it (a day that does not exist in the month, such as 30 February?)")
	}
	return ss, nil
}
