package fit

import (
	"math"
	"math/rand/v2"
	"testing"
)

// randomProblem builds a working problem from a random 60×9 model matrix
// with one single-penalty block (coefficients 1–4) and one block with two
// overlapping penalties (5–8), like a curve and a surface.
func randomProblem(rng *rand.Rand) *problem {
	const n, p = 60, 9
	x := make([]float64, n*(p+1))
	for i := range x {
		x[i] = rng.NormFloat64()
	}
	raug := qrInPlace(x, n, p+1)
	pr := &problem{p: p, r: make([]float64, p*p), f: make([]float64, p), n: n}
	for i := 0; i < p; i++ {
		copy(pr.r[i*p:i*p+p], raug[i*(p+1):i*(p+1)+p])
		pr.f[i] = raug[i*(p+1)+p]
	}
	pr.r0 = raug[p*(p+1)+p] * raug[p*(p+1)+p]
	randomPSD := func(size, rank int) []float64 {
		a := make([]float64, rank*size)
		for i := range a {
			a[i] = rng.NormFloat64()
		}
		return matTMul(a, a, rank, size, size)
	}
	add := func(start, size, rank int) int {
		pen, ok := newPenalty(0, start, size, randomPSD(size, rank), 0)
		if !ok {
			panic("penalty")
		}
		pr.pens = append(pr.pens, pen)
		return len(pr.pens) - 1
	}
	pr.blocks = []penaltyBlock{
		{start: 1, size: 4, pens: []int{add(1, 4, 3)}},
		{start: 5, size: 4, pens: []int{add(5, 4, 2), add(5, 4, 3)}},
	}
	return pr
}

// The analytic gradient and Hessian of each criterion must agree with
// central differences (a check of the derivative formulas of Wood 2011,
// common practice (no source)).
func TestCriterionDerivativesMatchFiniteDifferences(t *testing.T) {
	for _, crit := range []criterion{remlUnknownScale, remlKnownScale, gcvScore, ubreScore} {
		t.Run(crit.String()+string(rune('0'+crit)), func(t *testing.T) {
			rng := rand.New(rand.NewPCG(7, uint64(crit)))
			pr := randomProblem(rng)
			sel := &selector{pr: pr, crit: crit, free: []int{0, 1, 2}, fixed: make([]float64, 3),
				lo: []float64{-30, -30, -30}, hi: []float64{30, 30, 30}}
			rho := []float64{0.3, -1.2, 1.7}
			ev, ok := sel.evaluate(rho, true)
			if !ok {
				t.Fatal("evaluate failed")
			}
			const h = 1e-5
			for a := range rho {
				up, dn := append([]float64(nil), rho...), append([]float64(nil), rho...)
				up[a] += h
				dn[a] -= h
				eu, _ := sel.evaluate(up, true)
				ed, _ := sel.evaluate(dn, true)
				num := (eu.v - ed.v) / (2 * h)
				if math.Abs(num-ev.grad[a]) > 1e-6*(1+math.Abs(num)) {
					t.Errorf("∂V/∂ρ%d = %.10g, central difference %.10g", a, ev.grad[a], num)
				}
				for b := range rho {
					numH := (eu.grad[b] - ed.grad[b]) / (2 * h)
					if math.Abs(numH-ev.hess[b*3+a]) > 1e-4*(1+math.Abs(numH)) {
						t.Errorf("∂²V/∂ρ%d∂ρ%d = %.10g, central difference %.10g", b, a, ev.hess[b*3+a], numH)
					}
				}
			}
		})
	}
}

// At the solution the penalised normal equations (RᵀR + S_λ)β = Rᵀf hold
// (an invariant of the estimator).
func TestPenalisedNormalEquations(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 3))
	pr := randomProblem(rng)
	lambda := []float64{0.7, 3, 0.05}
	sol := pr.solve(lambda)
	if !sol.ok {
		t.Fatal("solve failed")
	}
	p := pr.p
	for i := 0; i < p; i++ {
		lhs, rhs := 0.0, 0.0
		for k := 0; k < p; k++ {
			rtr := 0.0
			for m := 0; m < p; m++ {
				rtr += pr.r[m*p+i] * pr.r[m*p+k]
			}
			lhs += rtr * sol.beta[k]
		}
		for m := 0; m < p; m++ {
			rhs += pr.r[m*p+i] * pr.f[m]
		}
		for j, pen := range pr.pens {
			if i >= pen.start && i < pen.start+pen.size {
				for c := 0; c < pen.size; c++ {
					lhs += lambda[j] * pen.s[(i-pen.start)*pen.size+c] * sol.beta[pen.start+c]
				}
			}
		}
		if math.Abs(lhs-rhs) > 1e-10*(1+math.Abs(rhs)) {
			t.Errorf("row %d: (RᵀR+S)β = %.12g, Rᵀf = %.12g", i, lhs, rhs)
		}
	}
}

// Newton's method must land on the criterion's minimum: no point of a grid
// around it is lower.
func TestSelectionFindsMinimum(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 5))
	pr := randomProblem(rng)
	pr.blocks = pr.blocks[:1]
	pr.pens = pr.pens[:1]
	sel := &selector{pr: pr, crit: remlUnknownScale, free: []int{0}, fixed: []float64{1}, lo: []float64{-20}, hi: []float64{20}}
	res, ok := sel.minimise([]float64{0})
	if !ok || !res.converged {
		t.Fatalf("did not converge: %+v", res)
	}
	for x := -20.0; x <= 20; x += 0.05 {
		ev, _ := sel.evaluate([]float64{x}, false)
		if ev.v < res.eval.v-1e-9*math.Abs(res.eval.v) {
			t.Fatalf("V(%.2f) = %.10g below the minimum found, V(%.4f) = %.10g", x, ev.v, res.rho[0], res.eval.v)
		}
	}
}
