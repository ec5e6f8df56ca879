package basis

import (
	"math"
	"testing"
)

// Partition of unity and derivative consistency are defining properties of
// B-splines (de Boor 1978, ch. IX): common practice (no source).
func TestBSplinePartitionOfUnityAndDerivatives(t *testing.T) {
	c, err := NewNaturalCubic([]float64{0, 0.3, 1.1, 2, 2.05, 4})
	if err != nil {
		t.Fatal(err)
	}
	b := c.B
	vals := make([]float64, 4)
	for _, x := range []float64{0, 0.1, 0.3, 0.7, 1.1, 2.02, 3.9, 4} {
		b.Eval(x, 0, vals)
		sum := 0.0
		for _, v := range vals {
			sum += v
		}
		if math.Abs(sum-1) > 1e-14 {
			t.Errorf("x=%g: basis sums to %.17g", x, sum)
		}
		// Derivatives of the basis against central differences.
		for d := 1; d <= 2; d++ {
			h := 1e-5
			if x-h < 0 || x+h > 4 || x == 0.3 || x == 1.1 {
				continue
			}
			lo, hi, mid := make([]float64, 4), make([]float64, 4), make([]float64, 4)
			f1 := b.Eval(x-h, d-1, lo)
			f2 := b.Eval(x+h, d-1, hi)
			f0 := b.Eval(x, d, mid)
			if f1 != f0 || f2 != f0 {
				continue
			}
			for i := range mid {
				num := (hi[i] - lo[i]) / (2 * h)
				if math.Abs(num-mid[i]) > 1e-5*(1+math.Abs(mid[i])) {
					t.Errorf("x=%g d=%d i=%d: derivative %g, numeric %g", x, d, i, mid[i], num)
				}
			}
		}
	}
}

// The curvature penalty of f(x) = x² on [0, 4] is ∫ 2² dx = 16. A natural
// spline cannot be x², so use the raw B-spline basis: its coefficients for
// x² follow from interpolation; instead check a cubic with known f”.
// f(x) = x³ has f” = 6x, ∫_0^4 36x² dx = 768 (exact calculus, common practice).
func TestCurvaturePenaltyExact(t *testing.T) {
	knots := []float64{0, 0, 0, 0, 1, 2.5, 3, 4, 4, 4, 4}
	b, err := NewBSpline(knots, 4)
	if err != nil {
		t.Fatal(err)
	}
	// Coefficients of x³ by collocation at Greville-like points: solve the
	// interpolation problem on Len() points with a dense solve.
	n := b.Len()
	xs := make([]float64, n)
	for i := range xs {
		xs[i] = 4 * float64(i) / float64(n-1)
	}
	a := solveInterp(t, b, xs, func(x float64) float64 { return x * x * x })
	s := CurvaturePenalty(b)
	got := 0.0
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			got += a[i] * s.At(i, j) * a[j]
		}
	}
	if math.Abs(got-768) > 1e-9*768 {
		t.Errorf("∫f''² = %.15g, want 768", got)
	}
}

func solveInterp(t *testing.T, b *BSpline, xs []float64, f func(float64) float64) []float64 {
	t.Helper()
	n := len(xs)
	m := make([][]float64, n)
	vals := make([]float64, 4)
	for r, x := range xs {
		m[r] = make([]float64, n+1)
		first := b.Eval(x, 0, vals)
		for i, v := range vals {
			m[r][first+i] = v
		}
		m[r][n] = f(x)
	}
	// Gaussian elimination with partial pivoting (small, well-posed).
	for c := 0; c < n; c++ {
		p := c
		for r := c + 1; r < n; r++ {
			if math.Abs(m[r][c]) > math.Abs(m[p][c]) {
				p = r
			}
		}
		m[c], m[p] = m[p], m[c]
		for r := c + 1; r < n; r++ {
			k := m[r][c] / m[c][c]
			for j := c; j <= n; j++ {
				m[r][j] -= k * m[c][j]
			}
		}
	}
	a := make([]float64, n)
	for r := n - 1; r >= 0; r-- {
		s := m[r][n]
		for j := r + 1; j < n; j++ {
			s -= m[r][j] * a[j]
		}
		a[r] = s / m[r][r]
	}
	return a
}

