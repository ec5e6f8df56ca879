package fit

import (
	"math"

	"gonum.org/v1/gonum/mat"
)

// ZeroTest is the approximate test that a curve or surface is zero over
// the data (Wood 2013; see zeroTest).
type ZeroTest struct {
	// Statistic is T = f̂ᵀV_f^{r−}f̂.
	Statistic float64 `json:"statistic"`
	// Rank is r, the effective rank of the pseudo-inverse (not rounded).
	Rank float64 `json:"rank"`
	// PValue is P(T ≥ Statistic) under the null hypothesis.
	PValue float64 `json:"p_value"`
	// Method names the reference distribution: "wood2013-chisq" (known
	// scale: a weighted sum of χ²₁ variables) or "wood2013-f" (estimated
	// scale: that sum divided by an independent χ²_d/d, d the residual
	// degrees of freedom; with integer r this is r·F(r, d)).
	Method string `json:"method"`
}

// Names of the zero test's reference distributions.
const (
	zeroMethodChisq = "wood2013-chisq"
	zeroMethodF     = "wood2013-f"
)

// woodRank returns Wood's (2013) effective rank of a term whose coefficients
// are [start, start+q): r = Σ_{i in the term} (2F − FF)_ii with F = H⁻¹RᵀR
// (p×p, row-major), the alternative effective degrees of freedom of
// Hastie & Tibshirani (1990, §3.5) restricted to the term.
func woodRank(fm []float64, p, start, q int) float64 {
	r := 0.0
	for i := start; i < start+q; i++ {
		ff := 0.0
		for k := 0; k < p; k++ {
			ff += fm[i*p+k] * fm[k*p+i]
		}
		r += 2*fm[i*p+i] - ff
	}
	return r
}

