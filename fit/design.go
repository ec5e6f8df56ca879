package fit

import (
	"fmt"
	"math"
	"slices"

	"github.com/curvewatch/curvewatch/fit/basis"
	"gonum.org/v1/gonum/mat"
)

// symFull returns a symmetric matrix as a full row-major slice (gonum keeps
// only the upper triangle of a SymDense).
func symFull(s *mat.SymDense) []float64 {
	n := s.SymmetricDim()
	out := make([]float64, n*n)
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			out[i*n+j] = s.At(i, j)
		}
	}
	return out
}

// termDesign is one term's columns of the model matrix. Columns are first
// built in a raw parametrisation (B-spline coefficients, indicator columns,
// a standardised covariate) where every row has a fixed, small number of
// non-zero entries; linear constraints (natural boundary conditions and the
// sum-to-zero centring) are then absorbed by a null-space basis Z, so the
// coefficients the fit estimates are β with raw coefficients Zβ.
type termDesign struct {
	spec  TermSpec
	name  string
	start int // first raw column
	width int // raw columns
	nnz   int // non-zero entries per row

	curve   *basis.Curve    // curve
	margins [2]*basis.Curve // surface
	center  float64         // linear: x is used as (x − center)/scale
	scale   float64
	levels  []string       // factor: sorted levels; the first is the reference
	index   map[string]int // level → position in levels

	cons    []float64 // raw constraint rows (nCons × width), before centring
	nCons   int
	rawPens [][]float64 // raw penalties (width × width)
	z       []float64   // width × q null-space basis (nil: identity on active)
	active  []int       // unpenalised terms: raw columns kept (others aliased)
	// interaction marks a surface whose margins are centred (each margin's
	// function integrates to zero over its range), so that it holds only
	// the interaction and curves or lines of its columns stay identifiable.
	interaction bool
	// uncentred terms get no sum-to-zero constraint: interaction surfaces
	// (their margins are centred instead) and shrunk factors (their ridge
	// penalty identifies every level).
	uncentred bool
	// byLevel, on a curve expanded from a `by` factor, is the level whose
	// rows the curve applies to (byColumn names the factor).
	byColumn, byLevel string
	// specIndex is the term's position in the spec (by-level curves share
	// their spec term's).
	specIndex int
	aliased   []string // names of raw columns dropped as aliased
	q         int      // constrained coefficients
	cstart    int      // first constrained coefficient
	penStart  int      // first penalty index in the model
}

// design is the whole model matrix: an intercept column then each term.
type design struct {
	terms []*termDesign
	p     int // raw columns, intercept included
	nnz   int // non-zero entries per row, intercept included
	pc    int // constrained coefficients
	// warnings are remarks about the model for the fit document.
	warnings []string
}

// penalised reports whether the term carries penalties.
func (t *termDesign) penalised() bool { return len(t.rawPens) > 0 }

