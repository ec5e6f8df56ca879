package alerts

import (
	"cmp"
	"math"
	"slices"
)

// BenjaminiHochberg reports which of the hypotheses with p-values p are
// discoveries when the false discovery rate is controlled at level q, by
// the step-up procedure of Benjamini & Hochberg (1995), "Controlling the
// false discovery rate: a practical and powerful approach to multiple
// testing", JRSS B 57(1), 289–300:
//
//	with p₍₁₎ ≤ … ≤ p₍ₘ₎ sorted, k = max{ i : p₍ᵢ₎ ≤ i·q/m },
//	reject the hypotheses of p₍₁₎, …, p₍ₖ₎ (none when no such i exists).
//
// For independent p-values (and under positive regression dependence,
// Benjamini & Yekutieli 2001) the expected share of false discoveries among
// the discoveries is at most m₀q/m ≤ q, m₀ being the number of true null
// hypotheses. Under the global null (m₀ = m) a discovery happens with
// probability at most q, since BH then rejects exactly when Simes' (1986)
// test does.
//
// A NaN p-value (a comparison that could not be made) is never a discovery
// and is not counted in m. The result has the length of p, in its order. A
// q that is not above 0 (or is NaN) makes no discoveries.
func BenjaminiHochberg(p []float64, q float64) []bool {
	reject := make([]bool, len(p))
	if !(q > 0) {
		return reject
	}
	idx := make([]int, 0, len(p))
	for i, v := range p {
		if !math.IsNaN(v) {
			idx = append(idx, i)
		}
	}
	m := len(idx)
	if m == 0 {
		return reject
	}
	// Stable, so that tied p-values keep their order (which does not change
	// the result: ties at the cut-off are all below it).
	slices.SortStableFunc(idx, func(a, b int) int { return cmp.Compare(p[a], p[b]) })
	// The threshold is computed as (i/m)·q, in that order, as statsmodels'
	// multipletests does, so that p-values exactly at a threshold are
	// judged alike by both.
	k := 0
	for i := m; i >= 1; i-- {
		if p[idx[i-1]] <= float64(i)/float64(m)*q {
			k = i
			break
		}
	}
	for _, j := range idx[:k] {
		reject[j] = true
	}
	return reject
}
