package fit

import (
	"encoding/json"
	"strconv"
)

// Tolerance defaults (DESIGN.md, the watch section).
const (
	defaultPracticalShift   = 0.5
	defaultLevel            = 0.99
	defaultDevianceIncrease = 0.15
	defaultNoiseRatio       = 1.25
	defaultMultiplicity     = "holm"
)

// DefaultTolerance returns the documented defaults: PracticalShift 0.5,
// Level 0.99, DevianceIncrease 0.15, NoiseRatio 1.25, Multiplicity "holm",
// AllowOverlap false.
func DefaultTolerance() Tolerance {
	return Tolerance{}.WithDefaults()
}

// WithDefaults returns t with every zero field replaced by its default
// (see DefaultTolerance). A PracticalShift of exactly 0 is replaced too, so
// a caller who wants statistics only sets PracticalShift to 0 after
// WithDefaults (Compare itself never fills PracticalShift).
func (t Tolerance) WithDefaults() Tolerance {
	if t.PracticalShift == 0 {
		t.PracticalShift = defaultPracticalShift
	}
	return t.filled()
}

// filled fills the fields whose zero value has no meaning (Level,
// DevianceIncrease, NoiseRatio, Multiplicity), leaving PracticalShift as
// given.
func (t Tolerance) filled() Tolerance {
	if t.Level == 0 {
		t.Level = defaultLevel
	}
	if t.DevianceIncrease == 0 {
		t.DevianceIncrease = defaultDevianceIncrease
	}
	if t.NoiseRatio == 0 {
		t.NoiseRatio = defaultNoiseRatio
	}
	if t.Multiplicity == "" {
		t.Multiplicity = defaultMultiplicity
	}
	return t
}

// ToleranceFromSpec reads the tolerance from a spec's watch section
// (practical_shift, level, deviance_increase), with the defaults for
// absent keys and for a nil spec. Keys the engine does not use here
// (against, confirm_runs) are ignored; ParseSpec has already checked the
// values, and a value of the wrong type (from a hand-edited document) is
// ignored in favour of the default.
func ToleranceFromSpec(spec *Spec) Tolerance {
	t := DefaultTolerance()
	if spec == nil {
		return t
	}
	if v, ok := watchNumber(spec.Watch, "practical_shift"); ok && v >= 0 {
		t.PracticalShift = v
	}
	if v, ok := watchNumber(spec.Watch, "level"); ok && v > 0 && v < 1 {
		t.Level = v
	}
	if v, ok := watchNumber(spec.Watch, "deviance_increase"); ok && v > 0 {
		t.DevianceIncrease = v
	}
	return t
}

// watchNumber reads a number from a watch map as ParseSpec (float64, int)
// or a JSON decoder (float64, json.Number) left it.
func watchNumber(w map[string]any, key string) (float64, bool) {
	switch v := w[key].(type) {
	case float64:
		return v, finite(v)
	case int:
		return float64(v), true
	case int64:
		return float64(v), true
	case json.Number:
		x, err := v.Float64()
		return x, err == nil && finite(x)
	case string:
		x, err := strconv.ParseFloat(v, 64)
		return x, err == nil && finite(x)
	}
	return 0, false
}