// buildDesign places knots and levels from the first pass's summary.
func buildDesign(m *modelSetup, s *summary) (*design, error) {
	d := &design{p: 1, nnz: 1}
	for i, ts := range m.spec.Terms {
		where := fmt.Sprintf("term %q", ts.Name())
		if ts.Line > 0 {
			where = fmt.Sprintf("term %q (spec line %d)", ts.Name(), ts.Line)
		}
		if ts.Kind == Curve && ts.By != "" {
			// One curve per level of the by factor, each centred over its
			// own rows with its own smoothing strength.
			if !slices.ContainsFunc(m.spec.Terms, func(o TermSpec) bool { return o.Kind == Factor && o.Columns[0] == ts.By }) {
				d.warnings = append(d.warnings, fmt.Sprintf("curves of %s by %s are centred within each level, so the levels' differences in mean are not modelled; add `factor: %s` as a term", ts.Columns[0], ts.By, ts.By))
			}
			lv := s.levels[ts.By]
			if len(lv) == 0 {
				return nil, fmt.Errorf("%s: the by column %q has no levels in the used rows", where, ts.By)
			}
			for _, level := range sortLevels(lv) {
				t := &termDesign{spec: ts, name: ts.Name() + "[" + ts.By + "=" + level + "]", start: d.p, byColumn: ts.By, byLevel: level, specIndex: i}
				if err := curveDesign(t, ts, s); err != nil {
					return nil, fmt.Errorf("%s: %w", where, err)
				}
				if lv[level] < t.width {
					return nil, fmt.Errorf("%s: level %q of %q has %d rows, fewer than the curve's %d coefficients; lower size or merge levels", where, level, ts.By, lv[level], t.width)
				}
				d.p += t.width
				d.nnz += t.nnz
				d.terms = append(d.terms, t)
			}
			continue
		}
		t := &termDesign{spec: ts, name: ts.Name(), start: d.p, specIndex: i}
		switch ts.Kind {
		case Curve:
			if err := curveDesign(t, ts, s); err != nil {
				return nil, fmt.Errorf("%s: %w", where, err)
			}
		case Surface:
			if err := surfaceDesign(t, ts, s, sharesColumn(m.spec.Terms, i)); err != nil {
				return nil, fmt.Errorf("%s: %w", where, err)
			}
		case Linear:
			st := s.numeric[ts.Columns[0]]
			if st.sd() == 0 || st.max == st.min {
				return nil, fmt.Errorf("%s: column %q is constant (%g in every used row), so its slope cannot be estimated; remove the term", where, ts.Columns[0], st.min)
			}
			t.center, t.scale = st.mean, st.sd()
			t.width, t.nnz = 1, 1
		case Factor:
			lv := s.levels[ts.Columns[0]]
			if len(lv) < 2 {
				only := ""
				for k := range lv {
					only = k
				}
				return nil, fmt.Errorf("%s: column %q has a single level (%q) in the used rows, so there is nothing to compare; remove the term", where, ts.Columns[0], only)
			}
			t.levels = sortLevels(lv)
			t.index = make(map[string]int, len(t.levels))
			for j, l := range t.levels {
				t.index[l] = j
			}
			t.width, t.nnz = len(t.levels)-1, 1
			if ts.Shrink {
				// A random intercept per level: every level has a column and
				// the ridge penalty λ Σ β² (an identity matrix) identifies
				// them (the mixed-model view of a penalised fit: Wood 2017,
				// §2.4; β ~ N(0, φ/λ)).
				t.width, t.uncentred = len(t.levels), true
				ident := make([]float64, t.width*t.width)
				for j := 0; j < t.width; j++ {
					ident[j*t.width+j] = 1
				}
				t.rawPens = [][]float64{ident}
			}
		default:
			return nil, fmt.Errorf("%s: unknown kind %q", where, ts.Kind)
		}
		d.p += t.width
		d.nnz += t.nnz
		d.terms = append(d.terms, t)
	}
	return d, nil
}

// sharesColumn reports whether a column of term i also appears in another
// curve or linear term.
func sharesColumn(terms []TermSpec, i int) bool {
	for j, o := range terms {
		if j == i || (o.Kind != Curve && o.Kind != Linear) {
			continue
		}
		for _, c := range terms[i].Columns {
			if slices.Contains(o.Columns, c) {
				return true
			}
		}
	}
	return false
}

// curveDesign builds a one-column curve's basis and raw layout.
func curveDesign(t *termDesign, ts TermSpec, s *summary) error {
	c, err := curveBasis(ts.Basis, ts.Knots, sizeAt(ts.Size, 0), s.numeric[ts.Columns[0]], ts.Period)
	if err != nil {
		return err
	}
	t.curve = c
	t.width, t.nnz = c.Len(), c.B.Order
	if c.Constraints != nil {
		r, _ := c.Constraints.Dims()
		t.cons, t.nCons = c.Constraints.RawMatrix().Data, r
	}
	t.rawPens = [][]float64{symFull(c.Penalty)}
	return nil
}

func sizeAt(size []int, i int) int {
	if i < len(size) {
		return size[i]
	}
	return 0
}

// curveBasis places knots for one covariate and builds its basis.
func curveBasis(kind Basis, rule KnotRule, size int, st *columnStats, period []float64) (*basis.Curve, error) {
	if st.max == st.min {
		return nil, fmt.Errorf("the covariate is constant (%g in every used row), so no curve can be fitted; remove the term", st.min)
	}
	switch kind {
	case PSpline:
		if size == 0 {
			size = 10
		}
		return basis.NewPSpline(st.min, st.max, size)
	case Cubic, "":
		knots, err := placeKnots(rule, size, st)
		if err != nil {
			return nil, err
		}
		return basis.NewNaturalCubic(knots)
	case Cyclic:
		if len(period) != 2 || !(period[1] > period[0]) {
			return nil, fmt.Errorf("a cyclic curve needs period: [start, end] with start < end")
		}
		if size == 0 {
			size = 10
		}
		knots := make([]float64, size+1)
		for i := range knots {
			knots[i] = period[0] + (period[1]-period[0])*float64(i)/float64(size)
		}
		knots[size] = period[1]
		if rule == QuantileKnots {
			// Interior knots at quantiles of the wrapped data.
			wrapped := make([]float64, len(st.sample))
			p := period[1] - period[0]
			for i, x := range st.sample {
				y := math.Mod(x-period[0], p)
				if y < 0 {
					y += p
				}
				wrapped[i] = period[0] + y
			}
			slices.Sort(wrapped)
			q := quantiles(append(append([]float64{period[0]}, wrapped...), period[1]), size+1)
			q[0], q[size] = period[0], period[1]
			if strictlyIncreasing(q) {
				knots = q
			}
		}
		return basis.NewCyclic(knots)
	}
	return nil, fmt.Errorf("unknown basis %q", kind)
}