func TestNaturalCubicLinearBeyondEnds(t *testing.T) {
	c, err := NewNaturalCubic([]float64{1, 2, 3, 5})
	if err != nil {
		t.Fatal(err)
	}
	// Row beyond the end is the tangent line: value at Hi + slope·dx.
	v0, v1, vd := make([]float64, 4), make([]float64, 4), make([]float64, 4)
	f0 := c.Row(5, v0)
	f1 := c.Row(7, v1)
	c.B.Eval(5, 1, vd)
	if f0 != f1 {
		t.Fatalf("first index %d vs %d", f0, f1)
	}
	for i := range v0 {
		if want := v0[i] + 2*vd[i]; math.Abs(v1[i]-want) > 1e-14 {
			t.Errorf("i=%d: %g want %g", i, v1[i], want)
		}
	}
}

func TestDifferencePenalty(t *testing.T) {
	s := DifferencePenalty(5, 2)
	// A straight line in the coefficients is unpenalised; a bump is not.
	line := []float64{1, 2, 3, 4, 5}
	bump := []float64{0, 0, 1, 0, 0}
	quad := func(a []float64) float64 {
		q := 0.0
		for i := range a {
			for j := range a {
				q += a[i] * s.At(i, j) * a[j]
			}
		}
		return q
	}
	if q := quad(line); math.Abs(q) > 1e-12 {
		t.Errorf("line penalised: %g", q)
	}
	// Second differences of the bump: (0,1,-2,1,0)→ (1,-2,1) sum of squares 6.
	if q := quad(bump); math.Abs(q-6) > 1e-12 {
		t.Errorf("bump penalty %g, want 6", q)
	}
}

// The unrolled cubic evaluation must equal the general recurrence.
func TestEvalCubicMatchesGeneral(t *testing.T) {
	b, err := NewBSpline([]float64{0, 0, 0, 0, 0.5, 0.5, 1.25, 2, 3, 3, 3, 3}, 4)
	if err != nil {
		t.Fatal(err)
	}
	for x := 0.0; x <= 3; x += 0.01 {
		fast := make([]float64, 4)
		f1 := b.evalCubic(x, fast)
		// General path: values as the derivative-0 member of order 5 trick is
		// not available, so use Eval with a copy whose order check differs.
		slow := make([]float64, 4)
		f2 := b.evalGeneral(x, 0, slow)
		if f1 != f2 {
			t.Fatalf("x=%g: first %d vs %d", x, f1, f2)
		}
		for i := range fast {
			if math.Abs(fast[i]-slow[i]) > 1e-15 {
				t.Fatalf("x=%g i=%d: %.17g vs %.17g", x, i, fast[i], slow[i])
			}
		}
	}
}

// A cyclic spline's value and first two derivatives agree at the two ends
// of its period: the defining property of the periodic B-spline
// construction (de Boor 1978, ch. IX), checked for random coefficients that
// satisfy its constraints.
func TestCyclicJoinsSmoothly(t *testing.T) {
	for _, knots := range [][]float64{
		{0, 6, 12, 18, 24},
		{0, 1.5, 4, 9, 10, 17.5, 22, 24},
	} {
		c, err := NewCyclic(knots)
		if err != nil {
			t.Fatal(err)
		}
		n := c.Len()
		k := len(knots) - 1
		a := make([]float64, n)
		for i := 0; i < k; i++ {
			a[i] = math.Sin(float64(7*i+1)) * 3
		}
		for i := 0; i < 3; i++ {
			a[k+i] = a[i]
		}
		eval := func(x float64, d int) float64 {
			v := make([]float64, 4)
			f := c.B.Eval(x, d, v)
			s := 0.0
			for i := range v {
				s += v[i] * a[f+i]
			}
			return s
		}
		for d := 0; d <= 2; d++ {
			lo, hi := eval(knots[0], d), eval(knots[k], d)
			if math.Abs(lo-hi) > 1e-8*(1+math.Abs(lo)) {
				t.Errorf("knots %v derivative %d: %.12g at the start, %.12g at the end", knots, d, lo, hi)
			}
		}
		// Row wraps values outside the period.
		v1, v2 := make([]float64, 4), make([]float64, 4)
		f1 := c.Row(3, v1)
		f2 := c.Row(27, v2)
		if f1 != f2 || math.Abs(v1[0]-v2[0]) > 1e-12 {
			t.Errorf("Row(27) does not wrap to Row(3)")
		}
	}
}
