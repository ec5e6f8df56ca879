package fit

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"maps"
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"strings"
)

// Limits on what the first pass keeps per column, so that memory does not
// grow with the number of rows.
const (
	// quantileSample is the size of the reservoir sample (Vitter 1985,
	// algorithm R) from which quantile knots are placed; below this many
	// rows the quantiles are exact.
	quantileSample = 100_000
	// maxDistinct is the most distinct values a column may have for
	// knots: all.
	maxDistinct = 20_000
)

// columnStats summarises one numeric covariate over the rows a fit uses.
type columnStats struct {
	n          int
	min, max   float64
	mean, m2   float64 // Welford's running mean and sum of squared deviations
	sample     []float64
	distinct   map[float64]struct{}
	tooMany    bool // more than maxDistinct distinct values
	wantUnique bool
	wantSample bool      // keep a reservoir sample for quantile knots
	sorted     []float64 // the sample, sorted (filled on first use)
}

// sortedSample returns the reservoir sample in increasing order.
func (c *columnStats) sortedSample() []float64 {
	if c.sorted == nil {
		c.sorted = slices.Clone(c.sample)
		slices.Sort(c.sorted)
	}
	return c.sorted
}

func (c *columnStats) add(x float64, rng *rand.Rand) {
	c.n++
	if c.n == 1 || x < c.min {
		c.min = x
	}
	if c.n == 1 || x > c.max {
		c.max = x
	}
	d := x - c.mean
	c.mean += d / float64(c.n)
	c.m2 += d * (x - c.mean)
	if c.wantSample {
		if len(c.sample) < quantileSample {
			c.sample = append(c.sample, x)
		} else if j := rng.IntN(c.n); j < quantileSample {
			c.sample[j] = x
		}
	}
	if c.wantUnique && !c.tooMany {
		c.distinct[x] = struct{}{}
		if len(c.distinct) > maxDistinct {
			c.tooMany, c.distinct = true, nil
		}
	}
}

func (c *columnStats) sd() float64 {
	if c.n < 2 {
		return 0
	}
	return math.Sqrt(c.m2 / float64(c.n-1))
}

// summary is what the first pass over the rows learns.
type summary struct {
	rowsRead int
	rowsUsed int
	sumW     float64
	// dropped counts rows dropped because a column was missing (first
	// missing column of the row).
	dropped map[string]int
	numeric map[string]*columnStats
	levels  map[string]map[string]int
	// yMean is the weighted mean response, for the null model.
	yMean float64
	// pairs holds, per surface term index, a reservoir sample of its two
	// covariates (for masking grid cells far from any data).
	pairs map[int]*pairSample
	// rows hashes the used rows (fingerprint and sketch).
	rows *rowHasher
	// sample is a fixed-size reservoir sample of whole used rows, from
	// which large non-gaussian fits take their starting values.
	sample *rowSample
	// window is the time column's span, when there is a time column.
	window *TimeWindow
}

// pairSample is a fixed-size reservoir sample of (x1, x2) pairs
// (Vitter 1985, algorithm R).
type pairSample struct {
	seen int
	x1   []float64
	x2   []float64
}

// maxPairSample bounds a surface's pair sample.
const maxPairSample = 10_000

func (p *pairSample) add(a, b float64, rng *rand.Rand) {
	p.seen++
	if len(p.x1) < maxPairSample {
		p.x1, p.x2 = append(p.x1, a), append(p.x2, b)
		return
	}
	if j := rng.IntN(p.seen); j < maxPairSample {
		p.x1[j], p.x2[j] = a, b
	}
}

// rowFilter decides which rows of a block a fit uses: those with every
// needed numeric cell present and finite and every factor cell non-empty.
type rowFilter struct {
	numeric []string
	text    []string
}

