package fit

import (
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize/convex/lp"
)

// Simultaneous band settings: the level, and the number of posterior draws
// behind the critical value (its Monte-Carlo standard error is about
// √(0.05·0.95/draws)/density ≈ 0.01–0.02 at these settings).
const (
	bandLevel = 0.95
	bandDraws = 10000
)

// termGrid is a term's model-matrix rows at its document grid points and
// the simplest shape it is compared with.
type termGrid struct {
	m, q int
	g    []float64 // m×q, row-major: rows of the term's model matrix
	// line holds the m×k values of the functions spanning the "straight"
	// shapes at each point: 1 and x for a curve, 1 alone for a cyclic curve
	// (a sloped line cannot wrap around), 1, x₁ and x₂ (a plane) for a
	// surface.
	line []float64
	k    int
	// groups lists neighbouring grid points (see maxAbsDraws); nil means
	// runs of consecutive points.
	groups [][]int
}

// gridOf rebuilds a term's model-matrix rows at the grid points of its
// document entry, through the term's basis and null-space map Z as the
// grid itself was tabulated. It returns nil for terms without a grid.
func gridOf(t *termDesign, tr *TermResult) *termGrid {
	switch {
	case t.spec.Kind == Curve && t.curve != nil && tr.Grid != nil:
		xs := tr.Grid.X
		lo, hi := t.curve.Lo, t.curve.Hi
		if lo > hi {
			lo, hi = hi, lo
		}
		k := 2
		if t.curve.Periodic {
			k = 1
		}
		tg := &termGrid{m: len(xs), q: t.q, g: make([]float64, len(xs)*t.q), line: make([]float64, len(xs)*k), k: k}
		for i, x := range xs {
			t.curveRow(x, tg.g[i*t.q:(i+1)*t.q])
			tg.line[i*k] = 1
			if k == 2 {
				tg.line[i*k+1] = unitScale(x, lo, hi)
			}
		}
		return tg
	case t.spec.Kind == Surface && t.margins[0] != nil && t.margins[1] != nil && tr.SurfaceGrid != nil:
		sg := tr.SurfaceGrid
		m1, m2 := t.margins[0], t.margins[1]
		m := len(sg.X1) * len(sg.X2)
		// "Straight" for a surface is a plane, without a slope along a
		// cyclic margin (it could not wrap); for an interaction-only
		// surface, which holds no plane, it is a constant.
		slope1 := !m1.Periodic && !t.interaction
		slope2 := !m2.Periodic && !t.interaction
		k := 1
		if slope1 {
			k++
		}
		if slope2 {
			k++
		}
		tg := &termGrid{m: m, q: t.q, g: make([]float64, m*t.q), line: make([]float64, m*k), k: k}
		i := 0
		for _, x1 := range sg.X1 {
			for _, x2 := range sg.X2 {
				t.surfaceRow(x1, x2, tg.g[i*t.q:(i+1)*t.q])
				c := i * k
				tg.line[c] = 1
				if slope1 {
					c++
					tg.line[c] = unitScale(x1, m1.Lo, m1.Hi)
				}
				if slope2 {
					c++
					tg.line[c] = unitScale(x2, m2.Lo, m2.Hi)
				}
				i++
			}
		}
		tg.groups = tiles(len(sg.X1), len(sg.X2), 3)
		return tg
	}
	return nil
}

// tiles splits an n1×n2 grid (point (i, j) at index i·n2 + j) into
// size×size tiles.
func tiles(n1, n2, size int) [][]int {
	var out [][]int
	for i0 := 0; i0 < n1; i0 += size {
		for j0 := 0; j0 < n2; j0 += size {
			var g []int
			for i := i0; i < min(i0+size, n1); i++ {
				for j := j0; j < min(j0+size, n2); j++ {
					g = append(g, i*n2+j)
				}
			}
			out = append(out, g)
		}
	}
	return out
}