// placeKnots returns distinct increasing knots for a natural cubic spline.
// quantile: at evenly spaced quantiles of the covariate (exact up to
// quantileSample rows, else from a fixed-seed reservoir sample), falling
// back to quantiles of the distinct values when data quantiles tie; even:
// evenly spaced over the range; all: every distinct value.
func placeKnots(rule KnotRule, size int, st *columnStats) ([]float64, error) {
	if size == 0 && rule != AllKnots {
		size = 10
	}
	switch rule {
	case AllKnots:
		if st.tooMany {
			return nil, fmt.Errorf("knots: all needs at most %d distinct values and the covariate has more; use knots: quantile with a size", maxDistinct)
		}
		knots := make([]float64, 0, len(st.distinct))
		for v := range st.distinct {
			knots = append(knots, v)
		}
		slices.Sort(knots)
		if len(knots) < 3 {
			return nil, fmt.Errorf("the covariate has %d distinct values; a curve needs at least 3", len(knots))
		}
		return knots, nil
	case EvenKnots:
		knots := make([]float64, size)
		for i := range knots {
			knots[i] = st.min + (st.max-st.min)*float64(i)/float64(size-1)
		}
		knots[size-1] = st.max
		return knots, nil
	}
	sorted := st.sortedSample()
	uniq := slices.Compact(append([]float64(nil), sorted...))
	if len(uniq) < size {
		return nil, fmt.Errorf("size %d needs at least %d distinct covariate values and the data have %d; lower size or use knots: all", size, size, len(uniq))
	}
	knots := quantiles(sorted, size)
	knots[0], knots[size-1] = st.min, st.max
	if !strictlyIncreasing(knots) {
		knots = quantiles(uniq, size)
		knots[0], knots[size-1] = st.min, st.max
	}
	if !strictlyIncreasing(knots) {
		return nil, fmt.Errorf("could not place %d distinct knots; lower size", size)
	}
	return knots, nil
}

// quantiles returns k values at probabilities i/(k−1) of sorted data by
// linear interpolation between order statistics (Hyndman & Fan 1996, type 7).
func quantiles(sorted []float64, k int) []float64 {
	out := make([]float64, k)
	n := len(sorted)
	for i := range out {
		h := float64(n-1) * float64(i) / float64(k-1)
		lo := int(math.Floor(h))
		if lo >= n-1 {
			out[i] = sorted[n-1]
			continue
		}
		out[i] = sorted[lo] + (h-float64(lo))*(sorted[lo+1]-sorted[lo])
	}
	return out
}

func strictlyIncreasing(x []float64) bool {
	for i := 1; i < len(x); i++ {
		if !(x[i] > x[i-1]) {
			return false
		}
	}
	return true
}