// keep appends to dst the indices of usable rows of b. When dropped is not
// nil it counts each unusable row against its first missing column.
func (f *rowFilter) keep(b *Block, dst []int, dropped map[string]int) ([]int, error) {
	dst = dst[:0]
	cols := make([][]float64, len(f.numeric))
	for i, name := range f.numeric {
		c, ok := b.Numeric[name]
		if !ok || len(c) < b.Rows {
			return nil, fmt.Errorf("column %q: the source did not deliver it", name)
		}
		cols[i] = c
	}
	texts := make([][]string, len(f.text))
	for i, name := range f.text {
		c, ok := b.Text[name]
		if !ok || len(c) < b.Rows {
			return nil, fmt.Errorf("column %q: the source did not deliver it", name)
		}
		texts[i] = c
	}
rows:
	for r := 0; r < b.Rows; r++ {
		for i, c := range cols {
			if v := c[r]; math.IsNaN(v) || math.IsInf(v, 0) {
				if dropped != nil {
					dropped[f.numeric[i]]++
				}
				continue rows
			}
		}
		for i, c := range texts {
			if c[r] == "" {
				if dropped != nil {
					dropped[f.text[i]]++
				}
				continue rows
			}
		}
		dst = append(dst, r)
	}
	return dst, nil
}

// lineOf returns the source line of row r of b, for error messages.
func lineOf(b *Block, r int, base int) int64 {
	if b.Line != nil {
		return b.Line[r]
	}
	return int64(base + r + 1)
}

// RowError is a problem with one input row; it names the line and column.
type RowError struct {
	Line   int64
	Column string
	Err    error
}

func (e *RowError) Error() string {
	return fmt.Sprintf("line %d, column %q: %v", e.Line, e.Column, e.Err)
}

func (e *RowError) Unwrap() error { return e.Err }

// summarise makes the first pass over the rows: it counts and drops rows
// with missing values, checks response, weight and offset values, and
// collects what knots, centring and factor levels need.
func summarise(ctx context.Context, m *modelSetup, src Source) (*summary, error) {
	s := &summary{dropped: map[string]int{}, numeric: map[string]*columnStats{}, levels: map[string]map[string]int{}, pairs: map[int]*pairSample{}}
	for i, t := range m.spec.Terms {
		if t.Kind == Surface {
			s.pairs[i] = &pairSample{}
		}
	}
	pairRNG := rand.New(rand.NewPCG(3, 4))
	s.sample = newRowSample(m.need)
	rowRNG := rand.New(rand.NewPCG(5, 6))
	s.rows = newRowHasher()
	timeCol := m.timeColumn
	if timeCol != "" {
		s.window = &TimeWindow{Column: timeCol, First: math.Inf(1), Last: math.Inf(-1)}
	}
	for _, c := range m.covariates {
		s.numeric[c] = &columnStats{}
	}
	for _, t := range m.spec.Terms {
		if t.Kind != Curve && t.Kind != Surface {
			continue
		}
		for _, c := range t.Columns {
			st := s.numeric[c]
			switch {
			case t.Knots == AllKnots:
				st.wantUnique, st.distinct = true, map[float64]struct{}{}
			case t.Knots == QuantileKnots || t.Knots == "" && (t.Basis == Cubic || t.Basis == ""):
				st.wantSample = true
			}
		}
	}
	for _, c := range m.filter.text {
		s.levels[c] = map[string]int{}
	}
	rng := rand.New(rand.NewPCG(1, 2))
	var keep []int
	sumWY := 0.0
	err := src.Scan(ctx, m.need, func(b *Block) error {
		var err error
		keep, err = m.filter.keep(b, keep, s.dropped)
		if err != nil {
			return err
		}
		y := b.Numeric[m.spec.Response]
		var w []float64
		if m.spec.Weights != "" {
			w = b.Numeric[m.spec.Weights]
		}
		for _, r := range keep {
			wi := 1.0
			if w != nil {
				wi = w[r]
				if wi < 0 {
					return &RowError{Line: lineOf(b, r, s.rowsRead), Column: m.spec.Weights, Err: fmt.Errorf("prior weights cannot be negative (got %g)", wi)}
				}
			}
			if err := m.fam.CheckResponse(y[r], wi); err != nil {
				return &RowError{Line: lineOf(b, r, s.rowsRead), Column: m.spec.Response, Err: err}
			}
			s.sumW += wi
			sumWY += wi * y[r]
		}
		// Column by column (in spec order, so the reservoir samples are
		// reproducible): the inner loops touch one slice each.
		for _, name := range m.covariates {
			st, col := s.numeric[name], b.Numeric[name]
			for _, r := range keep {
				st.add(col[r], rng)
			}
		}
		for i, t := range m.spec.Terms {
			ps := s.pairs[i]
			if ps == nil {
				continue
			}
			c1, c2 := b.Numeric[t.Columns[0]], b.Numeric[t.Columns[1]]
			for _, r := range keep {
				ps.add(c1[r], c2[r], pairRNG)
			}
		}
		for name, lv := range s.levels {
			col := b.Text[name]
			for _, r := range keep {
				lv[col[r]]++
			}
		}
		for _, r := range keep {
			s.rows.add(s.rows.hash(b, r, m.need))
			s.sample.add(b, r, rowRNG)
		}
		if s.window != nil {
			col := b.Numeric[timeCol]
			for _, r := range keep {
				s.window.First = math.Min(s.window.First, col[r])
				s.window.Last = math.Max(s.window.Last, col[r])
			}
		}
		s.rowsRead += b.Rows
		s.rowsUsed += len(keep)
		return nil
	})
	if err != nil {
		return nil, err
	}
	if s.rowsUsed == 0 {
		if s.rowsRead == 0 {
			return nil, errors.New("the data have no rows")
		}
		return nil, fmt.Errorf("none of the %d rows is usable: %s", s.rowsRead, droppedText(s.dropped))
	}
	if s.sumW <= 0 {
		return nil, fmt.Errorf("column %q: every prior weight is zero", m.spec.Weights)
	}
	s.yMean = sumWY / s.sumW
	return s, nil
}