// unitScale maps [lo, hi] onto [−1, 1] (for the conditioning of the line
// fit only; the lines it spans are the same).
func unitScale(x, lo, hi float64) float64 {
	if hi == lo {
		return 0
	}
	return (2*x - lo - hi) / (hi - lo)
}

// simultaneousCritical returns the critical value c of a simultaneous
// band f̂(x) ± c·se(x) over the m grid points, and se. With Δ = Gδ,
// δ ~ N(0, V) the posterior deviation of the term's q coefficients, c is the
// level quantile of max_x |Δ(x)|/se(x), se(x) = √(g_xᵀVg_x), estimated from
// draws simulated draws (Ruppert, Wand & Carroll 2003, "Semiparametric
// Regression", §6.5). The quantile is the ⌈level·draws⌉-th smallest
// maximum. Points with a zero standard error are left out of the maximum.
func simultaneousCritical(g []float64, m, q int, groups [][]int, v []float64, level float64, draws int, rng *rand.Rand) (float64, []float64, bool) {
	// L with LLᵀ = V from V's eigen-decomposition (V may be singular).
	vals, vecs, ok := symEigen(v, q)
	if !ok {
		return 0, nil, false
	}
	l := make([]float64, q*q)
	for j := 0; j < q; j++ {
		s := math.Sqrt(math.Max(vals[j], 0))
		for i := 0; i < q; i++ {
			l[i*q+j] = vecs.At(i, j) * s
		}
	}
	// A = diag(1/se)·G·L: its rows' norms are se, and AZ are standardised
	// draws.
	a := matMul(g, l, m, q, q)
	se := make([]float64, m)
	big := 0.0
	for i := 0; i < m; i++ {
		s := 0.0
		for j := 0; j < q; j++ {
			s += a[i*q+j] * a[i*q+j]
		}
		se[i] = math.Sqrt(s)
		big = math.Max(big, se[i])
	}
	if !(big > 0) {
		return 0, se, false
	}
	for i := 0; i < m; i++ {
		if se[i] <= big*1e-10 {
			for j := 0; j < q; j++ {
				a[i*q+j] = 0
			}
			continue
		}
		for j := 0; j < q; j++ {
			a[i*q+j] /= se[i]
		}
	}
	maxima := maxAbsDraws(a, m, q, groups, draws, rng)
	idx := int(math.Ceil(level*float64(draws))) - 1
	idx = min(max(idx, 0), draws-1)
	return orderStatistic(maxima, idx), se, true
}

// orderStatistic returns the k-th smallest (from 0) element of x, which it
// reorders, by Hoare's selection algorithm (Hoare 1961, "Algorithm 65:
// FIND", CACM 4) with the median of three as pivot.
func orderStatistic(x []float64, k int) float64 {
	lo, hi := 0, len(x)-1
	for lo < hi {
		mid := lo + (hi-lo)/2
		// Median of x[lo], x[mid], x[hi] to x[mid].
		if x[mid] < x[lo] {
			x[mid], x[lo] = x[lo], x[mid]
		}
		if x[hi] < x[lo] {
			x[hi], x[lo] = x[lo], x[hi]
		}
		if x[hi] < x[mid] {
			x[hi], x[mid] = x[mid], x[hi]
		}
		pivot := x[mid]
		i, j := lo, hi
		for i <= j {
			for x[i] < pivot {
				i++
			}
			for x[j] > pivot {
				j--
			}
			if i <= j {
				x[i], x[j] = x[j], x[i]
				i++
				j--
			}
		}
		switch {
		case k <= j:
			hi = j
		case k >= i:
			lo = i
		default:
			return x[k]
		}
	}
	return x[k]
}

