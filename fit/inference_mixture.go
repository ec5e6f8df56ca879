package fit

import (
	"math"
	"math/cmplx"
)

// chiMix is the distribution of Q = Σ_j w_j χ²_{h_j}, a positively weighted
// sum of independent chi-square variables (the degrees of freedom h_j need
// not be integers). It is the null distribution of the rank-r statistic of
// the zero test (see zeroTest).
type chiMix struct {
	w, h []float64 // weights w_j > 0 and degrees of freedom h_j > 0
}

// newChiMix drops components with a zero weight or no degrees of freedom.
func newChiMix(w, h []float64) chiMix {
	var c chiMix
	for j := range w {
		if w[j] > 0 && h[j] > 0 {
			c.w = append(c.w, w[j])
			c.h = append(c.h, h[j])
		}
	}
	return c
}

// laplace is the Laplace transform E e^{−sQ} = Π_j (1 + 2w_j s)^{−h_j/2}
// (principal branch: 1 + 2w_j s has a positive real part for Re s > 0).
func (c chiMix) laplace(s complex128) complex128 {
	var re, im float64
	for j := range c.w {
		a, b := 1+2*c.w[j]*real(s), 2*c.w[j]*imag(s)
		re += c.h[j] / 2 * 0.5 * math.Log(a*a+b*b)
		im += c.h[j] / 2 * math.Atan2(b, a)
	}
	return cmplx.Rect(math.Exp(-re), -im)
}

// Abate–Whitt EULER constants: the discretisation error of the inversion
// is about e^{−A}·S(3x) ≤ 1e-8·S(3x), and the alternating series is summed
// by Euler summation of the partial sums s_n … s_{n+m} (Abate & Whitt 1995,
// "Numerical inversion of Laplace transforms of probability
// distributions", ORSA J. Computing 7(1); they recommend A = 18.4, m = 11
// and n between 15 and 38).
const (
	eulerA = 18.4
	eulerN = 38
	eulerM = 11
)

// survivalInversion returns P(Q > x) by numerical inversion of the Laplace
// transform of the survival function, (1 − E e^{−sQ})/s, with the
// Fourier-series (Bromwich trapezoid) method and Euler summation (Abate &
// Whitt 1995). Its error is about 1e-8·S(3x) from the discretisation plus
// about 1e-12 from rounding amplified by e^{A/2}, so far-tail values come
// from the saddlepoint instead.
func (c chiMix) survivalInversion(x float64) float64 {
	switch {
	case len(c.w) == 0: // Q = 0
		if x < 0 {
			return 1
		}
		return 0
	case x <= 0:
		return 1
	}
	st := func(s complex128) float64 {
		return real((1 - c.laplace(s)) / s)
	}
	scale := math.Exp(eulerA/2) / x
	sum := scale / 2 * st(complex(eulerA/(2*x), 0))
	partial := make([]float64, eulerN+eulerM+1)
	partial[0] = sum
	sign := 1.0
	for k := 1; k <= eulerN+eulerM; k++ {
		sign = -sign
		s := complex(eulerA, 2*float64(k)*math.Pi) / complex(2*x, 0)
		sum += scale * sign * st(s)
		partial[k] = sum
	}
	// Euler summation: a binomial average of s_n … s_{n+m}.
	out, binom := 0.0, 1.0
	for k := 0; k <= eulerM; k++ {
		out += binom * partial[eulerN+k]
		binom = binom * float64(eulerM-k) / float64(k+1)
	}
	out /= math.Exp2(eulerM)
	return math.Min(1, math.Max(0, out))
}