// zeroTest tests whether a term's function is zero at every data point
// (Wood 2013, "On p-values for smooth components of an extended
// generalized additive model", Biometrika 100(1), 221–228).
//
// Inputs: the term's coefficients β̂ (q), their posterior covariance V
// (q×q, scale included), the term's block XᵀWX of the weighted
// cross-product (q×q), its model-matrix rows at the m grid points (m×q, or
// nil; used only to fix eigenvector signs) and the effective rank r from
// woodRank.
//
// Wood's statistic is f̂ᵀV_f^{r−}f̂ for the term's fitted values f̂ = Xβ̂,
// V_f = XVXᵀ. Writing the weighted model matrix as √W X = QR (Q with
// orthonormal columns) it equals fᵀ(RVRᵀ)^{r−}f with f = Rβ̂ (here for the
// weighted fitted values √W f̂); R is taken as D^{1/2}Uᵀ from
// XᵀWX = UDUᵀ. Let RVRᵀ have eigenvalues λ₁ ≥ λ₂ ≥ … with eigenvectors
// u_i, and z_i = u_iᵀf/√λ_i. With k = ⌊r⌋ and ν = r − k,
//
//	T = Σ_{i<k} z_i² + (z_k, z_{k+1}) B (z_k, z_{k+1})ᵀ,  B = [1 b; b ν],  b = √(ν(1−ν)/2),
//
// the rank-r pseudo-inverse of Wood (2013, §3) for non-integer r: B moves
// smoothly from rank k (ν = 0) to rank k+1 (ν → 1), and its eigenvalues
// ζ± = (1 + ν ± √(1 − ν²))/2 give the null distribution
// T ~ χ²_{k−1} + ζ₊χ²₁ + ζ₋χ²₁, whose mean r and variance 2r match those of
// χ²_r. r is first limited to [1, rank of V_f]. The cross term depends on
// the relative sign of u_k and u_{k+1}, fixed by eigenSign so that T does
// not depend on how the term is parametrised.
//
// With a known scale the p-value is P(T ≥ t) for that mixture; when the
// scale is estimated V holds φ̂ = φ·χ²_d/d, and T is referred to the
// mixture divided by an independent χ²_d/d, d the residual degrees of
// freedom (for integer r: T/r ~ F(r, d)). Tail probabilities come from
// chiMix (Laplace-transform inversion, saddlepoint in the far tail).
//
// The test conditions on the smoothing strengths. Selecting them from the
// same data makes it somewhat liberal for a term whose strength stays
// finite under the null (see inference_test.go for the measured size).
func zeroTest(beta, v, xtwx, grid []float64, q, m int, r float64, scaleEstimated bool, residualDF float64) (ZeroTest, bool) {
	// R = D^{1/2}Uᵀ from XᵀWX = UDUᵀ (any square root gives the same T).
	dv, du, ok := symEigen(xtwx, q)
	if !ok {
		return ZeroTest{}, false
	}
	root := make([]float64, q*q)
	for i := 0; i < q; i++ {
		s := math.Sqrt(math.Max(dv[i], 0))
		for j := 0; j < q; j++ {
			root[i*q+j] = s * du.At(j, i)
		}
	}
	f := matMul(root, beta, q, q, 1)
	vf := matMul(matMul(root, v, q, q, q), transpose(root, q, q), q, q, q)
	for a := 0; a < q; a++ { // symmetrise
		for b := a + 1; b < q; b++ {
			avg := (vf[a*q+b] + vf[b*q+a]) / 2
			vf[a*q+b], vf[b*q+a] = avg, avg
		}
	}
	lv, lu, ok := symEigen(vf, q)
	if !ok || !(lv[q-1] > 0) {
		return ZeroTest{}, false
	}
	// Descending eigenvalues; the numerical rank of V_f bounds r.
	top := lv[q-1]
	rank := 0
	z := make([]float64, 0, q)
	for i := q - 1; i >= 0 && lv[i] > top*1e-12; i-- {
		u := make([]float64, q)
		for j := range u {
			u[j] = lu.At(j, i)
		}
		dot := 0.0
		for j := range u {
			dot += u[j] * f[j]
		}
		if eigenSign(u, dv, du, grid, q, m) < 0 {
			dot = -dot
		}
		z = append(z, dot/math.Sqrt(lv[i]))
		rank++
	}
	r = math.Min(math.Max(r, 1), float64(rank))
	k := int(math.Floor(r))
	nu := r - float64(k)
	if nu < 1e-9 || k >= rank {
		nu = 0
	}
	t := 0.0
	for i := 0; i < k-1; i++ {
		t += z[i] * z[i]
	}
	zk := z[k-1]
	t += zk * zk
	weights := []float64{1, 1, 0}
	dfs := []float64{float64(k - 1), 1, 1}
	if nu > 0 {
		zk1 := z[k]
		b := math.Sqrt(nu * (1 - nu) / 2)
		t += 2*b*zk*zk1 + nu*zk1*zk1
		root := math.Sqrt(1 - nu*nu)
		weights[1], weights[2] = (1+nu+root)/2, (1+nu-root)/2
	}
	mix := newChiMix(weights, dfs)
	out := ZeroTest{Statistic: t, Rank: r}
	if scaleEstimated {
		out.Method = zeroMethodF
		out.PValue = mix.ratioSurvival(t, residualDF)
	} else {
		out.Method = zeroMethodChisq
		out.PValue = mix.survival(t)
	}
	return out, finite(out.Statistic) && finite(out.PValue)
}

// eigenSign returns ±1, the sign that makes an eigenvector u of RVRᵀ
// "positive". The cross term of the rank-r statistic depends on the
// relative signs of two eigenvectors, so the convention must not depend on
// how the term is parametrised: u is mapped to the function it stands for,
// h = G·R⁺u on the grid rows G (m×q), with R⁺ = UD^{−1/2} from
// XᵀWX = UDUᵀ, and made positive at the grid point where |h| is largest.
// Without a grid the largest element of u is made positive instead (not
// invariant to re-parametrisation).
func eigenSign(u, dv []float64, du *mat.Dense, grid []float64, q, m int) float64 {
	pick := func(h []float64) float64 {
		big := 0.0
		for _, e := range h {
			if math.Abs(e) > math.Abs(big) {
				big = e
			}
		}
		if big < 0 {
			return -1
		}
		return 1
	}
	if grid == nil || m == 0 {
		return pick(u)
	}
	// c = R⁺u = U D^{−1/2} u, with R = D^{1/2}Uᵀ.
	top := dv[q-1]
	c := make([]float64, q)
	for i := 0; i < q; i++ {
		if dv[i] <= top*1e-12 {
			continue
		}
		// (R⁺u)_j = Σ_i U_ji d_i^{−1/2} u_i.
		s := u[i] / math.Sqrt(dv[i])
		for j := 0; j < q; j++ {
			c[j] += du.At(j, i) * s
		}
	}
	return pick(matMul(grid, c, m, q, 1))
}
