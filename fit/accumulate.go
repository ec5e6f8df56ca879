package fit

import (
	"context"
	"fmt"
	"math"
	"runtime"
	"sync"

	"github.com/curvewatch/curvewatch/fit/family"
)

// passMode says how a pass accumulates the weighted model matrix.
type passMode int

const (
	// crossProducts accumulates XᵀWX, XᵀWz and zᵀWz using the sparsity of
	// each row: fast, and accurate while the equilibrated XᵀWX is well
	// conditioned.
	crossProducts passMode = iota
	// householder updates a (p+1)×(p+1) triangular factor of [√W X, √W z]
	// block by block (Wood, Goude & Shaw 2015, JRSS-C 64(1), §2): slower,
	// but never squares the condition number.
	householder
	// evaluateOnly computes the deviance and fit statistics at β without
	// accumulating a working model.
	evaluateOnly
)

// passResult holds what one pass over the rows produced at the current β.
type passResult struct {
	mode     passMode
	zShift   float64
	n        int
	sumW     float64 // Σ prior weights
	dev      float64 // Σ w d(y, μ)
	pearson  float64 // Σ w (y−μ)²/V(μ)
	logLik   float64 // at φ = 1 for the families with a known scale; see finish
	nullDev  float64 // Σ w d(y, μ₀) for the null mean
	invalid  bool    // a mean left the family's range
	maxEta   float64 // largest |η| (for separation checks)
	boundary int     // rows with μ within 1e-9 of a boundary (binomial)
	// lagNum and lagDen give the lag-one autocorrelation of the Pearson
	// residuals in row order, Σ r_i r_{i−1} / Σ r_i².
	lagNum, lagDen float64

	xtwx   []float64 // p×p, upper triangle (crossProducts)
	xtwz   []float64
	ztwz   float64
	colSum []float64 // unweighted column sums over the rows
	raug   []float64 // (p+1)×(p+1) triangular factor (householder)
}

// passState carries the fixed inputs of a pass.
type passState struct {
	m       *modelSetup
	d       *design
	fam     family.Family
	link    family.Link
	betaRaw []float64 // nil: start from the family's starting means
	nullMu  func(off float64) float64
	mode    passMode
	workers int
	phi     float64 // scale at which the log-likelihood is evaluated
	// zShift is subtracted from the working response so that Σ W z² stays
	// close to the residual sum of squares (no cancellation in r0).
	zShift float64
}

// logitClamp bounds η for the logit link so that μ stays inside (0, 1) in
// floating point; rows reaching it signal separation.
const logitClamp = 30

