package fit

import (
	"math"

	"gonum.org/v1/gonum/mat"
)

// criterion is a smoothing-selection objective V(ρ) over ρ = log λ.
type criterion int

const (
	// remlUnknownScale is the restricted marginal likelihood with the scale
	// profiled out: V = (n − M_p) log D_p + log|H| − log|S_λ|₊, with
	// D_p = ‖f − Rβ̂‖² + r0 + β̂ᵀS_λβ̂ and H = RᵀR + S_λ (Wood 2011, JRSS-B
	// 73(1), eq. 4 with φ̂ = D_p/(n − M_p); constants dropped).
	remlUnknownScale criterion = iota
	// remlKnownScale is the same with φ = 1: V = D_p + log|H| − log|S_λ|₊.
	remlKnownScale
	// gcvScore is n·D/(n − τ)² with τ = tr(F) (Craven & Wahba 1979).
	gcvScore
	// ubreScore is D/n − 1 + 2τ/n, for a known scale of 1 (Craven & Wahba
	// 1979; Wood 2004 for its use on the working model).
	ubreScore
)

func (c criterion) String() string {
	switch c {
	case remlUnknownScale, remlKnownScale:
		return "reml"
	case gcvScore:
		return "gcv"
	default:
		return "ubre"
	}
}

// evaluation is V, its gradient and Hessian with respect to the free ρ.
type evaluation struct {
	sol  solution
	v    float64
	grad []float64
	hess []float64 // free×free
}

// selector minimises a criterion over the free smoothing strengths of a
// problem by Newton's method on log λ with exact first and second
// derivatives for REML (Wood 2011, §3–4) and exact gradients with a
// finite-difference Hessian for GCV and UBRE.
type selector struct {
	pr    *problem
	crit  criterion
	free  []int     // penalties whose λ is chosen
	fixed []float64 // λ for every penalty (used where not free)
	lo    []float64 // bounds on ρ for each free penalty
	hi    []float64
}

// lambdaAt expands free log-λ values into the full λ vector.
func (s *selector) lambdaAt(rho []float64) []float64 {
	lambda := append([]float64(nil), s.fixed...)
	for i, j := range s.free {
		lambda[j] = math.Exp(rho[i])
	}
	return lambda
}

// evaluate computes V and, when derivs is set, its derivatives.
func (s *selector) evaluate(rho []float64, derivs bool) (evaluation, bool) {
	pr := s.pr
	lambda := s.lambdaAt(rho)
	sol := pr.solve(lambda)
	if !sol.ok {
		return evaluation{}, false
	}
	m := len(s.free)
	ev := evaluation{sol: sol}
	nfree := len(s.free)
	switch s.crit {
	case remlUnknownScale, remlKnownScale:
		ld, ldg, ldh := pr.logDetS(lambda)
		dp := sol.rss + sol.penaltyValue()
		nu := pr.n - float64(pr.nullSpaceDim())
		if s.crit == remlUnknownScale {
			if nu <= 0 {
				return evaluation{}, false
			}
			// A perfect fit (a constant response) has D_p = 0; keep log D_p
			// finite so the search can proceed (every term is then flat).
			dp = math.Max(dp, 1e-300)
			ev.v = nu*math.Log(dp) + sol.logDetH - ld
		} else {
			ev.v = dp + sol.logDetH - ld
		}
		if !derivs {
			return ev, true
		}
		hs := make([][]float64, nfree)
		sb := make([][]float64, nfree) // H⁻¹S_jβ
		d1 := make([]float64, nfree)
		for a, j := range s.free {
			hs[a] = pr.hinvS(&sol, j)
			pen := pr.pens[j]
			v := make([]float64, pr.p)
			for i := 0; i < pr.p; i++ {
				t := 0.0
				for c := 0; c < pen.size; c++ {
					t += hs[a][i*pen.size+c] * sol.beta[pen.start+c]
				}
				v[i] = t
			}
			sb[a] = v
			d1[a] = lambda[j] * sol.bsb[j]
		}
		ev.grad = make([]float64, m)
		ev.hess = make([]float64, m*m)
		for a, j := range s.free {
			pen := pr.pens[j]
			tr := 0.0
			for c := 0; c < pen.size; c++ {
				tr += hs[a][(pen.start+c)*pen.size+c]
			}
			trHS := lambda[j] * tr
			if s.crit == remlUnknownScale {
				ev.grad[a] = nu*d1[a]/dp + trHS - ldg[j]
			} else {
				ev.grad[a] = d1[a] + trHS - ldg[j]
			}
			for b, k := range s.free {
				// ∂²D_p/∂ρ_j∂ρ_k = δ_jk λ_j β̂ᵀS_jβ̂ − 2λ_jλ_k β̂ᵀS_jH⁻¹S_kβ̂.
				cross := 0.0
				for c := 0; c < pen.size; c++ {
					// (S_jβ)_c · (H⁻¹S_kβ)_{start+c}
					sjb := 0.0
					for e := 0; e < pen.size; e++ {
						sjb += pen.s[c*pen.size+e] * sol.beta[pen.start+e]
					}
					cross += sjb * sb[b][pen.start+c]
				}
				d2 := -2 * lambda[j] * lambda[k] * cross
				ldH := -lambda[j] * lambda[k] * pr.traceProduct(hs[a], j, hs[b], k)
				if a == b {
					d2 += d1[a]
					ldH += trHS
				}
				var h float64
				if s.crit == remlUnknownScale {
					h = nu * (d2/dp - d1[a]*d1[b]/(dp*dp))
				} else {
					h = d2
				}
				ev.hess[a*m+b] = h + ldH - ldh[j*len(pr.pens)+k]
			}
		}
		return ev, true
	default:
		v, g := s.gcvValueGrad(&sol, lambda, derivs)
		ev.v, ev.grad = v, g
		if !derivs {
			return ev, true
		}
		// Hessian by central differences of the exact gradient.
		ev.hess = make([]float64, m*m)
		const h = 1e-4
		for b := 0; b < m; b++ {
			up := append([]float64(nil), rho...)
			dn := append([]float64(nil), rho...)
			up[b] += h
			dn[b] -= h
			su, sd := pr.solve(s.lambdaAt(up)), pr.solve(s.lambdaAt(dn))
			if !su.ok || !sd.ok {
				return evaluation{}, false
			}
			_, gu := s.gcvValueGrad(&su, su.lambda, true)
			_, gd := s.gcvValueGrad(&sd, sd.lambda, true)
			for a := 0; a < m; a++ {
				ev.hess[a*m+b] = (gu[a] - gd[a]) / (2 * h)
			}
		}
		for a := 0; a < m; a++ {
			for b := a + 1; b < m; b++ {
				avg := (ev.hess[a*m+b] + ev.hess[b*m+a]) / 2
				ev.hess[a*m+b], ev.hess[b*m+a] = avg, avg
			}
		}
		return ev, true
	}
}

