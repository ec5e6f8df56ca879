package config

import (
	"fmt"
	"regexp"
	"strconv"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"
)

// daysOrWeeks matches a number with the unit d (day) or w (week).
var daysOrWeeks = regexp.MustCompile(`([0-9]*\.?[0-9]+)([dw])`)

// ParseDuration reads a duration: a Go duration ("720h", "90m", "1h30m")
// or one using two more units, d (24 hours) and w (7 days), alone or with
// the others ("30d", "4w", "1d12h"). Days are fixed 24-hour spans, not
// calendar days: across a daylight-saving change 1d is still 24 hours.
func ParseDuration(s string) (time.Duration, error) {
	const help = "write a number with a unit, e.g. 720h, 30d, 90m (units: s, m, h, d = 24h, w = 7d)"
	if strings.TrimSpace(s) == "" {
		return 0, fmt.Errorf("the duration is blank: %s", help)
	}
	bad := false
	g := daysOrWeeks.ReplaceAllStringFunc(s, func(m string) string {
		sub := daysOrWeeks.FindStringSubmatch(m)
		v, err := strconv.ParseFloat(sub[1], 64)
		if err != nil || v > 1e7 {
			bad = true
			return m
		}
		hours := v * 24
		if sub[2] == "w" {
			hours *= 7
		}
		return strconv.FormatFloat(hours, 'f', -1, 64) + "h"
	})
	d, err := time.ParseDuration(g)
	if bad || err != nil {
		return 0, fmt.Errorf("%q is not a duration: %s", clip(s), help)
	}
	return d, nil
}

// duration reads a duration value.
func (p *parser) duration(e entry, path string) (time.Duration, bool) {
	n := e.val
	switch {
	case p.failed[n]:
		return 0, false
	case isNull(n):
		p.add(e.line, path, "%s has no value: give a duration such as 720h or 30d", e.key)
		return 0, false
	case n.Kind != yaml.ScalarNode || n.ShortTag() != "!!str":
		if n.Kind == yaml.ScalarNode && (n.ShortTag() == "!!int" || n.ShortTag() == "!!float") {
			p.add(e.line, path, "%s %s has no unit: write e.g. %sh or %sd", e.key, clip(n.Value), clip(n.Value), clip(n.Value))
		} else {
			p.add(e.line, path, "%s must be a duration such as 720h or 30d, not %s", e.key, describe(n))
		}
		return 0, false
	}
	d, err := ParseDuration(n.Value)
	if err != nil {
		p.add(e.line, path, "%s %v", e.key, err)
		return 0, false
	}
	return d, true
}

// fmtDuration writes d the way it is usually configured: in days when it
// is a whole number of days, else as Go writes it without zero units.
func fmtDuration(d time.Duration) string {
	const day = 24 * time.Hour
	if d >= day && d%day == 0 {
		return fmt.Sprintf("%dd", d/day)
	}
	s := d.String()
	if strings.HasSuffix(s, "m0s") {
		s = strings.TrimSuffix(s, "0s")
	}
	if strings.HasSuffix(s, "h0m") {
		s = strings.TrimSuffix(s, "0m")
	}
	return s
}