// saddlepointTail returns the Lugannani–Rice approximation to P(Y > y) for
// Y = Σ_j λ_j χ²_{h_j} with weights of either sign, whose cumulant
// generating function is K(s) = −½ Σ_j h_j log(1 − 2sλ_j) (Lugannani & Rice
// 1980, Adv. Appl. Prob. 12; Kuonen 1999, "Saddle point approximations for
// distributions of quadratic forms in normal variables", Biometrika 86(4)).
// It is meant for the upper tail (y above the mean), where its relative
// error is a few per cent at most; ok is false when y is not in the upper
// tail.
func saddlepointTail(lambda, h []float64, y float64) (p float64, ok bool) {
	hi := math.Inf(1)
	mean := 0.0
	for j, l := range lambda {
		mean += l * h[j]
		if l > 0 {
			hi = math.Min(hi, 1/(2*l))
		}
	}
	if !(y > mean) || math.IsInf(hi, 1) {
		return 0, false
	}
	k1 := func(s float64) float64 {
		v := 0.0
		for j, l := range lambda {
			v += h[j] * l / (1 - 2*s*l)
		}
		return v
	}
	// K' increases on (0, hi) from the mean to +∞: bisect for K'(ŝ) = y.
	lo, up := 0.0, hi
	for it := 0; it < 200 && up-lo > 1e-15*hi; it++ {
		mid := (lo + up) / 2
		if k1(mid) < y {
			lo = mid
		} else {
			up = mid
		}
	}
	s := (lo + up) / 2
	k, k2 := 0.0, 0.0
	for j, l := range lambda {
		a := 1 - 2*s*l
		k -= h[j] / 2 * math.Log(a)
		k2 += 2 * h[j] * l * l / (a * a)
	}
	w2 := 2 * (s*y - k)
	if !(w2 > 0) || !(k2 > 0) {
		return 0, false
	}
	w := math.Sqrt(w2)
	u := s * math.Sqrt(k2)
	p = 0.5*math.Erfc(w/math.Sqrt2) + math.Exp(-w2/2)/math.Sqrt(2*math.Pi)*(1/u-1/w)
	return math.Max(0, p), true
}

// tailSwitch is the probability below which the saddlepoint replaces the
// inversion, whose absolute error would dominate there.
const tailSwitch = 1e-9

// survival returns P(Q > x).
func (c chiMix) survival(x float64) float64 {
	p := c.survivalInversion(x)
	if p < tailSwitch {
		if sp, ok := saddlepointTail(c.w, c.h, x); ok {
			return sp
		}
	}
	return p
}

// ratioSurvival returns P(Q/S > x) with S = χ²_d/d independent of Q: the
// null distribution of the statistic when the scale is estimated with d
// residual degrees of freedom. With Q ~ χ²_r it is the F(r, d) tail at x/r.
// S = 2G/d with G ~ Gamma(d/2) is integrated out on the scale z of
// G = (d/2)·e^{z/√(d/2)} by the trapezoidal rule, which converges
// geometrically for a smooth integrand decaying at both ends (Trefethen &
// Weideman 2014, "The exponentially convergent trapezoidal rule", SIAM
// Review 56(3)).
func (c chiMix) ratioSurvival(x, d float64) float64 {
	if x <= 0 {
		return 1
	}
	if !(d > 0) || math.IsInf(d, 1) {
		return c.survival(x)
	}
	// The step resolves both the density of z (scale 1) and the tail of Q
	// as a function of z (scale about √(d/H), H = Σ h_j: log χ²_H has
	// standard deviation about √(2/H)).
	h := 0.0
	for _, hj := range c.h {
		h += hj
	}
	step := math.Min(0.5, 0.25*math.Sqrt(d/math.Max(h, 1)))
	p := 0.0
	for _, nd := range gammaNodes(d/2, step) {
		p += nd.w * c.survivalInversion(x*2*nd.g/d)
	}
	p = math.Min(1, math.Max(0, p))
	if p < tailSwitch {
		// Y = Q − (x/d)·χ²_d exceeds 0 exactly when Q/S exceeds x.
		lam := append(append([]float64(nil), c.w...), -x/d)
		dfs := append(append([]float64(nil), c.h...), d)
		if sp, ok := saddlepointTail(lam, dfs, 0); ok {
			return sp
		}
	}
	return p
}

// gammaNode is a quadrature node for E h(G), G ~ Gamma(a, 1).
type gammaNode struct{ g, w float64 }

// gammaNodes returns trapezoidal-rule nodes for E h(G), G ~ Gamma(a, 1),
// in z with G = a·e^{σz}, σ = 1/√a, at the given step, as far out as the
// density of z exceeds e^{−45} of its value at z = 0. The weights are
// normalised to sum to one.
func gammaNodes(a, step float64) []gammaNode {
	const cut = 45.0
	sigma := 1 / math.Sqrt(a)
	lg, _ := math.Lgamma(a)
	logDens := func(z float64) float64 {
		return a*math.Log(a) + a*sigma*z - a*math.Exp(sigma*z) + math.Log(sigma) - lg
	}
	top := logDens(0)
	var nodes []gammaNode
	total := 0.0
	add := func(z float64) bool {
		ld := logDens(z)
		if ld < top-cut {
			return false
		}
		w := math.Exp(ld)
		nodes = append(nodes, gammaNode{g: a * math.Exp(sigma*z), w: w})
		total += w
		return true
	}
	add(0)
	for k := 1; add(float64(k) * step); k++ {
	}
	for k := -1; add(float64(k) * step); k-- {
	}
	for i := range nodes {
		nodes[i].w /= total
	}
	return nodes
}