// run makes one pass over the source.
func (ps *passState) run(ctx context.Context, src Source) (*passResult, error) {
	p := ps.d.p
	res := &passResult{mode: ps.mode, zShift: ps.zShift, colSum: make([]float64, p)}
	workers := max(1, ps.workers)
	parts := make([]*passResult, workers)
	for i := range parts {
		parts[i] = &passResult{colSum: make([]float64, p)}
		if ps.mode == crossProducts {
			parts[i].xtwx = make([]float64, p*p)
			parts[i].xtwz = make([]float64, p)
		}
	}
	var qr *qrAccumulator
	if ps.mode == householder {
		qr = newQRAccumulator(p)
	}
	var keep []int
	stride := ps.d.nnz
	runs := ps.d.runs()
	var idx []int32
	var val []float64
	var eta, wz, ww, resid []float64
	prevResid := math.NaN()
	err := src.Scan(ctx, ps.m.need, func(b *Block) error {
		var err error
		keep, err = ps.m.filter.keep(b, keep, nil)
		if err != nil {
			return err
		}
		k := len(keep)
		if cap(idx) < k*stride {
			idx = make([]int32, k*stride)
			val = make([]float64, k*stride)
			eta, wz, ww, resid = make([]float64, k), make([]float64, k), make([]float64, k), make([]float64, k)
		}
		idx, val = idx[:k*stride], val[:k*stride]
		// Model matrix rows and per-row statistics, split across workers.
		chunk := (k + workers - 1) / workers
		var wg sync.WaitGroup
		errs := make([]error, workers)
		for w := 0; w < workers; w++ {
			lo, hi := w*chunk, min(k, (w+1)*chunk)
			if lo >= hi {
				continue
			}
			wg.Add(1)
			go func(w int, part *passResult, lo, hi int) {
				defer wg.Done()
				if err := ps.d.rows(b, keep[lo:hi], idx[lo*stride:hi*stride], val[lo*stride:hi*stride]); err != nil {
					errs[w] = err
					return
				}
				ps.rowStats(b, keep, lo, hi, idx, val, eta, wz, ww, resid, part)
				if ps.mode == crossProducts {
					accumulateCross(part, runs, p, stride, lo, hi, idx, val, wz, ww)
				}
			}(w, parts[w], lo, hi)
		}
		wg.Wait()
		for _, err := range errs {
			if err != nil {
				return err
			}
		}
		// Lag-one residual products, in row order across workers and blocks.
		for _, r := range resid[:k] {
			if math.IsNaN(r) {
				prevResid = r
				continue
			}
			if !math.IsNaN(prevResid) {
				res.lagNum += prevResid * r
			}
			res.lagDen += r * r
			prevResid = r
		}
		if qr != nil {
			qr.add(stride, k, idx, val, wz, ww)
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	for _, part := range parts {
		res.n += part.n
		res.sumW += part.sumW
		res.dev += part.dev
		res.pearson += part.pearson
		res.logLik += part.logLik
		res.nullDev += part.nullDev
		res.invalid = res.invalid || part.invalid
		res.maxEta = math.Max(res.maxEta, part.maxEta)
		res.boundary += part.boundary
		for i, v := range part.colSum {
			res.colSum[i] += v
		}
		if ps.mode == crossProducts {
			if res.xtwx == nil {
				res.xtwx, res.xtwz = part.xtwx, part.xtwz
			} else {
				for i, v := range part.xtwx {
					res.xtwx[i] += v
				}
				for i, v := range part.xtwz {
					res.xtwz[i] += v
				}
			}
			res.ztwz += part.ztwz
		}
	}
	if qr != nil {
		res.raug = qr.finish()
	}
	return res, nil
}

// rowStats computes η, μ, the deviance contributions and the working
// response z and weight W = w (dμ/dη)²/V(μ) for rows lo..hi of a block
// (McCullagh & Nelder 1989, §2.5). wz holds z and ww holds W.
func (ps *passState) rowStats(b *Block, keep []int, lo, hi int, idx []int32, val []float64, eta, wz, ww, resid []float64, part *passResult) {
	m, fam, link := ps.m, ps.fam, ps.link
	stride := ps.d.nnz
	y := b.Numeric[m.spec.Response]
	var w, off []float64
	if m.spec.Weights != "" {
		w = b.Numeric[m.spec.Weights]
	}
	if m.spec.Offset != "" {
		off = b.Numeric[m.spec.Offset]
	}
	isLogit := link.Name() == "logit"
	for i := lo; i < hi; i++ {
		r := keep[i]
		yi, wi, oi := y[r], 1.0, 0.0
		if w != nil {
			wi = w[r]
		}
		if off != nil {
			oi = off[r]
		}
		base := i * stride
		for k := 0; k < stride; k++ {
			part.colSum[idx[base+k]] += val[base+k]
		}
		var e, mu float64
		if ps.betaRaw == nil {
			mu = fam.Start(yi, wi)
			e = link.Link(mu)
		} else {
			e = oi
			for k := 0; k < stride; k++ {
				e += val[base+k] * ps.betaRaw[idx[base+k]]
			}
			if isLogit {
				e = math.Max(-logitClamp, math.Min(logitClamp, e))
			}
			if !link.Valid(e) {
				part.invalid = true
				ww[i], wz[i], resid[i] = 0, 0, math.NaN()
				continue
			}
			mu = link.Inverse(e)
		}
		if !fam.ValidMean(mu) {
			part.invalid = true
			ww[i], wz[i], resid[i] = 0, 0, math.NaN()
			continue
		}
		eta[i] = e
		part.n++
		part.sumW += wi
		part.dev += wi * fam.UnitDeviance(yi, mu)
		v := fam.Variance(mu)
		part.pearson += wi * (yi - mu) * (yi - mu) / v
		resid[i] = (yi - mu) * math.Sqrt(wi/v)
		part.logLik += fam.LogLik(yi, mu, wi, ps.phi)
		if ps.nullMu != nil {
			part.nullDev += wi * fam.UnitDeviance(yi, ps.nullMu(oi))
		}
		if a := math.Abs(e); a > part.maxEta {
			part.maxEta = a
		}
		if isLogit && (mu < 1e-9 || mu > 1-1e-9) {
			part.boundary++
		}
		d := link.Deriv(e)
		wwi := wi * d * d / v
		if !(wwi > 1e-300) || math.IsInf(wwi, 0) {
			ww[i], wz[i] = 0, 0
			continue
		}
		ww[i] = wwi
		wz[i] = e - oi + (yi-mu)/d - ps.zShift
	}
}

// accumulateCross adds Σ W x xᵀ, Σ W z x and Σ W z² over rows lo..hi to
// part, touching only each row's non-zero entries. A row's entries come in
// runs of consecutive columns (four per curve margin, one per linear or
// factor term), so the upper triangle is updated run by run with short
// contiguous inner loops.
func accumulateCross(part *passResult, runs []run, p, stride, lo, hi int, idx []int32, val []float64, wz, ww []float64) {
	a := part.xtwx
	xz := part.xtwz
	act := make([]run, 0, len(runs))
	for i := lo; i < hi; i++ {
		wi := ww[i]
		if wi == 0 {
			continue
		}
		zi := wz[i]
		base := i * stride
		rv := val[base : base+stride]
		ri := idx[base : base+stride]
		for s, cs := range ri {
			xz[cs] += wi * rv[s] * zi
		}
		// Only runs with a non-zero entry take part (a curve per level of a
		// factor is zero on the other levels' rows).
		act = act[:0]
		for _, r := range runs {
			for _, v := range rv[r.entry : r.entry+r.length] {
				if v != 0 {
					act = append(act, r)
					break
				}
			}
		}
		for ra, runA := range act {
			sa := int(ri[runA.entry])
			va := rv[runA.entry : runA.entry+runA.length]
			for rb := ra; rb < len(act); rb++ {
				runB := act[rb]
				sb := int(ri[runB.entry])
				vb := rv[runB.entry : runB.entry+runB.length]
				for k, x := range va {
					wx := wi * x
					if wx == 0 {
						continue
					}
					row := a[(sa+k)*p+sb : (sa+k)*p+sb+len(vb)]
					from := 0
					if rb == ra {
						from = k
					}
					for l := from; l < len(vb); l++ {
						row[l] += wx * vb[l]
					}
				}
			}
		}
		part.ztwz += wi * zi * zi
	}
}

// run is a stretch of a row's entries whose columns are consecutive.
type run struct{ entry, length int }

// runs lists the runs of a design's rows: the intercept, then each term's
// (one per curve, four per surface: one for each first-margin function).
func (d *design) runs() []run {
	out := []run{{0, 1}}
	e := 1
	for _, t := range d.terms {
		switch {
		case t.spec.Kind == Surface:
			for k := 0; k < 4; k++ {
				out = append(out, run{e + 4*k, 4})
			}
		default:
			out = append(out, run{e, t.nnz})
		}
		e += t.nnz
	}
	return out
}

// qrAccumulator keeps the triangular factor of [√W X, √W z] and folds in
// rows a chunk at a time: QR of [R; new rows] (Wood, Goude & Shaw 2015).
type qrAccumulator struct {
	p, cols int
	chunk   int
	buf     []float64 // (cols + chunk) × cols
	rows    int       // rows currently in buf (the first cols are R)
}

func newQRAccumulator(p int) *qrAccumulator {
	cols := p + 1
	chunk := max(4*cols, 256)
	return &qrAccumulator{p: p, cols: cols, chunk: chunk, buf: make([]float64, (cols+chunk)*cols), rows: cols}
}

func (q *qrAccumulator) add(stride, k int, idx []int32, val []float64, wz, ww []float64) {
	for i := 0; i < k; i++ {
		if ww[i] == 0 {
			continue
		}
		if q.rows == len(q.buf)/q.cols {
			q.fold()
		}
		sw := math.Sqrt(ww[i])
		row := q.buf[q.rows*q.cols : (q.rows+1)*q.cols]
		clear(row)
		for s := 0; s < stride; s++ {
			row[idx[i*stride+s]] += sw * val[i*stride+s]
		}
		row[q.p] = sw * wz[i]
		q.rows++
	}
}

// addDense folds in one dense row x (length p) with response z.
func (q *qrAccumulator) addDense(x []float64, z float64) {
	if q.rows == len(q.buf)/q.cols {
		q.fold()
	}
	row := q.buf[q.rows*q.cols : (q.rows+1)*q.cols]
	copy(row, x)
	row[q.p] = z
	q.rows++
}

// fold triangularises the buffer, leaving R in its first rows.
func (q *qrAccumulator) fold() {
	if q.rows == q.cols {
		return
	}
	r := qrInPlace(q.buf[:q.rows*q.cols], q.rows, q.cols)
	clear(q.buf)
	copy(q.buf, r)
	q.rows = q.cols
}

func (q *qrAccumulator) finish() []float64 {
	q.fold()
	return append([]float64(nil), q.buf[:q.cols*q.cols]...)
}

// defaultWorkers is the number of goroutines a pass splits rows across.
func defaultWorkers() int { return min(runtime.GOMAXPROCS(0), 4) }

// toProblem turns a pass's accumulations into the constrained working
// problem. In crossProducts mode it returns ok=false when the equilibrated
// cross-product matrix is too ill-conditioned to trust (the caller then
// repeats the pass with Householder updates).
func toProblem(res *passResult, d *design, z []float64) (*problem, bool, error) {
	p, pc := d.p, d.pc
	pr := &problem{p: pc, n: float64(res.n), shift: res.zShift}
	switch res.mode {
	case crossProducts:
		full := make([]float64, p*p)
		for i := 0; i < p; i++ {
			for j := i; j < p; j++ {
				full[i*p+j], full[j*p+i] = res.xtwx[i*p+j], res.xtwx[i*p+j]
			}
		}
		zt := matTMul(z, matMul(full, z, p, p, pc), p, pc, pc)
		v := matTMul(z, res.xtwz, p, pc, 1)
		// Equilibrate, check conditioning, then Cholesky via eigen-free
		// route: R from the QR of the symmetric square root is avoided;
		// use a Cholesky factorisation of the scaled matrix.
		scale := make([]float64, pc)
		for i := range scale {
			scale[i] = math.Sqrt(zt[i*pc+i])
			if !(scale[i] > 0) {
				return nil, false, nil
			}
		}
		eq := make([]float64, pc*pc)
		for i := 0; i < pc; i++ {
			for j := 0; j < pc; j++ {
				eq[i*pc+j] = zt[i*pc+j] / (scale[i] * scale[j])
			}
		}
		vals, _, ok := symEigen(eq, pc)
		if !ok || vals[0] <= 0 || vals[len(vals)-1]/vals[0] > maxCrossCondition {
			return nil, false, nil
		}
		r, ok := cholUpper(eq, pc)
		if !ok {
			return nil, false, nil
		}
		// Undo the scaling: R_orig = R_eq · diag(scale).
		for i := 0; i < pc; i++ {
			for j := i; j < pc; j++ {
				r[i*pc+j] *= scale[j]
			}
		}
		f := append([]float64(nil), v...)
		if !upperSolve(r, pc, f, true) {
			return nil, false, nil
		}
		ff := 0.0
		for _, x := range f {
			ff += x * x
		}
		pr.r, pr.f, pr.r0 = r, f, math.Max(0, res.ztwz-ff)
		return pr, true, nil
	case householder:
		// [R_raw Z | qtz] → QR; the last diagonal holds the remainder.
		cols := p + 1
		a := make([]float64, cols*(pc+1))
		rz := matMul(res.raug[:], zAug(z, p, pc), cols, cols, pc+1)
		copy(a, rz)
		raug := qrInPlace(a, cols, pc+1)
		r := make([]float64, pc*pc)
		f := make([]float64, pc)
		for i := 0; i < pc; i++ {
			copy(r[i*pc:i*pc+pc], raug[i*(pc+1):i*(pc+1)+pc])
			f[i] = raug[i*(pc+1)+pc]
		}
		last := raug[pc*(pc+1)+pc]
		pr.r, pr.f, pr.r0 = r, f, last*last
		return pr, true, nil
	}
	return nil, false, fmt.Errorf("toProblem: unexpected mode %d", res.mode)
}

// maxCrossCondition bounds the condition number of the equilibrated
// cross-product matrix accepted without Householder updates: forming XᵀWX
// loses about log10(κ) digits, so 1e6 leaves about ten.
const maxCrossCondition = 1e6

// zAug embeds Z (p×pc) in a (p+1)×(pc+1) matrix that carries the response
// column through unchanged.
func zAug(z []float64, p, pc int) []float64 {
	out := make([]float64, (p+1)*(pc+1))
	for i := 0; i < p; i++ {
		copy(out[i*(pc+1):i*(pc+1)+pc], z[i*pc:i*pc+pc])
	}
	out[p*(pc+1)+pc] = 1
	return out
}

// cholUpper returns the upper Cholesky factor R (RᵀR = a) of the symmetric
// positive definite n×n matrix a.
func cholUpper(a []float64, n int) ([]float64, bool) {
	r := make([]float64, n*n)
	for j := 0; j < n; j++ {
		s := a[j*n+j]
		for k := 0; k < j; k++ {
			s -= r[k*n+j] * r[k*n+j]
		}
		if s <= 0 {
			return nil, false
		}
		d := math.Sqrt(s)
		r[j*n+j] = d
		for i := j + 1; i < n; i++ {
			t := a[j*n+i]
			for k := 0; k < j; k++ {
				t -= r[k*n+j] * r[k*n+i]
			}
			r[j*n+i] = t / d
		}
	}
	return r, true
}
