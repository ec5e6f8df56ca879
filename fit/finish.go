package fit

import (
	"context"
	"fmt"
	"math"
	"slices"

	"github.com/curvewatch/curvewatch/fit/basis"
)

// nullMean returns the fitted mean of the intercept-only model as a
// function of the offset. Without an offset it is the weighted mean
// response; with one it is found by IRLS on the intercept alone.
func (f *fitter) nullMean(ctx context.Context, sum *summary) (func(float64) float64, error) {
	link := f.m.link
	if f.m.spec.Offset == "" {
		mu := sum.yMean
		return func(float64) float64 { return mu }, nil
	}
	d0 := &design{p: 1, nnz: 1, pc: 1}
	st := &pirlsState{d: d0, z: []float64{1}}
	var beta []float64
	for it := 0; it < 50; it++ {
		res, err := f.pass(ctx, st, beta, crossProducts, nil, 1)
		if err != nil {
			return nil, err
		}
		f.progress("null model", res.n, res.dev)
		if res.xtwx[0] <= 0 {
			return nil, fmt.Errorf("the intercept-only model has no information")
		}
		f.nullDev = res.dev // at the previous β₀: the null deviance once converged
		b := res.xtwz[0]/res.xtwx[0] + res.zShift
		if beta != nil && math.Abs(b-beta[0]) <= 1e-12*(1+math.Abs(b)) {
			beta = []float64{b}
			break
		}
		beta = []float64{b}
	}
	b0 := beta[0]
	return func(off float64) float64 { return link.Inverse(b0 + off) }, nil
}