// surfaceDesign builds a tensor-product surface: products of the two
// margins' bases, one penalty per margin S₁⊗I and I⊗S₂, and the margins'
// constraints as C₁⊗I and I⊗C₂ (Wood 2006, "Low-rank scale-invariant tensor
// product smooths", Biometrics 62).
//
// When interaction is set the margins are also centred, leaving only the
// interaction between the two columns.
func surfaceDesign(t *termDesign, ts TermSpec, s *summary, interaction bool) error {
	for i := 0; i < 2; i++ {
		size := sizeAt(ts.Size, i)
		if size == 0 {
			size = 5
		}
		kind, knots := ts.Basis, ts.Knots
		if i < len(ts.Bases) && ts.Bases[i] != "" {
			kind = ts.Bases[i]
		}
		var period []float64
		if i < len(ts.Periods) {
			period = ts.Periods[i]
		}
		if kind == PSpline && knots != EvenKnots {
			knots = EvenKnots // P-spline margins always use even knots
		}
		c, err := curveBasis(kind, knots, size, s.numeric[ts.Columns[i]], period)
		if err != nil {
			return fmt.Errorf("margin %q: %w", ts.Columns[i], err)
		}
		t.margins[i] = c
	}
	k1, k2 := t.margins[0].Len(), t.margins[1].Len()
	t.width = k1 * k2
	t.nnz = t.margins[0].B.Order * t.margins[1].B.Order
	// Penalties.
	s1 := symFull(t.margins[0].Penalty)
	s2 := symFull(t.margins[1].Penalty)
	p1 := make([]float64, t.width*t.width)
	p2 := make([]float64, t.width*t.width)
	for a := 0; a < k1; a++ {
		for b := 0; b < k1; b++ {
			for c := 0; c < k2; c++ {
				p1[(a*k2+c)*t.width+b*k2+c] = s1[a*k1+b]
			}
		}
	}
	for a := 0; a < k1; a++ {
		for c := 0; c < k2; c++ {
			for e := 0; e < k2; e++ {
				p2[(a*k2+c)*t.width+a*k2+e] = s2[c*k2+e]
			}
		}
	}
	t.rawPens = [][]float64{p1, p2}
	t.interaction, t.uncentred = interaction, interaction
	if interaction {
		// Margin centring c₁ᵀ⊗I and I⊗c₂ᵀ, with c_m the integrals of the
		// margin's basis (the ANOVA decomposition of a tensor product: Gu
		// 2002, "Smoothing Spline ANOVA Models", ch. 2; Wood 2017 §5.6.3).
		c1, c2 := t.margins[0].Integrals(), t.margins[1].Integrals()
		for col := 0; col < k2; col++ {
			row := make([]float64, t.width)
			for a := 0; a < k1; a++ {
				row[a*k2+col] = c1[a]
			}
			t.cons = append(t.cons, row...)
			t.nCons++
		}
		for a := 0; a < k1; a++ {
			row := make([]float64, t.width)
			for col := 0; col < k2; col++ {
				row[a*k2+col] = c2[col]
			}
			t.cons = append(t.cons, row...)
			t.nCons++
		}
	}
	// Constraints C₁⊗I and I⊗C₂.
	if c := t.margins[0].Constraints; c != nil {
		r, _ := c.Dims()
		for i := 0; i < r; i++ {
			for col := 0; col < k2; col++ {
				row := make([]float64, t.width)
				for a := 0; a < k1; a++ {
					row[a*k2+col] = c.At(i, a)
				}
				t.cons = append(t.cons, row...)
				t.nCons++
			}
		}
	}
	if c := t.margins[1].Constraints; c != nil {
		r, _ := c.Dims()
		for i := 0; i < r; i++ {
			for a := 0; a < k1; a++ {
				row := make([]float64, t.width)
				for col := 0; col < k2; col++ {
					row[a*k2+col] = c.At(i, col)
				}
				t.cons = append(t.cons, row...)
				t.nCons++
			}
		}
	}
	return nil
}

// curveRow adds to row (length q) the constrained model-matrix row of a
// curve term at x: B(x)·Z.
func (t *termDesign) curveRow(x float64, row []float64) {
	var buf [4]float64
	first := t.curve.Row(x, buf[:])
	for a := 0; a < 4; a++ {
		for j := 0; j < t.q; j++ {
			row[j] += buf[a] * t.z[(first+a)*t.q+j]
		}
	}
}

// surfaceRow adds to row (length q) the constrained model-matrix row of a
// surface term at (x1, x2): (B₁(x1) ⊗ B₂(x2))·Z.
func (t *termDesign) surfaceRow(x1, x2 float64, row []float64) {
	var b1, b2 [4]float64
	m1, m2 := t.margins[0], t.margins[1]
	k2 := m2.Len()
	f1 := m1.Row(x1, b1[:])
	f2 := m2.Row(x2, b2[:])
	for a := 0; a < 4; a++ {
		for c := 0; c < 4; c++ {
			raw := (f1+a)*k2 + f2 + c
			w := b1[a] * b2[c]
			for j := 0; j < t.q; j++ {
				row[j] += w * t.z[raw*t.q+j]
			}
		}
	}
}

