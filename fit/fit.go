// Package fit is curvewatch's numerical engine: penalised regression
// splines fitted by penalised iteratively re-weighted least squares, with
// smoothing strengths chosen by REML or GCV. It does no I/O: rows arrive
// through a Source, results leave as a Document.
//
// The fit minimises the penalised deviance D(β) + Σ_j λ_j βᵀS_jβ, where
// η = Xβ + offset, μ = g⁻¹(η), and D is the family's deviance (Wood 2017,
// "Generalized Additive Models: An Introduction with R", 2nd ed., ch. 6).
package fit

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"slices"

	"github.com/curvewatch/curvewatch/fit/family"
)

// Options tune a fit. The zero value gives the defaults.
type Options struct {
	// GridPoints is how many points tabulate each curve (default 200);
	// surfaces use a square grid of SurfaceGridPoints (default 40) a side.
	GridPoints        int
	SurfaceGridPoints int
	// MaxIterations bounds the PIRLS steps (default 100).
	MaxIterations int
	// Tolerance ends PIRLS when the penalised deviance changes by less than
	// this fraction (default 1e-10) and no coefficient moves by more than
	// 1e-8 of its standard error (plus 1e-9 of its size).
	Tolerance float64
	// Workers is how many goroutines share a pass (default: GOMAXPROCS, at
	// most 4).
	Workers int
	// Householder forces Householder accumulation (never cross-products).
	Householder bool
	// Progress, when set, is called after every pass over the rows.
	Progress func(Progress)
	// Logger receives debug records; nil discards them.
	Logger *slog.Logger
	// NoSampleStart turns off the starting values a large non-gaussian fit
	// takes from a fit to a sample of its rows (for checking that they
	// change nothing but the number of passes).
	NoSampleStart bool
	// TimeColumn names a numeric column whose span over the rows is
	// recorded as the fit's data window (default: the spec's serial order
	// column, if any). It is read like any other column.
	TimeColumn string
}

// Progress reports one finished pass over the rows.
type Progress struct {
	Pass  int
	Stage string // "summary", "iteration", "null model" or "final"
	Rows  int
	// Deviance is the deviance at the pass's coefficients (NaN for the
	// summary pass).
	Deviance float64
}

// modelSetup holds the spec resolved against the family and the columns.
type modelSetup struct {
	spec       *Spec
	fam        family.Family
	link       family.Link
	need       Need
	filter     rowFilter
	covariates []string // numeric term columns
	timeColumn string   // recorded as the data window, if set
}

// ErrNotConverged marks a fit whose iterations did not converge; the
// document is still returned, marked Convergence.Converged = false.
var ErrNotConverged = errors.New("the fit did not converge")

// Fit fits the model described by spec to the rows of src.
//
// When PIRLS does not converge, Fit returns the document together with an
// error wrapping ErrNotConverged; callers must not use such a document
// silently.
func Fit(ctx context.Context, spec *Spec, src Source, opt Options) (*Document, error) {
	f, err := newFitter(spec, src, opt)
	if err != nil {
		return nil, err
	}
	return f.run(ctx)
}

type fitter struct {
	m      *modelSetup
	src    Source
	opt    Options
	log    *slog.Logger
	passes int
	mode   passMode
	warn   []string
	// zShift centres the working response (see passState.zShift).
	zShift float64
	// phi is the scale at which passes evaluate the log-likelihood: the
	// latest D/n for gaussian and gamma, 1 otherwise.
	phi float64
	// nullDev is the null deviance, from the first accumulation pass or,
	// with an offset, from its own intercept-only fit.
	nullDev float64
	// serial is the AR(1) error model, if the spec asks for one, and
	// serialRec what its fit found.
	serial    *serialModel
	serialRec *SerialRecord
	// startRaw and startRho, when set, are starting values from a fit to a
	// sample of the rows (raw coefficients, and log λ for the full data).
	startRaw []float64
	startRho []float64
}