// document assembles the fit document.
func (f *fitter) document(ctx context.Context, st *pirlsState, sum *summary) (*Document, error) {
	m, d := f.m, st.d
	// The last pass evaluated the deviance, Pearson statistic,
	// log-likelihood and residual autocorrelation at the final β (for the
	// gaussian family with identity link, a dedicated evaluation pass).
	res := st.res
	if res.invalid {
		return nil, fmt.Errorf("the final coefficients give means outside the %s family's range", m.fam.Name())
	}
	if m.fam.Name() == "binomial" && res.boundary > 0 && res.maxEta >= logitClamp-1e-9 {
		return nil, fmt.Errorf("complete or quasi-complete separation: %d rows are fitted with probability 0 or 1 and their coefficients grow without bound; remove or merge the terms that separate the outcomes, or give their effect a penalty (a curve)", res.boundary)
	}
	sol := st.eval.sol
	pc := d.pc
	edfCoef := st.pr.edfPerCoefficient(&sol)
	edf := 0.0
	for _, e := range edfCoef {
		edf += e
	}
	n := float64(res.n)
	scale := 1.0
	if !m.fam.FixedScale() {
		if n-edf <= 0 {
			return nil, fmt.Errorf("no residual degrees of freedom (%d rows, %.1f effective degrees of freedom); use more rows or smaller sizes", res.n, edf)
		}
		scale = res.pearson / (n - edf)
		if f.serialRec != nil {
			// The whitened residuals estimate the errors' marginal variance.
			scale = sol.rss / (n - edf)
		}
	}
	// Posterior covariance H⁻¹φ in the internal parametrisation, then the
	// linear map T to the reported one (linear terms per unit of their
	// column, the intercept at zero of every linear covariate).
	tm := make([]float64, pc*pc)
	for i := 0; i < pc; i++ {
		tm[i*pc+i] = 1
	}
	for _, t := range d.terms {
		if t.spec.Kind == Linear && t.q == 1 {
			c := t.cstart
			tm[c*pc+c] = 1 / t.scale
			tm[0*pc+c] = -t.center / t.scale
		}
	}
	beta := matMul(tm, st.beta, pc, pc, 1)
	vint := make([]float64, pc*pc)
	for i := range vint {
		vint[i] = sol.hinv[i] * scale
	}
	v := matMul(matMul(tm, vint, pc, pc, pc), transpose(tm, pc, pc), pc, pc, pc)
	cov := make([][]float64, pc)
	for i := range cov {
		cov[i] = append([]float64(nil), v[i*pc:i*pc+pc]...)
	}
	se := func(i int) float64 { return math.Sqrt(math.Max(0, v[i*pc+i])) }

	doc := &Document{
		Format: FormatVersion, Model: m.spec.Name, Family: m.spec.Family, Link: m.spec.Link,
		N: res.n, Deviance: res.dev, NullDeviance: f.nullDev,
		Scale: scale, ScaleEstimated: !m.fam.FixedScale(), EDFTotal: edf, ResidualDF: n - edf,
		Intercept:    Estimate{Estimate: beta[0], SE: se(0)},
		Coefficients: beta, Covariance: cov, Spec: m.spec,
		Data: DataRecord{RowsRead: sum.rowsRead, RowsUsed: sum.rowsUsed, Dropped: sum.dropped,
			Fingerprint: fmt.Sprintf("%016x", sum.rows.sum), Sketch: sum.rows.sketch, Window: sum.window},
	}
	if len(doc.Data.Dropped) == 0 {
		doc.Data.Dropped = nil
	}
	if f.nullDev > 0 {
		doc.DevianceExplained = math.Max(0, math.Min(1, (f.nullDev-res.dev)/f.nullDev))
	} else {
		f.warn = append(f.warn, "the response is constant, so there is no deviance to explain")
	}
	k := edf
	if !m.fam.FixedScale() {
		k++
	}
	if f.serialRec != nil {
		// Gaussian log-likelihood of the whitened rows at φ = D̃/n, plus the
		// log-Jacobian of the whitening, −(n − stretches)/2 · log(1 − ρ²).
		rho := f.serialRec.Rho
		phi := sol.rss / n
		res.logLik = -0.5*(n+n*math.Log(2*math.Pi*phi)) - 0.5*(n-float64(f.serialRec.Stretches))*math.Log(1-rho*rho)
		k++ // ρ
		doc.Serial = f.serialRec
	}
	if finite(res.logLik) {
		doc.LogLikelihood = res.logLik
		doc.AIC = -2*res.logLik + 2*k
	} else {
		f.warn = append(f.warn, "the fit is exact (zero deviance), so the log-likelihood and AIC are undefined and reported as 0")
	}
	doc.Criterion = Criterion{Name: "none", Value: 0, Converged: true}
	if len(st.sel.free) > 0 {
		doc.Criterion = Criterion{Name: st.sel.crit.String(), Value: st.eval.v, Iterations: st.selRes.iterations, Converged: st.selRes.converged}
		if !st.selRes.converged {
			f.warn = append(f.warn, "the smoothing-strength search stopped before its gradient vanished; the strengths may be slightly off")
		}
	}
	acc := "cross-products"
	if f.mode == householder {
		acc = "householder"
	}
	if res.lagDen > 0 {
		doc.ResidualLag1 = res.lagNum / res.lagDen
	}
	doc.Convergence = Convergence{Converged: st.conv, Iterations: st.iter, RelativeChange: st.relChg, Passes: f.passes, Accumulation: acc}
	lambda := st.sel.lambdaAt(st.rho)
	for _, t := range d.terms {
		tr := TermResult{Name: t.name, Kind: t.spec.Kind, Columns: t.spec.Columns, Coefficients: [2]int{t.cstart, t.q}, Aliased: t.aliased, Interaction: t.interaction, By: t.byColumn, ByLevel: t.byLevel}
		for c := 0; c < t.q; c++ {
			tr.EDF += edfCoef[t.cstart+c]
		}
		for _, col := range t.spec.Columns {
			if stc := sum.numeric[col]; stc != nil && t.spec.Kind != Factor {
				tr.Range = append(tr.Range, [2]float64{stc.min, stc.max})
			}
		}
		switch t.spec.Kind {
		case Curve, Surface:
			for k := range t.rawPens {
				j := t.penStart + k
				tr.Smoothing = append(tr.Smoothing, lambda[j])
				if a := slices.Index(st.sel.free, j); a >= 0 {
					switch {
					case st.rho[a] >= st.sel.hi[a]-1e-9:
						tr.SmoothingLimit = "upper"
					case st.rho[a] <= st.sel.lo[a]+1e-9 && tr.SmoothingLimit == "":
						tr.SmoothingLimit = "lower"
					}
				}
			}
			tr.SmoothingFixed = len(t.spec.Smoothing) > 0
			tr.Basis = t.record()
			if t.spec.Kind == Curve {
				tr.Grid = curveGrid(t, tr.Basis, beta, v, pc, f.opt.GridPoints)
				tr.Grid.Density = curveDensity(t, sum, tr.Grid)
			} else {
				tr.SurfaceGrid = surfaceGrid(t, tr.Basis, beta, v, pc, f.opt.SurfaceGridPoints)
				markFar(tr.SurfaceGrid, sum.pairs[t.specIndex], tr.Range)
			}
		case Linear:
			if t.q == 1 {
				e, s := beta[t.cstart], se(t.cstart)
				tr.Estimate, tr.SE = &e, &s
			}
		case Factor:
			tr.Levels = map[string]Estimate{}
			if t.spec.Shrink {
				// Every level has a coefficient; z is the identity.
				tr.Shrunk = true
				for c := 0; c < t.q; c++ {
					tr.Levels[t.levels[c]] = Estimate{Estimate: beta[t.cstart+c], SE: se(t.cstart + c)}
				}
				// β ~ N(0, φ/λ): the variance of the level effects.
				variance := scale / lambda[t.penStart]
				tr.LevelVariance = &variance
				tr.Smoothing = []float64{lambda[t.penStart]}
				break
			}
			tr.Reference = t.levels[0]
			for c, raw := range t.active {
				tr.Levels[t.levels[raw+1]] = Estimate{Estimate: beta[t.cstart+c], SE: se(t.cstart + c)}
			}
		}
		doc.Terms = append(doc.Terms, tr)
	}
	if err := f.inferTerms(doc, st, v); err != nil {
		return nil, err
	}
	if err := f.concurvity(doc, st); err != nil {
		return nil, err
	}
	doc.Warnings = f.warn
	return doc, nil
}

