package fit

import (
	"context"
	"fmt"
	"math"
)

// serialModel describes AR(1) errors on time-ordered rows: within a
// stretch, e_i = ρ e_{i−1} + u_i; a time step larger than gap (when gap > 0)
// starts a new, independent stretch.
type serialModel struct {
	order    string
	rho      float64
	estimate bool
	gap      float64
}

// serialPass accumulates the whitened working model for AR(1) errors at
// correlation rho: the first row of each stretch is kept, every later row
// becomes (x_i − ρx_{i−1})/√(1−ρ²) and likewise for the response, so the
// transformed errors are independent with the errors' marginal variance
// (the transform used for AR(1) residuals in big additive models by Wood,
// Li, Shaddick & Augustin 2017, JASA 112). Rows are read in order,
// sequentially, into a Householder accumulator. It returns the pass and the
// number of stretches.
func (f *fitter) serialPass(ctx context.Context, st *pirlsState, sm *serialModel, rho float64) (*passResult, int, error) {
	d, m := st.d, f.m
	p, stride := d.p, d.nnz
	qr := newQRAccumulator(p)
	res := &passResult{mode: householder, zShift: f.zShift, colSum: make([]float64, p)}
	scale := 1 / math.Sqrt(1-rho*rho)
	prev, cur, row := make([]float64, p), make([]float64, p), make([]float64, p)
	var prevZ, prevT float64
	havePrev := false
	stretches := 0
	var keep []int
	var idx []int32
	var val []float64
	read := 0
	err := f.src.Scan(ctx, m.need, func(b *Block) error {
		var err error
		keep, err = m.filter.keep(b, keep, nil)
		if err != nil {
			return err
		}
		k := len(keep)
		if cap(idx) < k*stride {
			idx, val = make([]int32, k*stride), make([]float64, k*stride)
		}
		idx, val = idx[:k*stride], val[:k*stride]
		if err := d.rows(b, keep, idx, val); err != nil {
			return err
		}
		y, tcol := b.Numeric[m.spec.Response], b.Numeric[sm.order]
		var off []float64
		if m.spec.Offset != "" {
			off = b.Numeric[m.spec.Offset]
		}
		for i, r := range keep {
			t := tcol[r]
			if havePrev && t < prevT {
				return &RowError{Line: lineOf(b, r, read), Column: sm.order,
					Err: fmt.Errorf("rows must come in increasing order of %q for serial errors (%g follows %g); sort the rows by it", sm.order, t, prevT)}
			}
			clear(cur)
			for s := 0; s < stride; s++ {
				cur[idx[i*stride+s]] += val[i*stride+s]
				res.colSum[idx[i*stride+s]] += val[i*stride+s]
			}
			z := y[r] - f.zShift
			if off != nil {
				z -= off[r]
			}
			if !havePrev || (sm.gap > 0 && t-prevT > sm.gap) {
				stretches++
				qr.addDense(cur, z)
			} else {
				for c := range row {
					row[c] = (cur[c] - rho*prev[c]) * scale
				}
				qr.addDense(row, (z-rho*prevZ)*scale)
			}
			prev, cur = cur, prev
			prevZ, prevT, havePrev = z, t, true
			res.n++
		}
		read += b.Rows
		return nil
	})
	if err != nil {
		return nil, 0, err
	}
	res.raug = qr.finish()
	return res, stretches, nil
}

// fitSerial chooses the smoothing strengths (and, when asked, ρ) of a
// gaussian identity-link model with AR(1) errors. ρ is estimated by
// minimising the REML criterion of the whitened model plus the log-Jacobian
// of the transform, (n − stretches)·log(1 − ρ²), over ρ: a coarse grid,
// then golden-section search between the best grid point's neighbours
// (Wood et al. 2017 profile the criterion over ρ in the same way).
func (f *fitter) fitSerial(ctx context.Context, st *pirlsState, sm *serialModel) (*SerialRecord, error) {
	type trial struct {
		v         float64
		sr        selectionResult
		pr        *problem
		rho       float64
		stretches int
	}
	startRho := append([]float64(nil), st.rho...)
	at := func(rho float64) (trial, error) {
		res, stretches, err := f.serialPass(ctx, st, sm, rho)
		if err != nil {
			return trial{}, err
		}
		f.progress("iteration", res.n, math.NaN())
		pr, _, err := toProblem(res, st.d, st.z)
		if err != nil {
			return trial{}, err
		}
		st.pr.r, st.pr.f, st.pr.r0, st.pr.n, st.pr.shift = pr.r, pr.f, pr.r0, pr.n, pr.shift
		sr, ok := st.sel.minimise(startRho)
		if !ok {
			return trial{}, fmt.Errorf("the whitened model at ρ = %.3f could not be solved", rho)
		}
		v := sr.eval.v + float64(res.n-stretches)*math.Log(1-rho*rho)
		return trial{v: v, sr: sr, pr: pr, rho: rho, stretches: stretches}, nil
	}
	var best trial
	var err error
	if !sm.estimate {
		if best, err = at(sm.rho); err != nil {
			return nil, err
		}
	} else {
		grid := []float64{-0.6, -0.3, 0, 0.3, 0.5, 0.7, 0.8, 0.9, 0.95, 0.98}
		trials := make([]trial, len(grid))
		bi := 0
		for i, r := range grid {
			if trials[i], err = at(r); err != nil {
				return nil, err
			}
			if trials[i].v < trials[bi].v {
				bi = i
			}
		}
		best = trials[bi]
		lo, hi := -0.9, 0.995
		if bi > 0 {
			lo = grid[bi-1]
		}
		if bi < len(grid)-1 {
			hi = grid[bi+1]
		}
		// Golden-section search on [lo, hi] to a width of 0.002.
		const g = 0.6180339887498949
		a, b := lo, hi
		c, d := b-g*(b-a), a+g*(b-a)
		tc, err := at(c)
		if err != nil {
			return nil, err
		}
		td, err := at(d)
		if err != nil {
			return nil, err
		}
		for b-a > 0.002 {
			if tc.v < td.v {
				b, d, td = d, c, tc
				c = b - g*(b-a)
				if tc, err = at(c); err != nil {
					return nil, err
				}
			} else {
				a, c, tc = c, d, td
				d = a + g*(b-a)
				if td, err = at(d); err != nil {
					return nil, err
				}
			}
			for _, t := range []trial{tc, td} {
				if t.v < best.v {
					best = t
				}
			}
		}
	}
	// Leave the problem and selection at the chosen ρ.
	st.pr.r, st.pr.f, st.pr.r0, st.pr.n, st.pr.shift = best.pr.r, best.pr.f, best.pr.r0, best.pr.n, best.pr.shift
	st.selRes, st.eval, st.rho = best.sr, best.sr.eval, best.sr.rho
	return &SerialRecord{Order: sm.order, Rho: best.rho, Estimated: sm.estimate, Gap: sm.gap, Stretches: best.stretches}, nil
}

// SerialRecord describes the AR(1) error model a fit used.
type SerialRecord struct {
	// Order is the column giving the rows' time order.
	Order string `json:"order"`
	// Rho is the lag-one correlation of the errors, fixed or estimated.
	Rho       float64 `json:"rho"`
	Estimated bool    `json:"estimated"`
	// Gap is the largest time step within a stretch (0: no limit).
	Gap float64 `json:"gap,omitempty"`
	// Stretches counts the runs of rows treated as one AR(1) series.
	Stretches int `json:"stretches"`
}
