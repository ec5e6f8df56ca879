package fit

import (
	"fmt"
	"math"

	"github.com/curvewatch/curvewatch/fit/basis"
	"gonum.org/v1/gonum/stat/distuv"
)

// Comparison grids: points along a curve, and a side of a surface's square
// grid.
const (
	compareCurvePoints   = 200
	compareSurfacePoints = 30
)

// docView is one document's coefficients and covariance in flat form, and
// the row a of its model level aᵀβ being assembled.
type docView struct {
	doc   *Document
	pc    int
	beta  []float64
	v     []float64 // pc×pc row-major
	level []float64 // a: level = aᵀβ
}

func newDocView(d *Document) *docView {
	pc := len(d.Coefficients)
	v := make([]float64, pc*pc)
	for i, row := range d.Covariance {
		copy(v[i*pc:], row)
	}
	a := make([]float64, pc)
	a[0] = 1
	return &docView{doc: d, pc: pc, beta: d.Coefficients, v: v, level: a}
}

// comparison holds what the term comparisons share.
type comparison struct {
	tol       Tolerance
	ref, cand *docView
	varScale  float64 // 1 − s: the overlap correction of every variance
	warn      []string
	// levelBroken says why the model levels cannot be compared (a
	// factor's baseline level missing from the candidate), or "".
	levelBroken string
}

// termSide is one fit's rows of one term on the common grid.
type termSide struct {
	g    []float64 // m×q rows, re-centred over the grid (C·G)
	mean []float64 // q: the grid mean of the uncentred rows (1ᵀG/m)
	q    int
	beta []float64
	v    []float64 // q×q
}

func (dv *docView) side(tr *TermResult, g []float64, m int) termSide {
	start, q := tr.Coefficients[0], tr.Coefficients[1]
	s := termSide{g: g, q: q, beta: dv.beta[start : start+q], v: block(dv.v, dv.pc, start, q), mean: make([]float64, q)}
	for i := 0; i < m; i++ {
		for j := 0; j < q; j++ {
			s.mean[j] += g[i*q+j] / float64(m)
		}
	}
	for i := 0; i < m; i++ {
		for j := 0; j < q; j++ {
			g[i*q+j] -= s.mean[j]
		}
	}
	return s
}

// smoothDiff is the difference of two re-centred terms on m grid points,
// with its simulated maximum distribution.
type smoothDiff struct {
	ref, cand []float64 // the re-centred fits
	delta     []float64
	sim       *maxSim
	crit      float64
	obs       float64 // max |Δ|/se
	p         float64
}

// diffSmooth forms Δ = C(G_c β_c − G_r β_r) on m points and simulates
// max|Δ|/se from δ ~ N(0, (1 − s)·blockdiag(V_c, V_r)) through the stacked
// rows [C G_c, −C G_r]. groups are neighbouring points for maxAbsDraws.
func (c *comparison) diffSmooth(name string, r, k termSide, m int, groups [][]int) (*smoothDiff, error) {
	d := &smoothDiff{ref: matMul(r.g, r.beta, m, r.q, 1), cand: matMul(k.g, k.beta, m, k.q, 1), delta: make([]float64, m)}
	for i := range d.delta {
		d.delta[i] = d.cand[i] - d.ref[i]
	}
	q := k.q + r.q
	g := make([]float64, m*q)
	for i := 0; i < m; i++ {
		copy(g[i*q:], k.g[i*k.q:(i+1)*k.q])
		for j := 0; j < r.q; j++ {
			g[i*q+k.q+j] = -r.g[i*r.q+j]
		}
	}
	v := make([]float64, q*q)
	for i := 0; i < k.q; i++ {
		for j := 0; j < k.q; j++ {
			v[i*q+j] = c.varScale * k.v[i*k.q+j]
		}
	}
	for i := 0; i < r.q; i++ {
		for j := 0; j < r.q; j++ {
			v[(k.q+i)*q+k.q+j] = c.varScale * r.v[i*r.q+j]
		}
	}
	sim, ok := simulateMax(g, m, q, groups, v, compareDraws, termRNG(name))
	if !ok {
		return nil, refuse(ReasonDamaged, "", name, "the difference has no posterior variance on the common grid (a singular or zero covariance)")
	}
	d.sim = sim
	d.crit = sim.critical(c.tol.Level)
	d.obs = sim.observed(d.delta)
	d.p = sim.pValue(d.obs)
	return d, nil
}

