package fit

import (
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/stat/distuv"
)

// VerdictNotCompared marks a term that could not be tested (for example a
// factor with no level in common, or a linear term aliased in one fit); the
// report's warnings say why.
const VerdictNotCompared = "not compared"

// Compare compares a candidate fit with a reference fit of the same model
// and says, term by term, whether a fitted relationship has changed.
//
// Both documents must be converged fits of the same spec (checkStructure)
// on separate rows (see checkOverlap and Tolerance.AllowOverlap); anything
// else is a *CompareError naming the reason, never a verdict.
//
// For a curve, both fits are evaluated through their own bases on a
// common grid of 200 points over the covariate range both had data in (the
// period for a cyclic curve), and each is re-centred over that grid (the
// operator C = I − 11ᵀ/m) so that a change in the covariate mix, which
// moves a data-centred curve up or down, is not mistaken for a shift. With
// G_r, G_c the model-matrix rows at the grid and V_r, V_c the posterior
// covariances of the term's coefficients,
//
//	Δ = C(G_c β_c − G_r β_r),  Var(Δ) = C(G_c V_c G_cᵀ + G_r V_r G_rᵀ)C,
//
// the fits being independent. The simultaneous critical value c at
// tol.Level and the p-value of the observed max_x |Δ(x)|/se(x) come from
// the same 10 000 draws of Δ from its posterior (Ruppert, Wand & Carroll
// 2003, §6.5). Score = max|Δ|/se ÷ c; Size = max|Δ|. Surfaces are compared
// in the same way on a 30×30 grid over the common rectangle, leaving out
// points either fit marks far from its data. Linear terms compare slopes
// (z-test; Size is the slope difference times half the common range, the
// largest shift of the centred line there); factors compare each level
// known to both fits against the reference fit's baseline level (the
// term's statistic is the largest |z|, its p-value simulated from the
// correlated level differences). The model's level — the intercept plus
// the means of the curves and surfaces over the common grids and the
// linear terms at the middle of their common ranges, at the baseline levels
// of factors — is compared by a z-test.
//
// The p-values of all tested items (terms and the level) are adjusted by
// Holm's (1979) step-down method unless tol.Multiplicity is "none". An item
// is real when its adjusted p-value is below 1 − Level, and breaches when
// it is real and its Size exceeds tol.PracticalShift (VerdictShifted); a
// real shift no larger than that is VerdictSmall.
//
// The noise comparison (gaussian and gamma) is reported but never breaches.
// The predictive degradation needs the candidate's rows and is left nil.
func Compare(ref, cand *Document, tol Tolerance) (*ShiftReport, error) {
	tol = tol.filled()
	if !(tol.Level > 0 && tol.Level < 1) {
		return nil, fmt.Errorf("tolerance level %g must be between 0 and 1", tol.Level)
	}
	if !(tol.PracticalShift >= 0) || math.IsInf(tol.PracticalShift, 0) {
		return nil, fmt.Errorf("practical shift %g must be 0 or above", tol.PracticalShift)
	}
	if tol.Multiplicity != "holm" && tol.Multiplicity != "none" {
		return nil, fmt.Errorf("multiplicity %q: want holm or none", tol.Multiplicity)
	}
	if !(tol.NoiseRatio >= 1) {
		return nil, fmt.Errorf("noise ratio %g must be at least 1", tol.NoiseRatio)
	}
	if err := checkDocument(ref, "reference"); err != nil {
		return nil, err
	}
	if err := checkDocument(cand, "candidate"); err != nil {
		return nil, err
	}
	warn, err := checkStructure(ref, cand)
	if err != nil {
		return nil, err
	}
	note, w, err := checkOverlap(ref, cand, tol.AllowOverlap)
	if err != nil {
		return nil, err
	}
	warn = append(warn, w...)

	c := &comparison{tol: tol, ref: newDocView(ref), cand: newDocView(cand), varScale: 1 - note.Shared}
	rep := &ShiftReport{Format: CompareFormat, Model: ref.Model, Reference: brief(ref), Candidate: brief(cand), Tolerance: tol, Overlap: note}
	if cand.Model != ref.Model {
		warn = append(warn, fmt.Sprintf("the fits name different models (%q, %q); their specs agree, so they are compared", ref.Model, cand.Model))
	}
	candTerms := map[string]*TermResult{}
	for i := range cand.Terms {
		candTerms[cand.Terms[i].Name] = &cand.Terms[i]
	}
	for i := range ref.Terms {
		tr := &ref.Terms[i]
		tc := candTerms[tr.Name]
		delete(candTerms, tr.Name)
		if tc == nil {
			warn = append(warn, fmt.Sprintf("term %q: level %q of %q has a curve in the reference fit only; not compared", tr.Name, tr.ByLevel, tr.By))
			continue
		}
		var ts *TermShift
		var err error
		switch tr.Kind {
		case Curve:
			ts, err = c.curve(tr, tc)
		case Surface:
			ts, err = c.surface(tr, tc)
		case Linear:
			ts, err = c.linear(tr, tc)
		case Factor:
			ts, err = c.factor(tr, tc)
		default:
			err = refuse(ReasonDamaged, "", tr.Name, "unknown term kind %q", tr.Kind)
		}
		if err != nil {
			return nil, err
		}
		ts.Name, ts.Kind = tr.Name, tr.Kind
		ts.EDFChange = tc.EDF - tr.EDF
		ts.ShapeChange = shapeChange(tr, tc)
		rep.Terms = append(rep.Terms, *ts)
	}
	for _, tc := range cand.Terms { // in the candidate's order
		if candTerms[tc.Name] != nil {
			warn = append(warn, fmt.Sprintf("term %q: level %q of %q has a curve in the candidate fit only; not compared", tc.Name, tc.ByLevel, tc.By))
		}
	}
	rep.Level = c.level()
	levelTested := c.levelBroken == ""
	if !levelTested {
		c.warn = append(c.warn, "the model levels are not compared: "+c.levelBroken)
	}

	// Holm's step-down adjustment over the tested items.
	var ps []float64
	for i := range rep.Terms {
		if rep.Terms[i].Verdict != VerdictNotCompared {
			ps = append(ps, rep.Terms[i].PValue)
		}
	}
	if levelTested {
		ps = append(ps, rep.Level.PValue)
	}
	adj := adjustP(ps, tol.Multiplicity)
	rep.Tests = len(ps)
	k := 0
	for i := range rep.Terms {
		ts := &rep.Terms[i]
		if ts.Verdict == VerdictNotCompared {
			continue
		}
		ts.PAdjusted = adj[k]
		k++
		ts.Verdict = tol.verdict(ts.PAdjusted, ts.Size)
		if ts.Verdict == VerdictShifted {
			rep.Breach = true
		}
		for name, ls := range ts.Levels {
			// A level is real when the term is and its |z| is beyond the
			// term's simultaneous critical value (the single-step max-|z|
			// adjustment within the factor: Westfall & Young 1993,
			// "Resampling-Based Multiple Testing").
			ls.Verdict = VerdictStable
			if ts.Verdict != VerdictStable && math.Abs(ls.Z) > ts.Critical {
				ls.Verdict = tol.verdict(0, math.Abs(ls.Delta))
			}
			ts.Levels[name] = ls
		}
	}
	if levelTested {
		rep.Level.PAdjusted = adj[k]
		rep.Level.Verdict = tol.verdict(rep.Level.PAdjusted, math.Abs(rep.Level.Delta))
		if rep.Level.Verdict == VerdictShifted {
			rep.Breach = true
		}
	} else {
		rep.Level.Verdict, rep.Level.PValue, rep.Level.PAdjusted = VerdictNotCompared, 1, 1
	}
	rep.Noise = noiseChange(ref, cand, tol)
	if rep.Noise != nil && note.Shared > 0 {
		warn = append(warn, "the noise test treats the two scale estimates as independent, which overlapping rows are not: its p-value is optimistic")
	}
	rep.Warnings = append(warn, c.warn...)
	return rep, nil
}

