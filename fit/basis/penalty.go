package basis

import (
	"math"

	"gonum.org/v1/gonum/mat"
)

// gauss2 holds the two-point Gauss–Legendre rule on [−1, 1], exact for
// polynomials of degree 3.
var gauss2 = [2]float64{-1 / math.Sqrt(3), 1 / math.Sqrt(3)}

// CurvaturePenalty returns S with S_ab = ∫ B_a”(x) B_b”(x) dx over the
// basis domain, so that aᵀSa = ∫ f”(x)² dx for f = Σ a_i B_i. For a cubic
// basis, B” is linear between knots, so the two-point Gauss–Legendre rule
// per knot interval is exact.
func CurvaturePenalty(b *BSpline) *mat.SymDense {
	n := b.Len()
	s := mat.NewSymDense(n, nil)
	vals := make([]float64, b.Order)
	lo, hi := b.Domain()
	for j := b.Order - 1; j < n; j++ {
		a, c := b.Knots[j], b.Knots[j+1]
		if !(c > a) || c <= lo || a >= hi {
			continue
		}
		half, mid := (c-a)/2, (c+a)/2
		for _, g := range gauss2 {
			x := mid + half*g
			first := b.Eval(x, 2, vals)
			for p := 0; p < b.Order; p++ {
				for q := p; q < b.Order; q++ {
					s.SetSym(first+p, first+q, s.At(first+p, first+q)+half*vals[p]*vals[q])
				}
			}
		}
	}
	return s
}

// DifferencePenalty returns DᵀD for the order-th difference matrix D on n
// coefficients (Eilers & Marx 1996, "Flexible smoothing with B-splines and
// penalties", Statistical Science 11).
func DifferencePenalty(n, order int) *mat.SymDense {
	d := mat.NewDense(n, n, nil)
	for i := 0; i < n; i++ {
		d.Set(i, i, 1)
	}
	rows := n
	for o := 0; o < order; o++ {
		next := mat.NewDense(rows-1, n, nil)
		for i := 0; i < rows-1; i++ {
			for c := 0; c < n; c++ {
				next.Set(i, c, d.At(i+1, c)-d.At(i, c))
			}
		}
		d, rows = next, rows-1
	}
	s := mat.NewSymDense(n, nil)
	s.SymOuterK(1, d.T())
	return s
}

// Integrals returns ∫ B_i(x) dx over the curve's interval [Lo, Hi] for each
// basis function (two-point Gauss–Legendre per knot interval, exact for
// cubics). A coefficient vector a with Σ a_i ∫B_i = 0 gives a curve with
// zero mean over the interval.
func (c *Curve) Integrals() []float64 {
	b := c.B
	out := make([]float64, b.Len())
	vals := make([]float64, b.Order)
	for j := b.Order - 1; j < b.Len(); j++ {
		lo, hi := math.Max(b.Knots[j], c.Lo), math.Min(b.Knots[j+1], c.Hi)
		if !(hi > lo) {
			continue
		}
		half, mid := (hi-lo)/2, (hi+lo)/2
		for _, g := range gauss2 {
			first := b.Eval(mid+half*g, 0, vals)
			for k, v := range vals {
				out[first+k] += half * v
			}
		}
	}
	return out
}