func newFitter(spec *Spec, src Source, opt Options) (*fitter, error) {
	if spec == nil {
		return nil, errors.New("fit: nil spec")
	}
	fam, link, err := family.New(string(spec.Family), string(spec.Link))
	if err != nil {
		return nil, fmt.Errorf("model %q: %w", spec.Name, err)
	}
	if err := spec.CheckColumns(src.Columns()); err != nil {
		return nil, fmt.Errorf("model %q: %w", spec.Name, err)
	}
	numeric, text := spec.Columns()
	timeCol := opt.TimeColumn
	if timeCol == "" && spec.Serial != nil {
		timeCol = spec.Serial.Order
	}
	if timeCol != "" && !slices.Contains(numeric, timeCol) {
		if !slices.Contains(src.Columns(), timeCol) {
			return nil, fmt.Errorf("model %q: the time column %q is not in the data", spec.Name, timeCol)
		}
		numeric = append(numeric, timeCol)
	}
	m := &modelSetup{spec: spec, fam: fam, link: link, timeColumn: timeCol,
		need:   Need{Numeric: numeric, Text: text},
		filter: rowFilter{numeric: numeric, text: text}}
	for _, t := range spec.Terms {
		if t.Kind == Curve || t.Kind == Surface || t.Kind == Linear {
			for _, c := range t.Columns {
				if !contains(m.covariates, c) {
					m.covariates = append(m.covariates, c)
				}
			}
		}
	}
	opt.GridPoints = cmpOr(opt.GridPoints, 200)
	opt.SurfaceGridPoints = cmpOr(opt.SurfaceGridPoints, 40)
	opt.MaxIterations = cmpOr(opt.MaxIterations, 100)
	if opt.Tolerance == 0 {
		opt.Tolerance = 1e-10
	}
	opt.Workers = cmpOr(opt.Workers, defaultWorkers())
	log := opt.Logger
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	mode := crossProducts
	if opt.Householder {
		mode = householder
	}
	f := &fitter{m: m, src: src, opt: opt, log: log, mode: mode}
	if s := spec.Serial; s != nil {
		f.serial = &serialModel{order: s.Order, rho: s.Rho, estimate: s.Estimate, gap: s.Gap}
	}
	return f, nil
}