// verdict classifies an item from its adjusted p-value and its size.
func (t Tolerance) verdict(pAdjusted, size float64) string {
	switch {
	case !(pAdjusted < 1-t.Level):
		return VerdictStable
	case size > t.PracticalShift:
		return VerdictShifted
	default:
		return VerdictSmall
	}
}

// adjustP returns Holm's (1979) step-down adjusted p-values ("holm"): with
// p₍₁₎ ≤ … ≤ p₍k₎, p̃₍ᵢ₎ = max_{j≤i} min(1, (k − j + 1)·p₍ⱼ₎); rejecting
// p̃ < α controls the family-wise error rate at α under any dependence.
// "none" returns the p-values unchanged.
func adjustP(p []float64, method string) []float64 {
	out := slices.Clone(p)
	if method == "none" {
		return out
	}
	k := len(p)
	order := make([]int, k)
	for i := range order {
		order[i] = i
	}
	slices.SortStableFunc(order, func(a, b int) int {
		switch {
		case p[a] < p[b]:
			return -1
		case p[a] > p[b]:
			return 1
		}
		return 0
	})
	run := 0.0
	for j, i := range order {
		run = math.Max(run, math.Min(1, float64(k-j)*p[i]))
		out[i] = run
	}
	return out
}

// shapeChange reads each fit's could-be-straight check.
func shapeChange(tr, tc *TermResult) string {
	if tr.Inference == nil || tc.Inference == nil {
		return ""
	}
	switch {
	case tr.Inference.StraightFits && !tc.Inference.StraightFits:
		return "was straight, now curved"
	case !tr.Inference.StraightFits && tc.Inference.StraightFits:
		return "was curved, now straight"
	}
	return ""
}