// maxAbsDraws returns max_i |a_iᵀz| over the m rows of a (m×q) for each of
// draws independent z ~ N(0, I_q). The rows are split into groups of
// nearby grid points (consecutive runs of six when groups is nil); a group
// is skipped when its centre's value plus the group's radius times ‖z‖
// cannot beat the maximum found so far (|a_iᵀz| ≤ |cᵀz| + ‖a_i − c‖‖z‖ by
// Cauchy–Schwarz). The maxima are exact, while for a smooth term most rows
// are never evaluated.
func maxAbsDraws(a []float64, m, q int, groups [][]int, draws int, rng *rand.Rand) []float64 {
	if groups == nil {
		for lo := 0; lo < m; lo += 6 {
			var g []int
			for i := lo; i < min(lo+6, m); i++ {
				g = append(g, i)
			}
			groups = append(groups, g)
		}
	}
	centres := make([]int, len(groups))
	radius := make([]float64, len(groups))
	for b, g := range groups {
		c := g[len(g)/2]
		r := 0.0
		for _, i := range g {
			d := 0.0
			for j := 0; j < q; j++ {
				e := a[i*q+j] - a[c*q+j]
				d += e * e
			}
			r = max(r, d)
		}
		centres[b], radius[b] = c, math.Sqrt(r)*(1+1e-12)
	}
	dot := func(i int, z []float64) float64 {
		row := a[i*q : (i+1)*q : (i+1)*q]
		row = row[:len(z)]
		s := 0.0
		for j, zj := range z {
			s += row[j] * zj
		}
		return math.Abs(s)
	}
	z := make([]float64, q)
	val := make([]float64, len(groups))
	maxima := make([]float64, draws)
	for d := range maxima {
		norm := 0.0
		for j := range z {
			z[j] = rng.NormFloat64()
			norm += z[j] * z[j]
		}
		norm = math.Sqrt(norm)
		top, best := -1.0, 0
		for b, c := range centres {
			val[b] = dot(c, z)
			if val[b] > top {
				top, best = val[b], b
			}
		}
		// The most promising group first, so that top rises early.
		for _, i := range groups[best] {
			top = max(top, dot(i, z))
		}
		for b, g := range groups {
			// The slack covers rounding in the dot products (rows have
			// unit norm).
			if b == best || val[b]+(radius[b]+1e-12)*norm <= top {
				continue
			}
			for _, i := range g {
				top = max(top, dot(i, z))
			}
		}
		maxima[d] = top
	}
	return maxima
}

// minimaxRatio returns t* = min_θ max_i |f_i − ℓ_iᵀθ|/w_i, the weighted
// Chebyshev fit of f by the k columns of the m×k matrix ℓ (w_i > 0). With
// w_i = c·se_i, t* ≤ 1 exactly when some ℓθ lies inside the band f̂ ± c·se
// everywhere. It solves the dual linear program
//
//	maximise Σ_i y_i(u_i − v_i)  s.t.  Σ_i (u_i − v_i)ℓ_i/w_i = 0,  Σ_i (u_i + v_i) = 1,  u, v ≥ 0,
//
// with y_i = f_i/w_i, whose optimum equals t* by linear-programming duality
// (the standard dual of discrete L∞ approximation: Watson 1980,
// "Approximation Theory and Numerical Methods", ch. 3), by the simplex
// method. The dual has only k+1 rows, so it stays small for any grid.
func minimaxRatio(f, w, line []float64, m, k int) (float64, error) {
	cost := make([]float64, 2*m)
	a := mat.NewDense(k+1, 2*m, nil)
	for i := 0; i < m; i++ {
		if !(w[i] > 0) {
			return 0, fmt.Errorf("band half-width %g at point %d", w[i], i)
		}
		y := f[i] / w[i]
		cost[i], cost[m+i] = -y, y
		for j := 0; j < k; j++ {
			e := line[i*k+j] / w[i]
			a.Set(j, i, e)
			a.Set(j, m+i, -e)
		}
		a.Set(k, i, 1)
		a.Set(k, m+i, 1)
	}
	b := make([]float64, k+1)
	b[k] = 1
	opt, _, err := lp.Simplex(cost, a, b, 1e-12, nil)
	if err != nil {
		return 0, err
	}
	return math.Max(0, -opt), nil
}