// gcvValueGrad returns GCV (unknown scale) or UBRE (known scale) and its
// exact gradient: ∂D/∂ρ_k = 2λ_k β̂ᵀS_λH⁻¹S_kβ̂ and
// ∂τ/∂ρ_k = λ_k tr(H⁻¹S_kH⁻¹S_λ) − λ_k tr(H⁻¹S_k).
func (s *selector) gcvValueGrad(sol *solution, lambda []float64, derivs bool) (float64, []float64) {
	pr := s.pr
	n := pr.n
	hs := make([][]float64, len(pr.pens))
	trHS := make([]float64, len(pr.pens))
	tau := float64(pr.p)
	for j, pen := range pr.pens {
		hs[j] = pr.hinvS(sol, j)
		tr := 0.0
		for c := 0; c < pen.size; c++ {
			tr += hs[j][(pen.start+c)*pen.size+c]
		}
		trHS[j] = tr
		tau -= lambda[j] * tr
	}
	d := sol.rss
	var v float64
	if s.crit == gcvScore {
		v = n * d / ((n - tau) * (n - tau))
	} else {
		v = d/n - 1 + 2*tau/n
	}
	if !derivs {
		return v, nil
	}
	// S_λβ̂.
	slb := make([]float64, pr.p)
	for j, pen := range pr.pens {
		for c := 0; c < pen.size; c++ {
			t := 0.0
			for e := 0; e < pen.size; e++ {
				t += pen.s[c*pen.size+e] * sol.beta[pen.start+e]
			}
			slb[pen.start+c] += lambda[j] * t
		}
	}
	grad := make([]float64, len(s.free))
	for a, k := range s.free {
		pen := pr.pens[k]
		// H⁻¹S_kβ̂.
		hskb := make([]float64, pr.p)
		for i := 0; i < pr.p; i++ {
			t := 0.0
			for c := 0; c < pen.size; c++ {
				t += hs[k][i*pen.size+c] * sol.beta[pen.start+c]
			}
			hskb[i] = t
		}
		dD := 0.0
		for i := range slb {
			dD += slb[i] * hskb[i]
		}
		dD *= 2 * lambda[k]
		trCross := 0.0
		for j := range pr.pens {
			trCross += lambda[j] * pr.traceProduct(hs[k], k, hs[j], j)
		}
		dTau := lambda[k]*trCross - lambda[k]*trHS[k]
		if s.crit == gcvScore {
			grad[a] = n*dD/((n-tau)*(n-tau)) + 2*n*d*dTau/((n-tau)*(n-tau)*(n-tau))
		} else {
			grad[a] = dD/n + 2*dTau/n
		}
	}
	return v, grad
}