func brief(d *Document) FitBrief {
	return FitBrief{N: d.N, Fingerprint: d.Data.Fingerprint, Window: d.Data.Window,
		DevianceExplained: d.DevianceExplained, Scale: d.Scale, EDFTotal: d.EDFTotal}
}

// noiseChange compares the scale estimates of gaussian and gamma fits: the
// ratio φ_c/φ_r against F(ν_c, ν_r) on the residual degrees of freedom,
// two-sided (exact for gaussian errors and independent windows; for the
// gamma family's Pearson estimate an approximation: Venables & Ripley 2002,
// "Modern Applied Statistics with S", §7.1). The verdict is noisier or
// quieter only when p < 1 − Level and the ratio is beyond NoiseRatio (or
// below its inverse). It is a finding, not a breach.
func noiseChange(ref, cand *Document, tol Tolerance) *NoiseChange {
	if !ref.ScaleEstimated || !cand.ScaleEstimated || (ref.Family != Gaussian && ref.Family != Gamma) {
		return nil
	}
	if !(ref.Scale > 0) || !(cand.Scale > 0) || !(ref.ResidualDF > 0) || !(cand.ResidualDF > 0) {
		return nil
	}
	n := &NoiseChange{Ratio: cand.Scale / ref.Scale, DF1: cand.ResidualDF, DF2: ref.ResidualDF, Verdict: "steady"}
	f := distuv.F{D1: n.DF1, D2: n.DF2}
	n.PValue = math.Min(1, 2*math.Min(f.CDF(n.Ratio), f.Survival(n.Ratio)))
	if n.PValue < 1-tol.Level {
		switch {
		case n.Ratio > tol.NoiseRatio:
			n.Verdict = "noisier"
		case n.Ratio < 1/tol.NoiseRatio:
			n.Verdict = "quieter"
		}
	}
	return n
}