func cmpOr(v, d int) int {
	if v == 0 {
		return d
	}
	return v
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

func (f *fitter) progress(stage string, rows int, dev float64) {
	f.passes++
	if f.opt.Progress != nil {
		f.opt.Progress(Progress{Pass: f.passes, Stage: stage, Rows: rows, Deviance: dev})
	}
}

// pirlsState is the state of the penalised IRLS iteration.
type pirlsState struct {
	d       *design
	z       []float64
	pr      *problem
	sel     *selector
	rho     []float64
	eval    evaluation
	selRes  selectionResult
	beta    []float64 // constrained coefficients
	res     *passResult
	relChg  float64
	iter    int
	conv    bool
	aliased []int // constrained coefficients fixed at zero
}

func (f *fitter) run(ctx context.Context) (*Document, error) {
	m := f.m
	name := m.spec.Name
	sum, err := summarise(ctx, m, f.src)
	if err != nil {
		return nil, fmt.Errorf("model %q: %w", name, err)
	}
	f.progress("summary", sum.rowsRead, math.NaN())
	d, err := buildDesign(m, sum)
	if err != nil {
		return nil, fmt.Errorf("model %q: %w", name, err)
	}
	f.warn = append(f.warn, d.warnings...)
	st, err := f.pirls(ctx, d, sum)
	if err != nil {
		return nil, fmt.Errorf("model %q: %w", name, err)
	}
	doc, err := f.document(ctx, st, sum)
	if err != nil {
		return nil, fmt.Errorf("model %q: %w", name, err)
	}
	if !doc.Convergence.Converged {
		return doc, fmt.Errorf("model %q: %w after %d iterations (relative change %.3g); the document is marked unconverged", name, ErrNotConverged, doc.Convergence.Iterations, doc.Convergence.RelativeChange)
	}
	return doc, nil
}

// pass runs one pass at constrained coefficients beta (nil: starting means).
func (f *fitter) pass(ctx context.Context, st *pirlsState, beta []float64, mode passMode, nullMu func(float64) float64, phi float64) (*passResult, error) {
	ps := &passState{m: f.m, d: st.d, fam: f.m.fam, link: f.m.link, mode: mode, workers: f.opt.Workers, nullMu: nullMu, phi: phi, zShift: f.zShift}
	switch {
	case beta != nil:
		ps.betaRaw = matMul(st.z, beta, st.d.p, st.d.pc, 1)
	case len(f.startRaw) == st.d.p:
		// The model's first pass starts from the sample fit.
		ps.betaRaw = f.startRaw
	}
	return ps.run(ctx, f.src)
}

// pirls runs penalised IRLS with the smoothing strengths re-selected on the
// working model at every step ("performance iteration": Gu 1992; Wood 2004,
// JASA 99). For the gaussian family with identity link one step is exact.
func (f *fitter) pirls(ctx context.Context, d *design, sum *summary) (*pirlsState, error) {
	m := f.m
	st := &pirlsState{d: d}
	nullMu, err := f.nullMean(ctx, sum)
	if err != nil {
		return nil, err
	}
	f.zShift = m.link.Link(sum.yMean)
	f.phi = 1
	var firstNull func(float64) float64
	if m.spec.Offset == "" {
		firstNull = nullMu
	}
	linear := m.fam.Name() == "gaussian" && m.link.Name() == "identity"
	if !linear && f.serial == nil {
		f.startFromSample(ctx, sum)
	}
	res, err := f.pass(ctx, st, nil, f.mode, firstNull, 1)
	if err != nil {
		return nil, err
	}
	if firstNull != nil {
		f.nullDev = res.nullDev
	}
	f.progress("iteration", res.n, math.NaN())
	if err := d.centre(res.colSum); err != nil {
		return nil, err
	}
	if sum.rowsUsed < d.pc {
		return nil, fmt.Errorf("%d usable rows but the model has %d coefficients; use more rows, fewer terms or smaller sizes", sum.rowsUsed, d.pc)
	}
	st.z = d.zFull()
	pr, err := f.problemFrom(ctx, st, res, nil)
	if err != nil {
		return nil, err
	}
	if err := f.setupPenalties(st, pr); err != nil {
		return nil, err
	}
	if err := f.dropAliased(ctx, st, res); err != nil {
		return nil, err
	}
	if f.serial != nil {
		if !linear {
			return nil, errors.New("serial (AR(1)) errors need the gaussian family with the identity link")
		}
		if m.spec.Weights != "" {
			return nil, errors.New("serial (AR(1)) errors cannot be combined with prior weights")
		}
		rec, err := f.fitSerial(ctx, st, f.serial)
		if err != nil {
			return nil, err
		}
		f.serialRec = rec
		st.beta, st.conv, st.iter, st.relChg = st.eval.sol.beta, true, 1, 0
		phi := st.eval.sol.rss / float64(sum.rowsUsed)
		if st.res, err = f.pass(ctx, st, st.beta, evaluateOnly, nil, phi); err != nil {
			return nil, err
		}
		f.progress("final", st.res.n, st.res.dev)
		return st, nil
	}
	// β₀: the null model, a safe point to halve steps back towards.
	prevBeta := make([]float64, st.d.pc)
	prevBeta[0] = m.link.Link(sum.yMean)
	prevPen := math.Inf(1)
	if f.startRaw != nil {
		// The first pass was at the sample fit's β: it is the point to
		// improve on, and its λ (rescaled to n) the search's start.
		prevBeta = matTMul(st.z, f.startRaw, st.d.p, st.d.pc, 1)
		if len(f.startRho) == len(st.rho) {
			for a := range st.rho {
				st.rho[a] = math.Min(st.sel.hi[a], math.Max(st.sel.lo[a], f.startRho[a]))
			}
		}
		if !res.invalid {
			prevPen = res.dev + penaltyAt(st.pr, st.sel.lambdaAt(st.rho), prevBeta)
		}
	}
	prevLambda := st.sel.lambdaAt(st.rho)
	for st.iter = 1; st.iter <= f.opt.MaxIterations; st.iter++ {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		sr, ok := st.sel.minimise(st.rho)
		if !ok {
			return nil, errors.New("the penalised least-squares problem could not be solved (the model matrix is numerically singular); check for collinear or constant covariates")
		}
		st.selRes, st.eval, st.rho = sr, sr.eval, sr.rho
		newBeta := sr.eval.sol.beta
		lambda := st.sel.lambdaAt(st.rho)
		if linear {
			// One solve is the fit; one more pass evaluates it (deviance,
			// residual autocorrelation) at exactly this β.
			st.beta, st.conv, st.relChg = newBeta, true, 0
			phi := sr.eval.sol.rss / float64(sum.rowsUsed)
			if res, err = f.pass(ctx, st, st.beta, evaluateOnly, nil, phi); err != nil {
				return nil, err
			}
			f.progress("final", res.n, res.dev)
			st.res = res
			break
		}
		// Evaluate the new β; halve the step while the penalised deviance
		// (at the λ that produced β) rises or the means are invalid.
		var pen float64
		stalled := false
		for half := 0; ; half++ {
			res, err = f.pass(ctx, st, newBeta, f.mode, nil, f.phi)
			if err != nil {
				return nil, err
			}
			f.progress("iteration", res.n, res.dev)
			pen = res.dev + penaltyAt(st.pr, lambda, newBeta)
			prevAtLambda := math.Inf(1)
			if !math.IsInf(prevPen, 1) {
				prevAtLambda = prevPen - penaltyAt(st.pr, prevLambda, prevBeta) + penaltyAt(st.pr, lambda, prevBeta)
			}
			if !res.invalid && pen <= prevAtLambda*(1+1e-9)+1e-12 {
				prevPen = prevAtLambda
				break
			}
			f.log.Debug("PIRLS step rejected", "iteration", st.iter, "halving", half, "penalised_deviance", pen, "previous", prevAtLambda, "invalid", res.invalid)
			if half >= 30 {
				if !res.invalid && pen-prevAtLambda <= 1e-7*(math.Abs(prevAtLambda)+0.1) {
					// The step cannot improve on the previous β beyond
					// rounding: that β is the minimum.
					stalled = true
					break
				}
				return nil, errors.New("PIRLS could not find a step that lowers the penalised deviance; the model may be unsuited to the data (check the family and link)")
			}
			for i := range newBeta {
				newBeta[i] = (newBeta[i] + prevBeta[i]) / 2
			}
		}
		if stalled {
			// Re-evaluate at the previous β so the document's deviance and
			// working model belong to the β it reports.
			res, err = f.pass(ctx, st, prevBeta, f.mode, nil, f.phi)
			if err != nil {
				return nil, err
			}
			st.beta, st.res, st.conv, st.relChg = prevBeta, res, true, 0
			break
		}
		st.relChg = math.Abs(pen-prevPen) / (math.Abs(pen) + 0.1)
		st.beta, st.res = newBeta, res
		if !m.fam.FixedScale() {
			f.phi = res.dev / float64(res.n)
		}
		if st.relChg < f.opt.Tolerance && coefficientsSettled(prevBeta, newBeta, st.eval.sol.hinv, f.phi) {
			st.conv = true
			break
		}
		prevBeta, prevPen, prevLambda = append([]float64(nil), newBeta...), pen, lambda
		pr, err := f.problemFrom(ctx, st, res, newBeta)
		if err != nil {
			return nil, err
		}
		st.pr.r, st.pr.f, st.pr.r0, st.pr.n, st.pr.shift = pr.r, pr.f, pr.r0, pr.n, pr.shift
	}
	if st.iter > f.opt.MaxIterations {
		st.iter = f.opt.MaxIterations
	}
	// H and the EDF come from the working model at the last accepted β
	// (the pass that evaluated the deviance there also formed it): re-solve
	// it at the final λ for H⁻¹. β itself stays the accepted one, whose
	// deviance the document reports; the re-solve moves it by less than the
	// convergence tolerance.
	if !linear && st.res != nil {
		pr, err := f.problemFrom(ctx, st, st.res, st.beta)
		if err != nil {
			return nil, err
		}
		st.pr.r, st.pr.f, st.pr.r0, st.pr.n, st.pr.shift = pr.r, pr.f, pr.r0, pr.n, pr.shift
		if sol := st.pr.solve(st.sel.lambdaAt(st.rho)); sol.ok {
			sol.beta = st.beta
			st.eval.sol = sol
		}
	}
	return st, nil
}

// coefficientsSettled reports whether no coefficient moved by more than
// 1e-9 of its size plus 1e-8 of its posterior standard deviation
// √(φ H⁻¹)_ii: the deviance is flat near its minimum, so a small change in
// it alone does not pin the coefficients down, while a coefficient that is
// (nearly) zero only jitters in its last bits.
func coefficientsSettled(prev, next, hinv []float64, phi float64) bool {
	p := len(next)
	for i := range next {
		tol := 1e-9*math.Abs(next[i]) + 1e-8*math.Sqrt(math.Abs(hinv[i*p+i]*phi))
		if math.Abs(next[i]-prev[i]) > tol {
			return false
		}
	}
	return true
}

// startFromSample fits the model to the summary pass's sample of rows
// (same knots and levels) and keeps its coefficients and smoothing
// strengths as starting values, so that a large non-gaussian fit needs only
// a few passes over all the rows (the strategy of fitting a subsample first:
// Wood, Goude & Shaw 2015, §3). It does nothing for small data, and a failed
// sample fit only means the usual start.
func (f *fitter) startFromSample(ctx context.Context, sum *summary) {
	if sum.sample == nil || sum.rowsUsed < 4*startSample || f.opt.NoSampleStart {
		return
	}
	d, err := buildDesign(f.m, sum)
	if err != nil {
		return
	}
	sub := &fitter{m: f.m, src: sum.sample.table, opt: f.opt, log: f.log, mode: f.mode}
	sub.opt.Progress = nil
	subSum := *sum
	subSum.sample = nil
	subSum.rowsUsed = sum.sample.table.Rows()
	st, err := sub.pirls(ctx, d, &subSum)
	if err != nil || !st.conv {
		return
	}
	f.startRaw = matMul(st.z, st.beta, d.p, d.pc, 1)
	shift := math.Log(float64(sum.rowsUsed) / float64(subSum.rowsUsed))
	for _, r := range st.rho {
		f.startRho = append(f.startRho, r+shift)
	}
}

// penaltyAt is βᵀS_λβ.
func penaltyAt(pr *problem, lambda, beta []float64) float64 {
	v := 0.0
	for j, pen := range pr.pens {
		v += lambda[j] * quadForm(pen.s, beta[pen.start:pen.start+pen.size])
	}
	return v
}

// problemFrom converts a pass into the working problem, switching to
// Householder accumulation (and repeating the pass) when cross-products are
// too ill-conditioned.
func (f *fitter) problemFrom(ctx context.Context, st *pirlsState, res *passResult, beta []float64) (*problem, error) {
	pr, ok, err := toProblem(res, st.d, st.z)
	if err != nil {
		return nil, err
	}
	if ok {
		return pr, nil
	}
	f.log.Debug("cross-products ill-conditioned; switching to Householder accumulation")
	f.mode = householder
	res2, err := f.pass(ctx, st, beta, householder, nil, 1)
	if err != nil {
		return nil, err
	}
	f.progress("iteration", res2.n, math.NaN())
	*res = *res2
	pr, _, err = toProblem(res2, st.d, st.z)
	return pr, err
}

// setupPenalties builds the constrained penalties Zᵀ S Z and the selector.
func (f *fitter) setupPenalties(st *pirlsState, pr *problem) error {
	d := st.d
	pr.pens, pr.blocks = nil, nil
	for ti, t := range d.terms {
		if !t.penalised() {
			continue
		}
		t.penStart = len(pr.pens)
		bl := penaltyBlock{start: t.cstart, size: t.q}
		for k, raw := range t.rawPens {
			s := matTMul(t.z, matMul(raw, t.z, t.width, t.width, t.q), t.width, t.q, t.q)
			for a := 0; a < t.q; a++ { // symmetrise
				for b := a + 1; b < t.q; b++ {
					v := (s[a*t.q+b] + s[b*t.q+a]) / 2
					s[a*t.q+b], s[b*t.q+a] = v, v
				}
			}
			fixed := 0.0
			if len(t.spec.Smoothing) > 0 {
				fixed = t.spec.Smoothing[min(k, len(t.spec.Smoothing)-1)]
			}
			pen, ok := newPenalty(ti, t.cstart, t.q, s, fixed)
			if !ok {
				return fmt.Errorf("term %q: its penalty matrix could not be decomposed", t.name)
			}
			bl.pens = append(bl.pens, len(pr.pens))
			pr.pens = append(pr.pens, pen)
		}
		pr.blocks = append(pr.blocks, bl)
	}
	st.pr = pr
	crit := remlUnknownScale
	switch {
	case f.m.spec.Selection == GCV && f.m.fam.FixedScale():
		crit = ubreScore
	case f.m.spec.Selection == GCV:
		crit = gcvScore
	case f.m.fam.FixedScale():
		crit = remlKnownScale
	}
	sel := &selector{pr: pr, crit: crit, fixed: make([]float64, len(pr.pens))}
	// Start each free λ where the penalty and the data weigh about the same
	// on the term's coefficients: λ = tr(XᵀWX_block)/tr(S).
	for j, pen := range pr.pens {
		if pen.fixed > 0 {
			sel.fixed[j] = pen.fixed
			continue
		}
		trX, trS := 0.0, 0.0
		for c := 0; c < pen.size; c++ {
			col := pen.start + c
			for r := 0; r <= col; r++ {
				trX += pr.r[r*pr.p+col] * pr.r[r*pr.p+col]
			}
			trS += pen.s[c*pen.size+c]
		}
		lam := 1.0
		if trS > 0 && trX > 0 {
			lam = trX / trS
		}
		sel.fixed[j] = lam
		sel.free = append(sel.free, j)
		rho := math.Log(lam)
		st.rho = append(st.rho, rho)
		// ±15 in log λ around the balanced start: at the upper end a term
		// is indistinguishable from its penalty's null space (its penalised
		// EDF is below 1e-6), and staying inside keeps [R; √λE] far enough
		// from singular that λβᵀSβ is not dominated by rounding.
		sel.lo = append(sel.lo, rho-15)
		sel.hi = append(sel.hi, rho+15)
	}
	st.sel = sel
	return nil
}
