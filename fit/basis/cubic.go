package basis

// evalCubic writes the four cubic B-spline values at x (inside the domain)
// and returns the index of the first: the Cox–de Boor recurrence unrolled
// for order 4 (de Boor 1978, ch. X, algorithm BSPLVB).
func (b *BSpline) evalCubic(x float64, vals []float64) int {
	t := b.Knots
	j := b.span(x)
	l1, l2, l3 := x-t[j], x-t[j-1], x-t[j-2]
	r1, r2, r3 := t[j+1]-x, t[j+2]-x, t[j+3]-x
	// Order 2.
	var n0, n1 float64
	if d := r1 + l1; d != 0 {
		tmp := 1 / d
		n0, n1 = r1*tmp, l1*tmp
	}
	// Order 3.
	var m0, m1, m2 float64
	if d := r1 + l2; d != 0 {
		tmp := n0 / d
		m0 = r1 * tmp
		m1 = l2 * tmp
	}
	if d := r2 + l1; d != 0 {
		tmp := n1 / d
		m1 += r2 * tmp
		m2 = l1 * tmp
	}
	// Order 4.
	var v0, v1, v2, v3 float64
	if d := r1 + l3; d != 0 {
		tmp := m0 / d
		v0 = r1 * tmp
		v1 = l3 * tmp
	}
	if d := r2 + l2; d != 0 {
		tmp := m1 / d
		v1 += r2 * tmp
		v2 = l2 * tmp
	}
	if d := r3 + l1; d != 0 {
		tmp := m2 / d
		v2 += r3 * tmp
		v3 = l1 * tmp
	}
	vals[0], vals[1], vals[2], vals[3] = v0, v1, v2, v3
	return j - 3
}