// fill writes the term's non-zero raw entries for the rows keep of b into
// idx and val, at offset off within each row's stride entries.
func (t *termDesign) fill(b *Block, keep []int, stride, off int, idx []int32, val []float64) error {
	var buf, buf2 [4]float64
	switch t.spec.Kind {
	case Curve:
		x := b.Numeric[t.spec.Columns[0]]
		var by []string
		if t.byColumn != "" {
			by = b.Text[t.byColumn]
		}
		for i, r := range keep {
			first := t.curve.Row(x[r], buf[:])
			base := i*stride + off
			other := by != nil && by[r] != t.byLevel
			for k := 0; k < 4; k++ {
				idx[base+k] = int32(t.start + first + k)
				val[base+k] = buf[k]
				if other {
					val[base+k] = 0
				}
			}
		}
	case Surface:
		x1, x2 := b.Numeric[t.spec.Columns[0]], b.Numeric[t.spec.Columns[1]]
		k2 := t.margins[1].Len()
		for i, r := range keep {
			f1 := t.margins[0].Row(x1[r], buf[:])
			f2 := t.margins[1].Row(x2[r], buf2[:])
			base := i*stride + off
			for a := 0; a < 4; a++ {
				for c := 0; c < 4; c++ {
					idx[base+a*4+c] = int32(t.start + (f1+a)*k2 + f2 + c)
					val[base+a*4+c] = buf[a] * buf2[c]
				}
			}
		}
	case Linear:
		x := b.Numeric[t.spec.Columns[0]]
		for i, r := range keep {
			idx[i*stride+off] = int32(t.start)
			val[i*stride+off] = (x[r] - t.center) / t.scale
		}
	case Factor:
		x := b.Text[t.spec.Columns[0]]
		for i, r := range keep {
			j, ok := t.index[x[r]]
			if !ok {
				return &RowError{Line: lineOf(b, r, 0), Column: t.spec.Columns[0],
					Err: fmt.Errorf("level %q was not in the data the model was fitted on (known levels: %s)", x[r], levelList(t.levels))}
			}
			switch {
			case t.spec.Shrink:
				idx[i*stride+off], val[i*stride+off] = int32(t.start+j), 1
			case j == 0:
				idx[i*stride+off], val[i*stride+off] = int32(t.start), 0
			default:
				idx[i*stride+off], val[i*stride+off] = int32(t.start+j-1), 1
			}
		}
	}
	return nil
}

func levelList(levels []string) string {
	const show = 8
	out := ""
	for i, l := range levels {
		if i == show {
			return out + fmt.Sprintf(", … (%d in all)", len(levels))
		}
		if i > 0 {
			out += ", "
		}
		out += fmt.Sprintf("%q", l)
	}
	return out
}

// rows fills the model matrix entries for the kept rows of a block.
func (d *design) rows(b *Block, keep []int, idx []int32, val []float64) error {
	stride := d.nnz
	for i := range keep {
		idx[i*stride], val[i*stride] = 0, 1
	}
	off := 1
	for _, t := range d.terms {
		if err := t.fill(b, keep, stride, off, idx, val); err != nil {
			return err
		}
		off += t.nnz
	}
	return nil
}

// centre adds the sum-to-zero constraint 1ᵀX_t a = 0 (column sums over the
// fitted rows) to each penalised term and computes the null-space bases and
// the constrained layout.
func (d *design) centre(colSum []float64) error {
	for _, t := range d.terms {
		if !t.penalised() {
			t.z = nil
			if t.active == nil {
				for i := 0; i < t.width; i++ {
					t.active = append(t.active, i)
				}
			}
			continue
		}
		cons := append([]float64(nil), t.cons...)
		r := t.nCons
		if !t.uncentred {
			cons = append(cons, colSum[t.start:t.start+t.width]...)
			r++
		}
		z, q := nullSpace(cons, r, t.width)
		if q < 1 {
			return fmt.Errorf("term %q: the basis is too small for its constraints", t.name)
		}
		t.z = z
	}
	d.layout()
	return nil
}

// layout assigns each term its range of constrained coefficients.
func (d *design) layout() {
	d.pc = 1
	for _, t := range d.terms {
		t.cstart = d.pc
		if t.z != nil {
			t.q = len(t.z) / t.width
		} else {
			t.q = len(t.active)
		}
		d.pc += t.q
	}
}

// zFull returns the p×pc matrix mapping constrained to raw coefficients.
func (d *design) zFull() []float64 {
	z := make([]float64, d.p*d.pc)
	z[0] = 1
	for _, t := range d.terms {
		for i := 0; i < t.width; i++ {
			for j := 0; j < t.q; j++ {
				v := 0.0
				if t.z == nil {
					if t.active[j] == i {
						v = 1
					}
				} else {
					v = t.z[i*t.q+j]
				}
				z[(t.start+i)*d.pc+t.cstart+j] = v
			}
		}
	}
	return z
}
