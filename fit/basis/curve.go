package basis

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// Curve is a one-dimensional cubic spline basis: a B-spline basis, a
// penalty on its coefficients and linear constraints the coefficients must
// satisfy. Outside [Lo, Hi] a curve continues as the straight line that
// touches it at the nearer end, so predictions never explode.
type Curve struct {
	B *BSpline
	// Lo and Hi bound the region where the spline itself is used.
	Lo, Hi float64
	// Penalty is S on the B-spline coefficients a: aᵀSa is the wiggliness.
	Penalty *mat.SymDense
	// Constraints holds rows c with c·a = 0; nil when there are none.
	Constraints *mat.Dense
	// Periodic curves wrap x into [Lo, Hi) instead of extending linearly.
	Periodic bool
}

// Len is the number of B-spline coefficients.
func (c *Curve) Len() int { return c.B.Len() }

// Row writes the Order design values at x into vals and returns the index
// of the first coefficient they belong to.
func (c *Curve) Row(x float64, vals []float64) int {
	if c.Periodic {
		return c.B.Eval(c.wrap(x), 0, vals)
	}
	switch {
	case x < c.Lo:
		return c.line(c.Lo, x-c.Lo, vals)
	case x > c.Hi:
		return c.line(c.Hi, x-c.Hi, vals)
	}
	return c.B.Eval(x, 0, vals)
}

// line writes B(at) + dx·B'(at), the basis of the tangent line at `at`.
func (c *Curve) line(at, dx float64, vals []float64) int {
	var d [32]float64
	first := c.B.Eval(at, 0, vals)
	c.B.Eval(at, 1, d[:c.B.Order])
	for i := range vals[:c.B.Order] {
		vals[i] += dx * d[i]
	}
	return first
}

// NewNaturalCubic returns the natural cubic regression spline with the
// given distinct, increasing knots: a cubic spline with those knots whose
// second derivative vanishes at the first and last knot. Its dimension is
// len(knots); the penalty is ∫f”(x)² dx exactly, so with a knot at every
// distinct data value a penalised fit is the classical cubic smoothing
// spline (Reinsch 1967; Green & Silverman 1994, ch. 2).
//
// The basis is represented with cubic B-splines on the knots (boundary knots
// repeated four times, len(knots)+2 functions) and two constraint rows
// f”(κ₁) = 0, f”(κ_K) = 0.
func NewNaturalCubic(knots []float64) (*Curve, error) {
	if len(knots) < 3 {
		return nil, fmt.Errorf("basis: a natural cubic spline needs at least 3 knots, got %d", len(knots))
	}
	for i := 1; i < len(knots); i++ {
		if !(knots[i] > knots[i-1]) {
			return nil, fmt.Errorf("basis: knots must be distinct and increasing (knot %d is %g after %g)", i, knots[i], knots[i-1])
		}
	}
	lo, hi := knots[0], knots[len(knots)-1]
	t := make([]float64, 0, len(knots)+6)
	t = append(t, lo, lo, lo)
	t = append(t, knots...)
	t = append(t, hi, hi, hi)
	b, err := NewBSpline(t, 4)
	if err != nil {
		return nil, err
	}
	n := b.Len()
	cons := mat.NewDense(2, n, nil)
	vals := make([]float64, 4)
	for r, x := range []float64{lo, hi} {
		first := b.Eval(x, 2, vals)
		for i, v := range vals {
			cons.Set(r, first+i, v)
		}
	}
	return &Curve{B: b, Lo: lo, Hi: hi, Penalty: CurvaturePenalty(b), Constraints: cons}, nil
}

// NewPSpline returns a P-spline basis (Eilers & Marx 1996): size cubic
// B-splines on evenly spaced knots covering [lo, hi] with a second-order
// difference penalty on adjacent coefficients. The penalty's null space is
// the straight lines.
func NewPSpline(lo, hi float64, size int) (*Curve, error) {
	if size < 4 {
		return nil, fmt.Errorf("basis: a P-spline needs at least 4 functions, got %d", size)
	}
	if !(hi > lo) || math.IsInf(hi-lo, 0) {
		return nil, fmt.Errorf("basis: P-spline range [%g, %g] is empty", lo, hi)
	}
	intervals := size - 3
	h := (hi - lo) / float64(intervals)
	t := make([]float64, size+4)
	for i := range t {
		t[i] = lo + float64(i-3)*h
	}
	t[3], t[size] = lo, hi // exact ends despite rounding
	b, err := NewBSpline(t, 4)
	if err != nil {
		return nil, err
	}
	return &Curve{B: b, Lo: lo, Hi: hi, Penalty: DifferencePenalty(size, 2), Constraints: nil}, nil
}

// NewCyclic returns a cyclic cubic spline on [a, b] whose value, slope and
// curvature agree at a and b: cubic B-splines on the knots of one period,
// extended periodically by three knots at each end, with the last three
// coefficients tied to the first three (the periodic B-spline construction,
// de Boor 1978, ch. IX; Eilers & Marx 1996 §8 for its penalised use). The
// penalty is ∫_a^b f”(x)² dx exactly. knots holds a = κ₀ < … < κ_K = b; the
// basis has dimension K. Values outside [a, b) are wrapped into it.
func NewCyclic(knots []float64) (*Curve, error) {
	k := len(knots) - 1
	if k < 4 {
		return nil, fmt.Errorf("basis: a cyclic spline needs at least 4 knot intervals, got %d", k)
	}
	for i := 1; i < len(knots); i++ {
		if !(knots[i] > knots[i-1]) {
			return nil, fmt.Errorf("basis: cyclic knots must increase (knot %d is %g after %g)", i, knots[i], knots[i-1])
		}
	}
	a, b := knots[0], knots[k]
	period := b - a
	t := make([]float64, 0, k+7)
	for j := 3; j >= 1; j-- {
		t = append(t, knots[k-j]-period)
	}
	t = append(t, knots...)
	for j := 1; j <= 3; j++ {
		t = append(t, knots[j]+period)
	}
	bs, err := NewBSpline(t, 4)
	if err != nil {
		return nil, err
	}
	n := bs.Len() // k + 3
	cons := mat.NewDense(3, n, nil)
	for i := 0; i < 3; i++ {
		cons.Set(i, i, 1)
		cons.Set(i, k+i, -1)
	}
	return &Curve{B: bs, Lo: a, Hi: b, Penalty: CurvaturePenalty(bs), Constraints: cons, Periodic: true}, nil
}

// wrap maps x into [Lo, Hi) for a periodic curve.
func (c *Curve) wrap(x float64) float64 {
	p := c.Hi - c.Lo
	y := math.Mod(x-c.Lo, p)
	if y < 0 {
		y += p
	}
	return c.Lo + y
}
