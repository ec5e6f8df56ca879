package daemon

import (
	"strings"
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs"
)

// A comparison becomes one finding per tested term and one for the level;
// an untested term yields none; the false-discovery-rate gate turns a
// breach into a clean finding that says why.
func TestShiftFindings(t *testing.T) {
	rep := &fit.ShiftReport{
		Tolerance: fit.Tolerance{Level: 0.99},
		Terms: []fit.TermShift{
			{Name: "water_temp", Kind: fit.Curve, Verdict: fit.VerdictShifted, Score: 2.4, Size: 0.9, Outside: [][2]float64{{18.2, 24}}},
			{Name: "flow", Kind: fit.Linear, Verdict: fit.VerdictStable, Score: 0.3, Size: 0.01},
			{Name: "site", Kind: fit.Factor, Verdict: fit.VerdictNotCompared},
		},
		Level: fit.LevelShift{Verdict: fit.VerdictSmall, Reference: 8.1, Candidate: 8.2, Delta: 0.1, Z: 3.1},
	}
	tests := []struct {
		name       string
		discovered bool
		want       map[alerts.Key]bool // breach by key
		summary    string
	}{
		{"judged alone", true, map[alerts.Key]bool{
			{Model: "m", Term: "water_temp", Kind: alerts.KindCurveShift}: true,
			{Model: "m", Term: "flow", Kind: alerts.KindCoefficientShift}: false,
			{Model: "m", Kind: alerts.KindLevelShift}:                     false,
		}, "over 18.2–24"},
		{"not a discovery", false, map[alerts.Key]bool{
			{Model: "m", Term: "water_temp", Kind: alerts.KindCurveShift}: false,
			{Model: "m", Term: "flow", Kind: alerts.KindCoefficientShift}: false,
			{Model: "m", Kind: alerts.KindLevelShift}:                     false,
		}, "not a discovery"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got := shiftFindings("m", rep, 1, 2, tc.discovered)
			if len(got) != len(tc.want) {
				t.Fatalf("%d findings, want %d: %+v", len(got), len(tc.want), got)
			}
			for _, f := range got {
				k := alerts.Key{Model: f.Model, Term: f.Term, Kind: f.Kind}
				want, ok := tc.want[k]
				if !ok || f.Breach != want {
					t.Errorf("%v: breach %v, want %v (known %v)", k, f.Breach, want, ok)
				}
				if f.Term == "water_temp" && !strings.Contains(f.Summary, tc.summary) {
					t.Errorf("summary %q lacks %q", f.Summary, tc.summary)
				}
				if f.Numbers["fit"] != int64(2) || f.Numbers["reference_fit"] != int64(1) {
					t.Errorf("%v: numbers %v lack the fit ids", k, f.Numbers)
				}
			}
		})
	}
}

func TestOtherFindings(t *testing.T) {
	rep := &fit.ShiftReport{
		Tolerance:   fit.Tolerance{DevianceIncrease: 0.15},
		Noise:       &fit.NoiseChange{Ratio: 2.1, PValue: 1e-5, Verdict: "noisier"},
		Degradation: &fit.Degradation{Ratio: 1.05, Rows: 400},
	}
	got := otherFindings("m", rep, 1, 2)
	if len(got) != 2 || got[0].Kind != alerts.KindNoiseChange || !got[0].Breach || got[1].Kind != alerts.KindDegradation || got[1].Breach {
		t.Fatalf("%+v", got)
	}
	rep.Degradation.Ratio, rep.Degradation.Breach = 1.4, true
	if got := otherFindings("m", rep, 1, 2); !got[1].Breach || !strings.Contains(got[1].Summary, "15%") {
		t.Errorf("%+v", got[1])
	}
}

func TestRefitAndStaleFindings(t *testing.T) {
	failed := refitFinding("m", &jobs.Result{Status: jobs.StatusFailed, Reason: `column "flow" is not in table readings`}, 3)
	if !failed.Breach || failed.Confirm != 3 || !strings.Contains(failed.Summary, `"flow"`) {
		t.Errorf("%+v", failed)
	}
	if ok := refitFinding("m", &jobs.Result{Status: jobs.StatusSucceeded}, 3); ok.Breach {
		t.Errorf("%+v", ok)
	}
	now := time.Date(2026, 6, 1, 12, 0, 0, 0, time.UTC)
	tests := []struct {
		newest time.Time
		breach bool
	}{
		{time.Time{}, true},
		{now.Add(-30 * time.Minute), false},
		{now.Add(-3 * time.Hour), true},
	}
	for _, tc := range tests {
		f := staleFinding("m", tc.newest, now, time.Hour)
		if f.Breach != tc.breach || f.Confirm != 1 || f.Summary == "" {
			t.Errorf("newest %v: %+v", tc.newest, f)
		}
	}
}

func TestRound(t *testing.T) {
	for _, tc := range []struct {
		in   float64
		want any
	}{{1.23456, 1.235}, {0.000123456, 0.0001235}, {-98765, -98770.0}, {0, 0.0}} {
		if got := round(tc.in); got != tc.want {
			t.Errorf("round(%g) = %v, want %v", tc.in, got, tc.want)
		}
	}
}
