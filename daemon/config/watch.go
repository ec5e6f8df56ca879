package config

import (
	"github.com/curvewatch/curvewatch/fit"
)

// watch reads a model's watch section (e, nil when absent) and fills each
// key from it, else from the spec's watch section, else from the default.
func (p *parser) watch(e *entry, path string, spec *fit.Spec) Watch {
	w := Watch{
		Against:          DefaultAgainst,
		PracticalShift:   DefaultPracticalShift,
		Level:            DefaultLevel,
		DevianceIncrease: DefaultDevianceIncrease,
		ConfirmRuns:      DefaultConfirmRuns,
		FailingRuns:      DefaultFailingRuns,
	}
	if spec != nil {
		// ParseSpec has checked these values and kept them as string,
		// float64 and int.
		if v, ok := spec.Watch["against"].(string); ok {
			w.Against = v
		}
		if v, ok := spec.Watch["practical_shift"].(float64); ok {
			w.PracticalShift = v
		}
		if v, ok := spec.Watch["level"].(float64); ok {
			w.Level = v
		}
		if v, ok := spec.Watch["deviance_increase"].(float64); ok {
			w.DevianceIncrease = v
		}
		if v, ok := spec.Watch["confirm_runs"].(int); ok {
			w.ConfirmRuns = v
		}
	}
	if e == nil {
		return w
	}
	entries, ok := p.mapping(e.val, e.line, path, "watch", watchKeys...)
	if !ok {
		return w
	}
	for _, f := range entries {
		fpath := join(path, f.key)
		switch f.key {
		case "against":
			v, ok := p.text(f, fpath, "baseline or previous")
			switch {
			case !ok:
			case v != AgainstBaseline && v != AgainstPrevious:
				p.add(f.line, fpath, "against %q is not baseline (compare with the pinned fit) or previous (compare with the latest earlier fit that does not overlap)", clip(v))
			default:
				w.Against = v
			}
		case "practical_shift":
			if v, ok := p.number(f, fpath); ok && v <= 0 {
				p.add(f.line, fpath, "practical_shift %s must be above 0: it is the smallest curve shift worth an alert, in link-scale units, e.g. 0.5", clip(f.val.Value))
			} else if ok {
				w.PracticalShift = v
			}
		case "level":
			if v, ok := p.number(f, fpath); ok && (v <= 0 || v >= 1) {
				p.add(f.line, fpath, "level %s must be between 0 and 1, e.g. 0.99 for a 99%% simultaneous band", clip(f.val.Value))
			} else if ok {
				w.Level = v
			}
		case "deviance_increase":
			if v, ok := p.number(f, fpath); ok && v <= 0 {
				p.add(f.line, fpath, "deviance_increase %s must be above 0: it is the relative increase in predictive deviance that alerts, e.g. 0.15 for 15%%", clip(f.val.Value))
			} else if ok {
				w.DevianceIncrease = v
			}
		case "confirm_runs":
			if v, ok := p.whole(f, fpath); ok && v < 1 {
				p.add(f.line, fpath, "confirm_runs %d must be at least 1: it counts consecutive breaching runs before an alert fires", v)
			} else if ok {
				w.ConfirmRuns = v
			}
		case "failing_runs":
			if v, ok := p.whole(f, fpath); ok && v < 1 {
				p.add(f.line, fpath, "failing_runs %d must be at least 1: it counts refits failing in a row before a refit-failing alert fires", v)
			} else if ok {
				w.FailingRuns = v
			}
		}
	}
	return w
}