// marginCurves rebuilds a term's spline margins from its basis record, as
// NewPredictor does.
func marginCurves(tr *TermResult, which string) ([]*basis.Curve, error) {
	var out []*basis.Curve
	width := 1
	for _, mg := range tr.Basis.Margins {
		b, err := basis.NewBSpline(mg.Knots, 4)
		if err != nil {
			return nil, refuse(ReasonDamaged, which, tr.Name, "%v", err)
		}
		out = append(out, &basis.Curve{B: b, Lo: mg.Lo, Hi: mg.Hi, Periodic: mg.Periodic})
		width *= b.Len()
	}
	if q := tr.Coefficients[1]; width != tr.Basis.Width || len(tr.Basis.Z) != width*q {
		return nil, refuse(ReasonDamaged, which, tr.Name, "basis width %d does not match its constraint matrix", width)
	}
	return out, nil
}

// commonRange is the intersection of the two fits' ranges of margin k: the
// data ranges, or for a periodic margin the periods.
func commonRange(tr, tc *TermResult, k int) (lo, hi float64, err error) {
	mr, mc := tr.Basis.Margins[k], tc.Basis.Margins[k]
	a, b := tr.Range[k], tc.Range[k]
	if mr.Periodic {
		a, b = [2]float64{mr.Lo, mr.Hi}, [2]float64{mc.Lo, mc.Hi}
	}
	lo, hi = math.Max(a[0], b[0]), math.Min(a[1], b[1])
	if !(hi > lo) {
		return 0, 0, refuse(ReasonRange, "", tr.Name, "the fits share no range of %q (reference [%.6g, %.6g], candidate [%.6g, %.6g]): a comparison would compare extrapolations",
			tr.Columns[k], a[0], a[1], b[0], b[1])
	}
	return lo, hi, nil
}

// noteNarrow warns when the common range of a column covers less than half
// of either fit's range: the comparison then says nothing about the rest.
func (c *comparison) noteNarrow(tr, tc *TermResult, k int, lo, hi float64) {
	for _, r := range [][2]float64{tr.Range[k], tc.Range[k]} {
		if w := r[1] - r[0]; w > 0 && hi-lo < w/2 {
			c.warn = append(c.warn, fmt.Sprintf("term %q: compared over [%.6g, %.6g] of %q only, less than half of one fit's range [%.6g, %.6g]",
				tr.Name, lo, hi, tr.Columns[k], r[0], r[1]))
			return
		}
	}
}

func evenGrid(lo, hi float64, m int) []float64 {
	x := make([]float64, m)
	for i := range x {
		x[i] = lo + (hi-lo)*float64(i)/float64(m-1)
	}
	x[m-1] = hi
	return x
}

// curveRows returns the m×q model-matrix rows of a curve at xs.
func curveRows(cv *basis.Curve, z []float64, q int, xs []float64) []float64 {
	g := make([]float64, len(xs)*q)
	var buf [4]float64
	for i, x := range xs {
		row := g[i*q : (i+1)*q]
		first := cv.Row(x, buf[:])
		for a := 0; a < 4; a++ {
			for j := 0; j < q; j++ {
				row[j] += buf[a] * z[(first+a)*q+j]
			}
		}
	}
	return g
}

