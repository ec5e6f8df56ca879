// Package basis evaluates the spline bases behind curvewatch's curves and
// surfaces and builds their penalty matrices.
//
// Every basis here is a B-spline basis (de Boor 1978, "A Practical Guide to
// Splines") on a knot vector t, possibly with linear constraints on its
// coefficients (natural boundary conditions, periodicity). Evaluating a
// B-spline basis touches only Order functions at any x, which keeps the model
// matrix sparse and the per-row cost of a fit small.
package basis

import "fmt"

// BSpline is the B-spline basis of a given order (4 for cubic) on a
// non-decreasing knot vector. It has len(Knots)−Order functions and is a
// partition of unity on [Knots[Order−1], Knots[len(Knots)−Order]].
type BSpline struct {
	Knots []float64
	Order int
}

// NewBSpline checks the knot vector and returns the basis.
func NewBSpline(knots []float64, order int) (*BSpline, error) {
	if order < 1 {
		return nil, fmt.Errorf("basis: order %d must be at least 1", order)
	}
	if len(knots) < 2*order {
		return nil, fmt.Errorf("basis: %d knots are too few for order %d (need %d)", len(knots), order, 2*order)
	}
	for i := 1; i < len(knots); i++ {
		if !(knots[i] >= knots[i-1]) {
			return nil, fmt.Errorf("basis: knots must be non-decreasing (knot %d is %g after %g)", i, knots[i], knots[i-1])
		}
	}
	lo, hi := knots[order-1], knots[len(knots)-order]
	if !(hi > lo) {
		return nil, fmt.Errorf("basis: empty domain [%g, %g]", lo, hi)
	}
	return &BSpline{Knots: knots, Order: order}, nil
}

// Len is the number of basis functions.
func (b *BSpline) Len() int { return len(b.Knots) - b.Order }

// Domain returns the interval on which the basis is a partition of unity.
func (b *BSpline) Domain() (lo, hi float64) {
	return b.Knots[b.Order-1], b.Knots[len(b.Knots)-b.Order]
}

// span returns j with Knots[j] ≤ x < Knots[j+1] and Order−1 ≤ j ≤ Len()−1;
// x is clamped to the domain (the right end belongs to the last interval).
func (b *BSpline) span(x float64) int {
	k := b.Order
	lo, hi := k-1, b.Len()-1
	if x <= b.Knots[lo] {
		// Skip repeated knots at the left end.
		for lo < hi && b.Knots[lo+1] <= x {
			lo++
		}
		return lo
	}
	if x >= b.Knots[hi+1] {
		for hi > lo && b.Knots[hi] >= b.Knots[hi+1] {
			hi--
		}
		return hi
	}
	// Largest j in [lo, hi] with Knots[j] ≤ x, by bisection.
	for lo < hi {
		mid := int(uint(lo+hi+1) >> 1)
		if b.Knots[mid] <= x {
			lo = mid
		} else {
			hi = mid - 1
		}
	}
	return lo
}

// Eval writes into vals (length ≥ Order) the deriv-th derivative at x of the
// Order basis functions that can be non-zero there, and returns the index of
// the first of them. x outside the domain is clamped to it. deriv ≥ Order
// gives zeros.
//
// Values come from the Cox–de Boor recurrence; derivatives from
// B'_{i,k} = (k−1)[B_{i,k−1}/(t_{i+k−1}−t_i) − B_{i+1,k−1}/(t_{i+k}−t_{i+1})]
// (de Boor 1978, ch. X).
func (b *BSpline) Eval(x float64, deriv int, vals []float64) int {
	k := b.Order
	lo, hi := b.Domain()
	if x < lo {
		x = lo
	} else if x > hi {
		x = hi
	}
	if deriv == 0 && k == 4 {
		return b.evalCubic(x, vals)
	}
	return b.evalGeneral(x, deriv, vals)
}

// evalGeneral is Eval for any order and derivative, on a clamped x.
func (b *BSpline) evalGeneral(x float64, deriv int, vals []float64) int {
	k := b.Order
	t := b.Knots
	j := b.span(x)
	for i := range vals[:k] {
		vals[i] = 0
	}
	if deriv >= k {
		return j - k + 1
	}
	// Values of the order (k−deriv) functions j−o+1..j in vals[0:o].
	o := k - deriv
	var left, right [32]float64
	vals[0] = 1
	for r := 1; r < o; r++ {
		left[r] = x - t[j+1-r]
		right[r] = t[j+r] - x
		saved := 0.0
		for s := 0; s < r; s++ {
			den := right[s+1] + left[r-s]
			temp := 0.0
			if den != 0 {
				temp = vals[s] / den
			}
			vals[s] = saved + right[s+1]*temp
			saved = left[r-s] * temp
		}
		vals[r] = saved
	}
	// Raise the order while differentiating: functions of order o+1 are
	// j−o..j; function i uses order-o functions i and i+1.
	var next [32]float64
	for ; o < k; o++ {
		for jj := 0; jj <= o; jj++ {
			i := j - o + jj
			d := 0.0
			if jj-1 >= 0 {
				if den := t[i+o] - t[i]; den != 0 {
					d += vals[jj-1] / den
				}
			}
			if jj < o {
				if den := t[i+o+1] - t[i+1]; den != 0 {
					d -= vals[jj] / den
				}
			}
			next[jj] = float64(o) * d
		}
		copy(vals[:o+1], next[:o+1])
	}
	return j - k + 1
}