// selectionResult reports how the smoothing selection went.
type selectionResult struct {
	eval       evaluation
	rho        []float64
	iterations int
	converged  bool
}

// minimise runs Newton's method from rho0. The Hessian is made positive
// definite by taking absolute eigenvalues (floored), steps are limited to 5
// units of log λ and halved until V decreases, and ρ stays inside its
// bounds. It stops when every gradient component is small relative to V or
// no step decreases V.
func (s *selector) minimise(rho0 []float64) (selectionResult, bool) {
	m := len(s.free)
	rho := append([]float64(nil), rho0...)
	ev, ok := s.evaluate(rho, true)
	if !ok {
		return selectionResult{}, false
	}
	if m == 0 {
		return selectionResult{eval: ev, rho: rho, converged: true}, true
	}
	const maxIter = 200
	res := selectionResult{}
	for it := 1; it <= maxIter; it++ {
		res.iterations = it
		if s.converged(ev, rho) {
			res.converged = true
			break
		}
		step := newtonStep(ev.grad, ev.hess, m)
		if tinyStep(step, rho, s.lo, s.hi) {
			res.converged = true
			break
		}
		improved := false
		for half := 0; half < 30; half++ {
			trial := make([]float64, m)
			for a := range trial {
				trial[a] = math.Min(s.hi[a], math.Max(s.lo[a], rho[a]+step[a]))
			}
			tev, ok := s.evaluate(trial, false)
			if ok && tev.v < ev.v-1e-12*math.Abs(ev.v) {
				nev, ok := s.evaluate(trial, true)
				if ok {
					rho, ev, improved = trial, nev, true
					break
				}
			}
			for a := range step {
				step[a] /= 2
			}
		}
		if !improved {
			// No descent along the Newton direction: at a minimum up to
			// rounding, or at a bound.
			res.converged = s.gradientSmall(ev, rho, 1e-4)
			break
		}
	}
	res.eval, res.rho = ev, rho
	return res, true
}

// converged reports whether each gradient component is negligible, counting
// a component pushing against its bound as converged.
func (s *selector) converged(ev evaluation, rho []float64) bool {
	return s.gradientSmall(ev, rho, 1e-9)
}

// tinyStep reports whether a Newton step moves every free log λ not held at
// a bound by less than 1e-7: the minimum is located to that precision.
func tinyStep(step, rho, lo, hi []float64) bool {
	for a, d := range step {
		if rho[a] >= hi[a] && d > 0 || rho[a] <= lo[a] && d < 0 {
			continue
		}
		if math.Abs(d) > 1e-7 {
			return false
		}
	}
	return true
}

func (s *selector) gradientSmall(ev evaluation, rho []float64, tol float64) bool {
	scale := math.Max(1, math.Abs(ev.v))
	if s.crit == gcvScore || s.crit == ubreScore {
		scale = math.Max(math.Abs(ev.v), 1e-300)
	}
	for a, g := range ev.grad {
		if rho[a] >= s.hi[a] && g < 0 || rho[a] <= s.lo[a] && g > 0 {
			continue
		}
		if math.Abs(g) > tol*scale {
			return false
		}
	}
	return true
}

// newtonStep returns −H⁺g with H's eigenvalues replaced by their absolute
// values (floored at 1e-6 of the largest) and the step capped at 5.
func newtonStep(g, h []float64, m int) []float64 {
	vals, vecs, ok := symEigen(h, m)
	step := make([]float64, m)
	if !ok {
		for a := range step {
			step[a] = -g[a]
		}
	} else {
		top := 0.0
		for _, v := range vals {
			top = math.Max(top, math.Abs(v))
		}
		floor := math.Max(top*1e-6, 1e-12)
		for i, v := range vals {
			e := math.Max(math.Abs(v), floor)
			col := mat.Col(nil, i, vecs)
			c := 0.0
			for a := range col {
				c += col[a] * g[a]
			}
			for a := range col {
				step[a] -= col[a] * c / e
			}
		}
	}
	big := 0.0
	for _, v := range step {
		big = math.Max(big, math.Abs(v))
	}
	if big > 5 {
		for a := range step {
			step[a] *= 5 / big
		}
	}
	return step
}