// surfaceRows returns the model-matrix rows of a surface at the points
// (x1[i], x2[i]).
func surfaceRows(m1, m2 *basis.Curve, z []float64, q int, x1, x2 []float64) []float64 {
	g := make([]float64, len(x1)*q)
	k2 := m2.Len()
	var b1, b2 [4]float64
	for i := range x1 {
		row := g[i*q : (i+1)*q]
		f1 := m1.Row(x1[i], b1[:])
		f2 := m2.Row(x2[i], b2[:])
		for a := 0; a < 4; a++ {
			for c := 0; c < 4; c++ {
				raw := (f1+a)*k2 + f2 + c
				w := b1[a] * b2[c]
				for j := 0; j < q; j++ {
					row[j] += w * z[raw*q+j]
				}
			}
		}
	}
	return g
}

// inLevel reports whether a reference term's mean enters the model's
// level: every curve and surface except by-level curves of levels other
// than the reference fit's first (the by factor's reference level). The
// candidate's term of the same name is taken with it, so that both levels
// are the same sum.
func inLevel(tr *TermResult, doc *Document) bool {
	if tr.By == "" {
		return true
	}
	var levels []string
	for _, t := range doc.Terms {
		if t.By == tr.By {
			levels = append(levels, t.ByLevel)
		}
	}
	return SortLevels(levels)[0] == tr.ByLevel
}

// curve compares one curve on the common grid.
func (c *comparison) curve(tr, tc *TermResult) (*TermShift, error) {
	lo, hi, err := commonRange(tr, tc, 0)
	if err != nil {
		return nil, err
	}
	c.noteNarrow(tr, tc, 0, lo, hi)
	if mr, mc := tr.Basis.Margins[0], tc.Basis.Margins[0]; mr.Periodic && (mr.Lo != mc.Lo || mr.Hi != mc.Hi) {
		c.warn = append(c.warn, fmt.Sprintf("term %q: the fits' periods differ ([%g, %g], [%g, %g]); compared over their intersection", tr.Name, mr.Lo, mr.Hi, mc.Lo, mc.Hi))
	}
	cr, err := marginCurves(tr, "reference")
	if err != nil {
		return nil, err
	}
	cc, err := marginCurves(tc, "candidate")
	if err != nil {
		return nil, err
	}
	m := compareCurvePoints
	xs := evenGrid(lo, hi, m)
	r := c.ref.side(tr, curveRows(cr[0], tr.Basis.Z, tr.Coefficients[1], xs), m)
	k := c.cand.side(tc, curveRows(cc[0], tc.Basis.Z, tc.Coefficients[1], xs), m)
	if inLevel(tr, c.ref.doc) {
		c.addLevel(tr, tc, r.mean, k.mean)
	}
	d, err := c.diffSmooth(tr.Name, r, k, m, nil)
	if err != nil {
		return nil, err
	}
	ts := &TermShift{Critical: d.crit, PValue: d.p, Score: d.obs / d.crit, Common: [][2]float64{{lo, hi}},
		Grid: &ShiftGrid{X: xs, Reference: d.ref, Candidate: d.cand, Delta: d.delta, SE: d.sim.se}}
	out := 0
	start := -1
	for i, dv := range d.delta {
		ts.Size = math.Max(ts.Size, math.Abs(dv))
		beyond := d.sim.use[i] && math.Abs(dv) > d.crit*d.sim.se[i]
		if beyond {
			out++
			if start < 0 {
				start = i
			}
		}
		if start >= 0 && (!beyond || i == m-1) {
			end := i - 1
			if beyond {
				end = i
			}
			ts.Outside = append(ts.Outside, [2]float64{xs[start], xs[end]})
			start = -1
		}
	}
	ts.OutsideFraction = float64(out) / float64(m)
	return ts, nil
}

