package fit

import (
	"fmt"
	"math"
)

// factor compares the levels of a factor known to both fits, each as its
// effect against the reference fit's baseline level R (the candidate is
// re-based to R when its own baseline differs, by subtracting its estimate
// for R). With rows a_ℓ picking those contrasts, Δ_ℓ = a_ℓᶜᵀβ_c − a_ℓʳᵀβ_r
// as for a curve's grid points; the term's statistic is max_ℓ |Δ_ℓ|/se_ℓ,
// with its critical value and p-value simulated from the correlated level
// differences (the levels of one fit are correlated through their shared
// baseline), exact normal values for a single level. A shrunk factor has no
// baseline: every level's estimate is compared, and the note gives the two
// fits' level variances.
func (c *comparison) factor(tr, tc *TermResult) (*TermShift, error) {
	ir, ic := factorIndex(tr), factorIndex(tc)
	ts := &TermShift{Levels: map[string]LevelShift{}}
	if tr.Shrunk && tr.LevelVariance != nil && tc.LevelVariance != nil {
		ts.Note = fmt.Sprintf("shrunk factor: level variance %.4g in the reference, %.4g in the candidate", *tr.LevelVariance, *tc.LevelVariance)
	}
	base := tr.Reference
	rebase := -1 // the candidate's coefficient for base, when it has one
	if base != tc.Reference {
		j, ok := ic[base]
		if !ok {
			c.warn = append(c.warn, fmt.Sprintf("term %q: the reference fit's baseline level %q is not estimated in the candidate (baseline %q), so the levels cannot be compared", tr.Name, base, tc.Reference))
			c.levelBroken = fmt.Sprintf("the baseline level %q of %q is missing from the candidate", base, tr.Name)
			ts.Verdict, ts.PValue = VerdictNotCompared, 1
			return ts, nil
		}
		rebase = j
		ts.Note = joinNote(ts.Note, fmt.Sprintf("the candidate's levels are re-based from %q to the reference's baseline %q", tc.Reference, base))
		// The candidate's level is then taken at base too.
		c.cand.level[tc.Coefficients[0]+j]++
	}
	knownR := func(l string) bool { _, ok := ir[l]; return ok }
	knownC := func(l string) bool { _, ok := ic[l]; return ok || (l == tc.Reference && l != "") }
	var common, only []string
	for _, l := range SortLevels(append(keys(tr.Levels), candLevels(tc)...)) {
		if l == base || (len(common) > 0 && common[len(common)-1] == l) || (len(only) > 0 && only[len(only)-1] == l) {
			continue
		}
		switch {
		case knownR(l) && knownC(l):
			common = append(common, l)
		case knownR(l):
			only = append(only, l+" (reference only)")
		default:
			only = append(only, l+" (candidate only)")
		}
	}
	if len(only) > 0 {
		c.warn = append(c.warn, fmt.Sprintf("term %q: levels in one fit only, not compared: %s", tr.Name, joinNames(only)))
	}
	k := len(common)
	if k == 0 {
		c.warn = append(c.warn, fmt.Sprintf("term %q: no level in common; not compared", tr.Name))
		ts.Verdict, ts.PValue = VerdictNotCompared, 1
		return ts, nil
	}
	qr, qc := tr.Coefficients[1], tc.Coefficients[1]
	r := termSide{g: make([]float64, k*qr), q: qr, beta: c.ref.beta[tr.Coefficients[0]:][:qr], v: block(c.ref.v, c.ref.pc, tr.Coefficients[0], qr)}
	s := termSide{g: make([]float64, k*qc), q: qc, beta: c.cand.beta[tc.Coefficients[0]:][:qc], v: block(c.cand.v, c.cand.pc, tc.Coefficients[0], qc)}
	for a, l := range common {
		r.g[a*qr+ir[l]] = 1
		if j, ok := ic[l]; ok {
			s.g[a*qc+j] = 1
		}
		if rebase >= 0 {
			s.g[a*qc+rebase] = -1
		}
	}
	d, err := c.diffSmooth(tr.Name, r, s, k, nil)
	if err != nil {
		return nil, err
	}
	for a, l := range common {
		ls := LevelShift{Reference: d.ref[a], Candidate: d.cand[a], Delta: d.delta[a], SE: d.sim.se[a], PValue: 1}
		if d.sim.use[a] {
			ls.Z = ls.Delta / ls.SE
			ls.PValue = twoSided(ls.Z)
		}
		ts.Levels[l] = ls
		ts.Size = math.Max(ts.Size, math.Abs(ls.Delta))
	}
	ts.Critical, ts.PValue = d.crit, d.p
	if k == 1 {
		ts.Critical, ts.PValue = zCritical(c.tol.Level), twoSided(d.obs)
	}
	ts.Score = d.obs / ts.Critical
	return ts, nil
}

// candLevels lists the levels a fit knows: its estimated levels and its
// baseline.
func candLevels(tr *TermResult) []string {
	out := keys(tr.Levels)
	if tr.Reference != "" {
		out = append(out, tr.Reference)
	}
	return out
}

func joinNote(a, b string) string {
	if a == "" {
		return b
	}
	return a + "; " + b
}

// factorIndex maps a factor's estimated levels to their coefficient
// offsets within the term: the levels' sorted order, as NewPredictor reads
// them.
func factorIndex(tr *TermResult) map[string]int {
	out := map[string]int{}
	for i, l := range SortLevels(keys(tr.Levels)) {
		out[l] = i
	}
	return out
}

func keys(m map[string]Estimate) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	return out
}