func transpose(a []float64, r, c int) []float64 {
	out := make([]float64, r*c)
	for i := 0; i < r; i++ {
		for j := 0; j < c; j++ {
			out[j*r+i] = a[i*c+j]
		}
	}
	return out
}

// record stores a penalised term's basis for prediction.
func (t *termDesign) record() *BasisRecord {
	rec := &BasisRecord{Width: t.width, Z: t.z}
	add := func(c *basis.Curve, b Basis) {
		rec.Margins = append(rec.Margins, MarginRecord{Basis: b, Knots: c.B.Knots, Lo: c.Lo, Hi: c.Hi, Periodic: c.Periodic})
	}
	if t.curve != nil {
		add(t.curve, t.spec.Basis)
	}
	for i, mg := range t.margins {
		if mg != nil {
			b := t.spec.Basis
			if i < len(t.spec.Bases) {
				b = t.spec.Bases[i]
			}
			add(mg, b)
		}
	}
	return rec
}

// curveGrid tabulates a curve and its pointwise standard error
// √(g V gᵀ), g the row of the model matrix at x.
func curveGrid(t *termDesign, rec *BasisRecord, beta, v []float64, pc, points int) *CurveGrid {
	g := &CurveGrid{X: make([]float64, points), Fit: make([]float64, points), SE: make([]float64, points)}
	lo, hi := t.curve.Lo, t.curve.Hi
	if lo > hi {
		lo, hi = hi, lo
	}
	row := make([]float64, t.q)
	for i := range g.X {
		x := lo + (hi-lo)*float64(i)/float64(points-1)
		if i == points-1 {
			x = hi
		}
		g.X[i] = x
		clear(row)
		t.curveRow(x, row)
		g.Fit[i], g.SE[i] = rowFitSE(row, t.cstart, beta, v, pc)
	}
	return g
}

