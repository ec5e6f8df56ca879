package fit

import (
	"hash/fnv"
	"math"
	"math/rand/v2"
	"slices"

	"gonum.org/v1/gonum/mat"
)

// compareDraws is the number of posterior draws behind each simultaneous
// critical value and p-value of a comparison. At 10 000 draws the
// Monte-Carlo standard error of a p-value near 0.01 is about 0.001, and
// p-values are floored at 1/compareDraws.
const compareDraws = 10000

// maxSim is the simulated distribution of the largest standardised
// deviation max_i |a_iᵀδ|/se_i, δ ~ N(0, V), over the m rows of a linear map
// G (see simulateMax).
type maxSim struct {
	se     []float64 // se_i = √(g_iᵀVg_i)
	use    []bool    // rows taking part (se_i above 1e-10 of the largest)
	maxima []float64 // sorted simulated maxima
}

// simulateMax simulates draws maxima of |Gδ|/se over the m rows of G (m×q,
// row-major), δ ~ N(0, V) with V q×q. It is the simulation behind
// simultaneousCritical (Ruppert, Wand & Carroll 2003, "Semiparametric
// Regression", §6.5) — the same factor L with LLᵀ = V from V's
// eigen-decomposition, the same standardisation and the same exact maxima
// from maxAbsDraws, so that with the same generator and a standardised
// matrix of full column rank its critical value is simultaneousCritical's
// — but it drops the null directions of a rank-deficient matrix first
// (reduceRank), and it keeps every maximum, so that the p-value of an
// observed maximum comes from the same draws as the critical value.
func simulateMax(g []float64, m, q int, groups [][]int, v []float64, draws int, rng *rand.Rand) (*maxSim, bool) {
	vals, vecs, ok := symEigen(v, q)
	if !ok {
		return nil, false
	}
	l := make([]float64, q*q)
	for j := 0; j < q; j++ {
		s := math.Sqrt(math.Max(vals[j], 0))
		for i := 0; i < q; i++ {
			l[i*q+j] = vecs.At(i, j) * s
		}
	}
	a := matMul(g, l, m, q, q)
	ms := &maxSim{se: make([]float64, m), use: make([]bool, m)}
	big := 0.0
	for i := 0; i < m; i++ {
		s := 0.0
		for j := 0; j < q; j++ {
			s += a[i*q+j] * a[i*q+j]
		}
		ms.se[i] = math.Sqrt(s)
		big = math.Max(big, ms.se[i])
	}
	if !(big > 0) {
		return nil, false
	}
	for i := 0; i < m; i++ {
		if ms.se[i] <= big*1e-10 {
			for j := 0; j < q; j++ {
				a[i*q+j] = 0
			}
			continue
		}
		ms.use[i] = true
		for j := 0; j < q; j++ {
			a[i*q+j] /= ms.se[i]
		}
	}
	if b, r := reduceRank(a, m, q); r < q {
		a, q = b, r
	}
	ms.maxima = maxAbsDraws(a, m, q, groups, draws, rng)
	slices.Sort(ms.maxima)
	return ms, true
}

// reduceRank returns B = U_r S_r (m×r) from the thin singular value
// decomposition A = U S Wᵀ of the m×q matrix a, keeping the r singular
// values above 1e-9. Since Wᵀz ~ N(0, I) for z ~ N(0, I), the maxima of
// |Bz′| over z′ ~ N(0, I_r) have the distribution of those of |Az|, to
// within 1e-9·‖z‖ on rows of unit norm (the dropped part of each row is no
// longer than the largest dropped singular value). A surface difference,
// whose two fits' bases nearly share their span, drops about a third of
// its dimensions, and each draw costs that much less. It returns r = q
// (and no B) when nothing is dropped or the decomposition fails.
func reduceRank(a []float64, m, q int) ([]float64, int) {
	if m < q {
		return nil, q
	}
	var svd mat.SVD
	if !svd.Factorize(mat.NewDense(m, q, append([]float64(nil), a...)), mat.SVDThinU) {
		return nil, q
	}
	s := svd.Values(nil)
	r := 0
	for _, v := range s {
		if v > 1e-9 {
			r++
		}
	}
	if r == q || r == 0 {
		return nil, q
	}
	var u mat.Dense
	svd.UTo(&u)
	b := make([]float64, m*r)
	for i := 0; i < m; i++ {
		for j := 0; j < r; j++ {
			b[i*r+j] = u.At(i, j) * s[j]
		}
	}
	return b, r
}

// critical returns the level quantile of the maxima: the ⌈level·draws⌉-th
// smallest, as simultaneousCritical takes it.
func (ms *maxSim) critical(level float64) float64 {
	n := len(ms.maxima)
	idx := int(math.Ceil(level*float64(n))) - 1
	return ms.maxima[min(max(idx, 0), n-1)]
}

// pValue returns the share of simulated maxima at least as large as the
// observed maximum t, floored at 1/draws (a Monte-Carlo p-value cannot be
// resolved below that).
func (ms *maxSim) pValue(t float64) float64 {
	n := len(ms.maxima)
	below, _ := slices.BinarySearch(ms.maxima, t) // maxima[below:] ≥ t
	return float64(max(n-below, 1)) / float64(n)
}

// observed returns max_i |Δ_i|/se_i over the rows that take part.
func (ms *maxSim) observed(delta []float64) float64 {
	top := 0.0
	for i, d := range delta {
		if ms.use[i] {
			top = math.Max(top, math.Abs(d)/ms.se[i])
		}
	}
	return top
}

// termRNG returns the generator for one term of a comparison: a fixed seed
// per term name, so that comparing the same two documents always gives the
// same critical values and p-values.
func termRNG(name string) *rand.Rand {
	h := fnv.New64a()
	h.Write([]byte(name))
	return rand.New(rand.NewPCG(0x636f6d7061726531, h.Sum64())) // "compare1"
}
