package fit

import (
	"slices"
	"strconv"
	"strings"

	"go.yaml.in/yaml/v3"
)

// surfaceBasisNames are the bases a surface margin may have.
var surfaceBasisNames = []string{string(Cubic), string(PSpline), string(Cyclic)}

// surfaceOptions reads the options of a surface and fills in their
// defaults. Basis, size and period may be given per margin; knots and a
// single smoothing number apply to both.
func (p *specParser) surfaceOptions(t *TermSpec, opts termOptions, path string) {
	bases, basisOK, basisLine := []Basis{PSpline, PSpline}, true, t.Line
	if e, ok := opts.get("basis"); ok {
		bases, basisOK = p.surfaceBases(e, path)
		basisLine = e.line
	}
	if basisOK {
		t.Bases = bases
		if bases[0] == bases[1] {
			t.Basis = bases[0]
		}
	}
	pspline := basisOK && slices.Contains(bases, PSpline)
	t.Knots = EvenKnots
	if basisOK && bases[0] == Cubic && bases[1] == Cubic {
		t.Knots = QuantileKnots
	}
	if e, ok := opts.get("knots"); ok {
		v, ok := p.choice(e, path, string(QuantileKnots), string(EvenKnots), string(AllKnots))
		t.Knots = KnotRule(v)
		switch {
		case ok && t.Knots == AllKnots:
			p.add(e.line, path, "knots all is for curves only: a knot at every distinct value of both columns would give a surface far too many coefficients; use knots: even or quantile")
		case ok && pspline && t.Knots != EvenKnots && t.Basis == PSpline:
			p.add(e.line, path, "knots %s does not suit a pspline surface: P-splines use evenly spaced knots (their difference penalty assumes equal spacing); use knots: even, or basis: cubic", t.Knots)
		case ok && pspline && t.Knots != EvenKnots:
			p.add(e.line, path, "knots %s does not suit the pspline margin of this surface: knots applies to both margins, and P-splines use evenly spaced knots (their difference penalty assumes equal spacing); use knots: even, or make that margin cubic", t.Knots)
		}
	}
	t.Size = []int{defaultMarginSize, defaultMarginSize}
	if e, ok := opts.get("size"); ok {
		t.Size = p.surfaceSize(e, path, bases, basisOK)
	}
	p.surfacePeriods(t, opts, path, bases, basisOK, basisLine)
	if e, ok := opts.get("smoothing"); ok {
		t.Smoothing = p.smoothing(e, path, 2)
		if len(t.Smoothing) == 1 {
			t.Smoothing = append(t.Smoothing, t.Smoothing[0])
		}
	}
}

// surfaceBases reads a surface's basis: one name for both margins, or a
// list of two, one per margin.
func (p *specParser) surfaceBases(e yamlEntry, path string) ([]Basis, bool) {
	n := derefNode(e.val)
	switch {
	case n.Kind == yaml.MappingNode || n.Kind == yaml.SequenceNode && len(n.Content) != 2:
		p.add(e.line, path, "basis must be one name for both margins or a list of two, one per margin, e.g. [cyclic, pspline], not %s", describeNode(n))
		return nil, false
	case n.Kind != yaml.SequenceNode:
		v, ok := p.choice(e, path, surfaceBasisNames...)
		return []Basis{Basis(v), Basis(v)}, ok
	}
	out, ok := make([]Basis, 2), true
	for j, item := range n.Content {
		v, good := p.choice(yamlEntry{key: "basis[" + strconv.Itoa(j) + "]", line: e.line, val: item}, path, surfaceBasisNames...)
		out[j], ok = Basis(v), ok && good
	}
	return out, ok
}