// rowFitSE returns gᵀβ and √(gᵀVg) for a row g over coefficients
// start..start+len(g).
func rowFitSE(g []float64, start int, beta, v []float64, pc int) (float64, float64) {
	fit, vv := 0.0, 0.0
	for a, ga := range g {
		fit += ga * beta[start+a]
		if ga == 0 {
			continue
		}
		for b, gb := range g {
			vv += ga * v[(start+a)*pc+start+b] * gb
		}
	}
	return fit, math.Sqrt(math.Max(0, vv))
}

// surfaceGrid tabulates a surface on a points×points grid.
func surfaceGrid(t *termDesign, rec *BasisRecord, beta, v []float64, pc, points int) *SurfaceGrid {
	m1, m2 := t.margins[0], t.margins[1]
	g := &SurfaceGrid{X1: make([]float64, points), X2: make([]float64, points)}
	for i := 0; i < points; i++ {
		g.X1[i] = m1.Lo + (m1.Hi-m1.Lo)*float64(i)/float64(points-1)
		g.X2[i] = m2.Lo + (m2.Hi-m2.Lo)*float64(i)/float64(points-1)
	}
	row := make([]float64, t.q)
	for _, x1 := range g.X1 {
		fitRow, seRow := make([]float64, points), make([]float64, points)
		for j, x2 := range g.X2 {
			clear(row)
			t.surfaceRow(x1, x2, row)
			fitRow[j], seRow[j] = rowFitSE(row, t.cstart, beta, v, pc)
		}
		g.Fit = append(g.Fit, fitRow)
		g.SE = append(g.SE, seRow)
	}
	return g
}

// farDistance is the distance, in units of each column's data range, beyond
// which a surface grid point counts as far from the data (as a rule of
// thumb, a tenth of the range: common practice (no source)).
const farDistance = 0.1

// markFar flags the grid points with no sampled observation within
// farDistance (Euclidean, each axis scaled by its data range).
func markFar(g *SurfaceGrid, pairs *pairSample, ranges [][2]float64) {
	g.FarDistance = farDistance
	g.Far = make([][]bool, len(g.X1))
	s1 := ranges[0][1] - ranges[0][0]
	s2 := ranges[1][1] - ranges[1][0]
	for i, a := range g.X1 {
		g.Far[i] = make([]bool, len(g.X2))
		for j, b := range g.X2 {
			near := false
			if pairs != nil {
				for k := range pairs.x1 {
					d1 := (pairs.x1[k] - a) / s1
					d2 := (pairs.x2[k] - b) / s2
					if d1*d1+d2*d2 <= farDistance*farDistance {
						near = true
						break
					}
				}
			}
			g.Far[i][j] = !near
		}
	}
}

// densityBins is the number of bins of CurveGrid.Density.
const densityBins = 40

// curveDensity bins the summary's reservoir sample of rows along the
// curve's axis (only the rows of its level for a by-level curve) and
// scales the counts to the rows used.
func curveDensity(t *termDesign, sum *summary, g *CurveGrid) []float64 {
	if sum == nil || sum.sample == nil || len(g.X) < 2 {
		return nil
	}
	xs := sum.sample.table.Numeric[t.spec.Columns[0]]
	if len(xs) == 0 {
		return nil
	}
	var levels []string
	if t.byColumn != "" {
		levels = sum.sample.table.Text[t.byColumn]
	}
	lo, hi := g.X[0], g.X[len(g.X)-1]
	out := make([]float64, densityBins)
	width := (hi - lo) / densityBins
	for i, x := range xs {
		if levels != nil && levels[i] != t.byLevel {
			continue
		}
		if width <= 0 || math.IsNaN(x) {
			continue
		}
		k := int((x - lo) / width)
		if k < 0 || k >= densityBins {
			// A cyclic curve's rows outside its period, or the top edge.
			k = min(max(k, 0), densityBins-1)
		}
		out[k]++
	}
	scale := float64(sum.rowsUsed) / float64(len(xs))
	for k := range out {
		out[k] *= scale
	}
	return out
}
