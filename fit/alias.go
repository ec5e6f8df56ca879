package fit

import (
	"context"
	"fmt"
	"math"
	"slices"
)

// aliasTolerance is the relative size below which a column's component
// orthogonal to the columns before it counts as zero.
const aliasTolerance = 1e-8

// dropAliased finds coefficients of linear and factor terms whose columns
// are (numerically) linear combinations of earlier columns and fixes them at
// zero, recording their names. It factors [R; √λ E] by Householder QR with
// columns in the order intercept, penalised terms, then linear and factor
// terms in spec order, so a column is aliased exactly when its diagonal
// entry is negligible next to its norm. A curve confounded with other terms
// is an error: it cannot be dropped piecemeal.
func (f *fitter) dropAliased(ctx context.Context, st *pirlsState, res *passResult) error {
	pr, d := st.pr, st.d
	p := pr.p
	var order []int
	order = append(order, 0)
	for _, t := range d.terms {
		if t.penalised() {
			for c := 0; c < t.q; c++ {
				order = append(order, t.cstart+c)
			}
		}
	}
	for _, t := range d.terms {
		if !t.penalised() {
			for c := 0; c < t.q; c++ {
				order = append(order, t.cstart+c)
			}
		}
	}
	rows := p
	for _, pen := range pr.pens {
		rows += pen.rank
	}
	lambda := st.sel.lambdaAt(st.rho)
	a := make([]float64, rows*p)
	for i := 0; i < p; i++ {
		for k, col := range order {
			a[i*p+k] = pr.r[i*p+col]
		}
	}
	row := p
	pos := make([]int, p) // column → position in order
	for k, col := range order {
		pos[col] = k
	}
	for j, pen := range pr.pens {
		sl := math.Sqrt(lambda[j])
		for r := 0; r < pen.rank; r++ {
			for c := 0; c < pen.size; c++ {
				a[row*p+pos[pen.start+c]] = sl * pen.root[r*pen.size+c]
			}
			row++
		}
	}
	norms := make([]float64, p)
	for k := 0; k < p; k++ {
		s := 0.0
		for i := 0; i < rows; i++ {
			s += a[i*p+k] * a[i*p+k]
		}
		norms[k] = math.Sqrt(s)
	}
	r := qrInPlace(a, rows, p)
	var dropped []int
	for k, col := range order {
		if math.Abs(r[k*p+k]) > aliasTolerance*norms[k] && norms[k] > 0 {
			continue
		}
		dropped = append(dropped, col)
	}
	if len(dropped) == 0 {
		return nil
	}
	for _, col := range dropped {
		t := d.termOf(col)
		if t == nil {
			return fmt.Errorf("the intercept is not identifiable (every row has zero weight?)")
		}
		if t.penalised() {
			return fmt.Errorf("term %q is confounded with other terms (its curve can be written with their columns); remove one of them", t.name)
		}
		raw := t.active[col-t.cstart]
		t.aliased = append(t.aliased, t.columnName(raw))
	}
	for _, t := range d.terms {
		if t.penalised() || len(t.aliased) == 0 {
			continue
		}
		var keep []int
		for i, raw := range t.active {
			if !slices.Contains(dropped, t.cstart+i) {
				keep = append(keep, raw)
			}
		}
		t.active = keep
		f.warn = append(f.warn, fmt.Sprintf("term %q: %s fixed at zero, aliased with earlier terms (collinear columns)", t.name, joinNames(t.aliased)))
	}
	d.layout()
	st.z = d.zFull()
	pr2, err := f.problemFrom(ctx, st, res, nil)
	if err != nil {
		return err
	}
	return f.setupPenalties(st, pr2)
}

// termOf returns the term owning constrained coefficient col (nil for the
// intercept).
func (d *design) termOf(col int) *termDesign {
	for _, t := range d.terms {
		if col >= t.cstart && col < t.cstart+t.q {
			return t
		}
	}
	return nil
}

// columnName names raw column i of an unpenalised term: the column for a
// linear term, the level for a factor.
func (t *termDesign) columnName(i int) string {
	if t.spec.Kind == Factor {
		return t.spec.Columns[0] + "=" + t.levels[i+1]
	}
	return t.spec.Columns[0]
}

func joinNames(names []string) string {
	out := ""
	for i, n := range names {
		if i > 0 {
			out += ", "
		}
		out += n
	}
	return out
}