// surfaceSize reads a surface's size: one whole number for both margins, or
// a list of two. Each margin's size is checked against its basis when the
// bases are known.
func (p *specParser) surfaceSize(e yamlEntry, path string, bases []Basis, basesOK bool) []int {
	n := derefNode(e.val)
	var items []*yaml.Node
	switch {
	case n.Kind == yaml.ScalarNode && !isNullNode(n):
		items = []*yaml.Node{n, n}
	case n.Kind == yaml.SequenceNode && len(n.Content) == 2:
		items = n.Content
	default:
		p.add(e.line, path, "size must be a whole number or a list of two, one per margin, e.g. [5, 5], not %s", describeNode(n))
		return nil
	}
	size := make([]int, 0, 2)
	for j, item := range items {
		key := "size"
		if n.Kind == yaml.SequenceNode {
			key = "size[" + strconv.Itoa(j) + "]"
		}
		v, ok := p.count(item, e.line, path, key)
		if !ok || (basesOK && !p.checkSize(v, yamlEntry{key: key, line: e.line, val: item}, path, bases[j], "surface margin")) {
			return nil
		}
		size = append(size, v)
	}
	if c := size[0] * size[1]; c > MaxBasisSize {
		p.add(e.line, path, "size [%d, %d] gives %d coefficients, more than %d: the model matrix gets a column per coefficient, so fitting time and memory grow with it; use smaller margins, e.g. [20, 20]", size[0], size[1], c, MaxBasisSize)
		return nil
	}
	return size
}

// surfacePeriods reads a surface's period: a list of two entries, one per
// margin, [start, end] for a cyclic margin and null for the other. It is
// required when a margin is cyclic and refused otherwise.
func (p *specParser) surfacePeriods(t *TermSpec, opts termOptions, path string, bases []Basis, basesOK bool, basisLine int) {
	e, given := opts.get("period")
	cyclic := basesOK && slices.Contains(bases, Cyclic)
	switch {
	case !given && cyclic:
		p.add(basisLine, path, "a surface with a cyclic margin needs period, one entry per margin: [start, end] for a cyclic margin, the range whose ends join, and null for the other, e.g. period: %s", periodExample(bases))
		return
	case !given || !basesOK:
		return
	case !cyclic:
		p.add(e.line, path, "period applies only to cyclic margins, and neither margin of this surface is cyclic: remove period, or make a margin cyclic, e.g. basis: [cyclic, pspline] with period: [[0, 24], null]")
		return
	}
	n := derefNode(e.val)
	if n.Kind != yaml.SequenceNode || len(n.Content) != 2 {
		p.add(e.line, path, "period on a surface must be a list of two entries, one per margin ([start, end] for a cyclic margin, null for the other), e.g. %s, not %s", periodExample(bases), describeNode(n))
		return
	}
	if a, b := derefNode(n.Content[0]), derefNode(n.Content[1]); a.Kind == yaml.ScalarNode && b.Kind == yaml.ScalarNode && !isNullNode(a) && !isNullNode(b) {
		p.add(e.line, path, "period [%s, %s] is the period of one margin: on a surface give one entry per margin, [start, end] for a cyclic margin and null for the other, e.g. %s", clipText(a.Value), clipText(b.Value), periodExample(bases))
		return
	}
	out, ok := make([][]float64, 2), true
	for j, item := range n.Content {
		key := "period[" + strconv.Itoa(j) + "]"
		switch {
		case bases[j] != Cyclic && !isNullNode(item):
			p.add(e.line, path, "%s is given but margin %s is %s, not cyclic: write null for it, or make that margin cyclic", key, marginName(t, j), bases[j])
			ok = false
		case bases[j] == Cyclic && isNullNode(item):
			p.add(e.line, path, "%s is empty but margin %s is cyclic: give its [start, end], the range whose ends join, e.g. [0, 24] for hour of day", key, marginName(t, j))
			ok = false
		case bases[j] == Cyclic:
			out[j] = p.periodPair(item, e.line, path, key)
			ok = ok && out[j] != nil
		}
	}
	if ok {
		t.Periods = out
	}
}

// marginName names margin j of surface t for an error message.
func marginName(t *TermSpec, j int) string {
	if len(t.Columns) == 2 {
		return strconv.Itoa(j) + " (" + t.Columns[j] + ")"
	}
	return strconv.Itoa(j)
}

// periodExample writes an example surface period for the given bases:
// [0, 24] for a cyclic margin and null for the other.
func periodExample(bases []Basis) string {
	parts := make([]string, len(bases))
	for j, b := range bases {
		parts[j] = "null"
		if b == Cyclic {
			parts[j] = "[0, 24]"
		}
	}
	return "[" + strings.Join(parts, ", ") + "]"
}