// surface compares one surface on the common rectangle, leaving out the
// grid points either fit marks far from its data (read from the nearest
// point of that fit's own surface grid).
func (c *comparison) surface(tr, tc *TermResult) (*TermShift, error) {
	lo1, hi1, err := commonRange(tr, tc, 0)
	if err != nil {
		return nil, err
	}
	lo2, hi2, err := commonRange(tr, tc, 1)
	if err != nil {
		return nil, err
	}
	c.noteNarrow(tr, tc, 0, lo1, hi1)
	c.noteNarrow(tr, tc, 1, lo2, hi2)
	cr, err := marginCurves(tr, "reference")
	if err != nil {
		return nil, err
	}
	cc, err := marginCurves(tc, "candidate")
	if err != nil {
		return nil, err
	}
	n := compareSurfacePoints
	g1, g2 := evenGrid(lo1, hi1, n), evenGrid(lo2, hi2, n)
	sg := &SurfaceShiftGrid{X1: g1, X2: g2}
	index := make([]int, n*n) // grid point → kept point, or −1
	var x1, x2 []float64
	for i, a := range g1 {
		sg.Excluded = append(sg.Excluded, make([]bool, n))
		for j, b := range g2 {
			far := isFar(tr.SurfaceGrid, a, b) || isFar(tc.SurfaceGrid, a, b)
			sg.Excluded[i][j] = far
			index[i*n+j] = -1
			if !far {
				index[i*n+j] = len(x1)
				x1, x2 = append(x1, a), append(x2, b)
			}
		}
	}
	m := len(x1)
	if m < 2 {
		return nil, refuse(ReasonRange, "", tr.Name, "the fits' data share no region of (%q, %q): every point of the common rectangle is far from one fit's data", tr.Columns[0], tr.Columns[1])
	}
	var groups [][]int
	for _, tile := range tiles(n, n, 3) {
		var g []int
		for _, p := range tile {
			if index[p] >= 0 {
				g = append(g, index[p])
			}
		}
		if len(g) > 0 {
			groups = append(groups, g)
		}
	}
	r := c.ref.side(tr, surfaceRows(cr[0], cr[1], tr.Basis.Z, tr.Coefficients[1], x1, x2), m)
	k := c.cand.side(tc, surfaceRows(cc[0], cc[1], tc.Basis.Z, tc.Coefficients[1], x1, x2), m)
	c.addLevel(tr, tc, r.mean, k.mean)
	d, err := c.diffSmooth(tr.Name, r, k, m, groups)
	if err != nil {
		return nil, err
	}
	ts := &TermShift{Critical: d.crit, PValue: d.p, Score: d.obs / d.crit,
		Common: [][2]float64{{lo1, hi1}, {lo2, hi2}}, Surface: sg}
	out := 0
	for i := 0; i < n; i++ {
		sg.Delta = append(sg.Delta, make([]float64, n))
		sg.SE = append(sg.SE, make([]float64, n))
		for j := 0; j < n; j++ {
			p := index[i*n+j]
			if p < 0 {
				continue // excluded: 0 (JSON has no NaN)
			}
			dv := d.delta[p]
			sg.Delta[i][j], sg.SE[i][j] = dv, d.sim.se[p]
			ts.Size = math.Max(ts.Size, math.Abs(dv))
			if d.sim.use[p] && math.Abs(dv) > d.crit*d.sim.se[p] {
				out++
			}
		}
	}
	ts.OutsideFraction = float64(out) / float64(m)
	return ts, nil
}

// isFar reads a surface grid's far mask at the grid point nearest (a, b).
func isFar(sg *SurfaceGrid, a, b float64) bool {
	if sg == nil || len(sg.X1) == 0 || len(sg.X2) == 0 || len(sg.Far) != len(sg.X1) {
		return false
	}
	i, j := nearest(sg.X1, a), nearest(sg.X2, b)
	if j >= len(sg.Far[i]) {
		return false
	}
	return sg.Far[i][j]
}

