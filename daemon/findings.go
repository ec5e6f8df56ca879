package daemon

import (
	"fmt"
	"math"
	"strings"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs"
)

// shiftFindings turns a comparison into one finding per term (curve and
// surface shifts, linear and factor shifts) and one for the level. A term
// the comparison could not test yields no finding, so its alert keeps its
// state. discovered gates the breaches under the false-discovery-rate
// option: false turns every breach into a clean result (the model is not a
// discovery among its schedule's family); pass true otherwise.
func shiftFindings(model string, rep *fit.ShiftReport, refID, candID int64, discovered bool) []alerts.Finding {
	var out []alerts.Finding
	level := fmt.Sprintf("%g%%", 100*rep.Tolerance.Level)
	for _, t := range rep.Terms {
		if t.Verdict == fit.VerdictNotCompared {
			continue
		}
		kind := alerts.KindCurveShift
		if t.Kind == fit.Linear || t.Kind == fit.Factor {
			kind = alerts.KindCoefficientShift
		}
		nums := map[string]any{
			"score": round(t.Score), "size": round(t.Size), "p_adjusted": round(t.PAdjusted),
			"reference_fit": refID, "fit": candID, "verdict": t.Verdict,
		}
		if len(t.Outside) > 0 {
			nums["outside"] = t.Outside
		}
		breach := t.Verdict == fit.VerdictShifted
		var summary string
		switch {
		case breach && !discovered:
			summary = fmt.Sprintf("%s %s %s by up to %.3g (score %.2f), but the model is not a discovery under the false-discovery-rate control",
				t.Kind, t.Name, t.Verdict, t.Size, t.Score)
			nums["fdr_discovery"] = false
		case breach:
			summary = fmt.Sprintf("%s %s shifted by up to %.3g on the link scale, %.2f× the edge of its %s band%s",
				t.Kind, t.Name, t.Size, t.Score, level, outsideText(t.Outside))
		default:
			summary = fmt.Sprintf("%s %s %s (largest shift %.3g, score %.2f)", t.Kind, t.Name, t.Verdict, t.Size, t.Score)
		}
		out = append(out, alerts.Finding{Model: model, Term: t.Name, Kind: kind, Breach: breach && discovered,
			Summary: summary, Numbers: nums})
	}
	if l := rep.Level; l.Verdict != "" && l.Verdict != fit.VerdictNotCompared {
		breach := l.Verdict == fit.VerdictShifted
		out = append(out, alerts.Finding{Model: model, Kind: alerts.KindLevelShift, Breach: breach && discovered,
			Summary: fmt.Sprintf("overall level %s: %.4g → %.4g (change %+.3g, z %.2f)", l.Verdict, l.Reference, l.Candidate, l.Delta, l.Z),
			Numbers: map[string]any{"reference": round(l.Reference), "current": round(l.Candidate), "delta": round(l.Delta),
				"z": round(l.Z), "p_adjusted": round(l.PAdjusted), "reference_fit": refID, "fit": candID}})
	}
	return out
}

// otherFindings are the findings of a comparison that the
// false-discovery-rate option does not gate: the noise and the predictive
// check.
func otherFindings(model string, rep *fit.ShiftReport, refID, candID int64) []alerts.Finding {
	var out []alerts.Finding
	if n := rep.Noise; n != nil {
		out = append(out, alerts.Finding{Model: model, Kind: alerts.KindNoiseChange, Breach: n.Verdict != "steady",
			Summary: fmt.Sprintf("residual scale %s: %.3g× the reference's (F-test p = %.3g)", n.Verdict, n.Ratio, n.PValue),
			Numbers: map[string]any{"ratio": round(n.Ratio), "p_value": round(n.PValue), "reference_fit": refID, "fit": candID}})
	}
	if d := rep.Degradation; d != nil {
		verdict := "within tolerance"
		if d.Breach {
			verdict = fmt.Sprintf("worse than the %.0f%% allowed", 100*rep.Tolerance.DevianceIncrease)
		}
		out = append(out, alerts.Finding{Model: model, Kind: alerts.KindDegradation, Breach: d.Breach,
			Summary: fmt.Sprintf("the reference predicts the new rows with %.3g× the deviance of the new fit: %s", d.Ratio, verdict),
			Numbers: map[string]any{"ratio": round(d.Ratio), "rows": d.Rows, "extrapolated": d.Extrapolated,
				"reference_fit": refID, "fit": candID}})
	}
	return out
}

// refitFinding judges the refit itself: a failure breaches the
// refit-failing alert, which fires after failingRuns in a row.
func refitFinding(model string, res *jobs.Result, failingRuns int) alerts.Finding {
	f := alerts.Finding{Model: model, Kind: alerts.KindRefitFailing, Confirm: failingRuns,
		Numbers: map[string]any{"fit": res.FitID, "status": res.Status}}
	if res.Status == jobs.StatusFailed {
		f.Breach = true
		f.Summary = "the refit failed: " + res.Reason
		f.Numbers["reason"] = res.Reason
	} else {
		f.Summary = "the refit " + res.Status
	}
	return f
}

// staleFinding judges whether the source still delivers rows: newest is
// the newest row seen (zero: none ever). It fires on first sight.
func staleFinding(model string, newest, now time.Time, maxAge time.Duration) alerts.Finding {
	f := alerts.Finding{Model: model, Kind: alerts.KindDataStale, Confirm: 1,
		Numbers: map[string]any{"max_age_seconds": maxAge.Seconds()}}
	if newest.IsZero() {
		f.Breach = true
		f.Summary = "no rows have arrived from the source at all"
		return f
	}
	age := now.Sub(newest)
	f.Numbers["newest_row"] = newest.UTC().Format(time.RFC3339)
	f.Numbers["age_seconds"] = math.Round(age.Seconds())
	f.Breach = age > maxAge
	if f.Breach {
		f.Summary = fmt.Sprintf("no new rows for %s (newest %s; max_age %s)", roundDuration(age), newest.UTC().Format(time.RFC3339), maxAge)
	} else {
		f.Summary = fmt.Sprintf("rows arriving: newest is %s old", roundDuration(age))
	}
	return f
}

// outsideText lists the intervals where a curve left its band.
func outsideText(outside [][2]float64) string {
	if len(outside) == 0 {
		return ""
	}
	parts := make([]string, 0, min(len(outside), 3))
	for i, iv := range outside {
		if i == 3 {
			parts = append(parts, "…")
			break
		}
		parts = append(parts, fmt.Sprintf("%.4g–%.4g", iv[0], iv[1]))
	}
	return " over " + strings.Join(parts, ", ")
}

// round keeps 4 significant digits, for readable numbers in alerts; it
// maps NaN and ±Inf to nil (JSON has no such numbers).
func round(v float64) any {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	if v == 0 {
		return 0.0
	}
	p := math.Pow(10, 3-math.Floor(math.Log10(math.Abs(v))))
	return math.Round(v*p) / p
}

// roundDuration shortens a duration to whole minutes (or seconds under a
// minute) for summaries.
func roundDuration(d time.Duration) time.Duration {
	if d < time.Minute {
		return d.Round(time.Second)
	}
	return d.Round(time.Minute)
}