// droppedText describes dropped-row counts, largest first.
func droppedText(d map[string]int) string {
	type kv struct {
		k string
		v int
	}
	var list []kv
	for k, v := range d {
		list = append(list, kv{k, v})
	}
	slices.SortFunc(list, func(a, b kv) int {
		if a.v != b.v {
			return b.v - a.v
		}
		if a.k < b.k {
			return -1
		}
		return 1
	})
	out := ""
	for i, e := range list {
		if i > 0 {
			out += ", "
		}
		out += fmt.Sprintf("%d missing %s", e.v, e.k)
	}
	return out
}

// SortLevels orders factor levels as the engine codes them: numerically
// when every level reads as a number (ties by text), otherwise by bytes. The
// first is the reference level. It sorts names in place and returns it.
func SortLevels(names []string) []string {
	numeric := true
	for _, l := range names {
		if _, err := strconv.ParseFloat(l, 64); err != nil {
			numeric = false
			break
		}
	}
	if !numeric {
		slices.Sort(names)
		return names
	}
	slices.SortFunc(names, func(a, b string) int {
		x, _ := strconv.ParseFloat(a, 64)
		y, _ := strconv.ParseFloat(b, 64)
		if c := cmp.Compare(x, y); c != 0 {
			return c
		}
		return strings.Compare(a, b)
	})
	return names
}

// sortLevels returns the keys of a level count map in SortLevels order.
func sortLevels(levels map[string]int) []string {
	return SortLevels(slices.Collect(maps.Keys(levels)))
}

// startSample is the number of rows a large non-gaussian fit first fits to
// find its starting values.
const startSample = 50_000

// rowSample is a reservoir sample of whole rows (Vitter 1985, algorithm R).
type rowSample struct {
	need  Need
	seen  int
	table *Table
}

func newRowSample(need Need) *rowSample {
	t := &Table{Numeric: map[string][]float64{}, Text: map[string][]string{}}
	for _, c := range need.Numeric {
		t.Numeric[c] = nil
	}
	for _, c := range need.Text {
		t.Text[c] = nil
	}
	return &rowSample{need: need, table: t}
}

func (s *rowSample) add(b *Block, r int, rng *rand.Rand) {
	s.seen++
	if s.seen <= startSample {
		for _, c := range s.need.Numeric {
			s.table.Numeric[c] = append(s.table.Numeric[c], b.Numeric[c][r])
		}
		for _, c := range s.need.Text {
			s.table.Text[c] = append(s.table.Text[c], b.Text[c][r])
		}
		return
	}
	j := rng.IntN(s.seen)
	if j >= startSample {
		return
	}
	for _, c := range s.need.Numeric {
		s.table.Numeric[c][j] = b.Numeric[c][r]
	}
	for _, c := range s.need.Text {
		s.table.Text[c][j] = b.Text[c][r]
	}
}