// nearest returns the index of the point of the evenly spaced xs nearest x.
func nearest(xs []float64, x float64) int {
	n := len(xs)
	if n == 1 || xs[n-1] == xs[0] {
		return 0
	}
	i := int(math.Round((x - xs[0]) / (xs[n-1] - xs[0]) * float64(n-1)))
	return min(max(i, 0), n-1)
}

// addLevel adds a term's grid mean to each fit's level row.
func (c *comparison) addLevel(tr, tc *TermResult, mr, mc []float64) {
	for j, v := range mr {
		c.ref.level[tr.Coefficients[0]+j] += v
	}
	for j, v := range mc {
		c.cand.level[tc.Coefficients[0]+j] += v
	}
}

// zCritical is Φ⁻¹(1 − (1 − level)/2), the two-sided normal critical value.
func zCritical(level float64) float64 {
	return distuv.UnitNormal.Quantile(1 - (1-level)/2)
}

// twoSided is the two-sided normal p-value of z.
func twoSided(z float64) float64 {
	return 2 * distuv.UnitNormal.Survival(math.Abs(z))
}

// scalar compares aᵀβ between the fits for level rows a_r, a_c.
func (c *comparison) scalar(ar, ac []float64) LevelShift {
	quad := func(dv *docView, a []float64) float64 {
		s := 0.0
		for i, x := range a {
			if x == 0 {
				continue
			}
			for j, y := range a {
				s += x * dv.v[i*dv.pc+j] * y
			}
		}
		return s
	}
	dot := func(a, b []float64) float64 {
		s := 0.0
		for i := range a {
			s += a[i] * b[i]
		}
		return s
	}
	ls := LevelShift{Reference: dot(ar, c.ref.beta), Candidate: dot(ac, c.cand.beta)}
	ls.Delta = ls.Candidate - ls.Reference
	ls.SE = math.Sqrt(math.Max(0, c.varScale*(quad(c.ref, ar)+quad(c.cand, ac))))
	if ls.SE > 0 {
		ls.Z = ls.Delta / ls.SE
		ls.PValue = twoSided(ls.Z)
	} else {
		ls.PValue = 1
	}
	return ls
}

// level compares the model's level (see Compare).
func (c *comparison) level() LevelShift {
	return c.scalar(c.ref.level, c.cand.level)
}

// linear compares the slopes of a linear term.
func (c *comparison) linear(tr, tc *TermResult) (*TermShift, error) {
	if tr.Estimate == nil || tc.Estimate == nil || tr.Coefficients[1] != 1 || tc.Coefficients[1] != 1 {
		c.warn = append(c.warn, fmt.Sprintf("term %q: aliased (fixed at zero) in one fit; not compared", tr.Name))
		return &TermShift{Verdict: VerdictNotCompared, PValue: 1}, nil
	}
	lo, hi := math.Max(tr.Range[0][0], tc.Range[0][0]), math.Min(tr.Range[0][1], tc.Range[0][1])
	if !(hi > lo) {
		return nil, refuse(ReasonRange, "", tr.Name, "the fits share no range of %q (reference [%.6g, %.6g], candidate [%.6g, %.6g])",
			tr.Columns[0], tr.Range[0][0], tr.Range[0][1], tc.Range[0][0], tc.Range[0][1])
	}
	ar, ac := make([]float64, c.ref.pc), make([]float64, c.cand.pc)
	ar[tr.Coefficients[0]], ac[tc.Coefficients[0]] = 1, 1
	ls := c.scalar(ar, ac)
	// The line enters the level at the middle of the common range.
	mid := (lo + hi) / 2
	c.ref.level[tr.Coefficients[0]] += mid
	c.cand.level[tc.Coefficients[0]] += mid
	zc := zCritical(c.tol.Level)
	return &TermShift{Critical: zc, PValue: ls.PValue, Score: math.Abs(ls.Z) / zc,
		Size: math.Abs(ls.Delta) * (hi - lo) / 2, Common: [][2]float64{{lo, hi}}}, nil
}
