package fit

import (
	"strconv"

	"go.yaml.in/yaml/v3"
)

// MaxBasisSize is the most coefficients one curve or surface may have. The
// model matrix gets a column per coefficient and the fit factorises square
// matrices of that order, so fitting time and memory grow fast with it.
const MaxBasisSize = 500

// Default basis sizes, per curve and per surface margin.
const (
	defaultCurveSize  = 10
	defaultMarginSize = 5
)

// MinSize returns the smallest basis size b accepts: 3 knots for a cubic
// regression spline; 4 functions for a cubic B-spline (one interval needs
// four) and for a cyclic spline (so that joining the ends leaves a curve).
// It returns 0 for an unknown basis.
func (b Basis) MinSize() int {
	switch b {
	case Cubic:
		return 3
	case PSpline, Cyclic:
		return 4
	}
	return 0
}

// termOptions holds a term's curve and surface options by key.
type termOptions []yamlEntry

func (o termOptions) get(key string) (yamlEntry, bool) {
	for _, e := range o {
		if e.key == key {
			return e, true
		}
	}
	return yamlEntry{}, false
}

// curveOptions reads the options of a curve and fills in their defaults.
func (p *specParser) curveOptions(t *TermSpec, opts termOptions, path string) {
	t.Basis = Cubic
	basisOK, basisLine := true, t.Line
	if e, ok := opts.get("basis"); ok {
		v, ok := p.choice(e, path, string(Cubic), string(PSpline), string(Cyclic))
		t.Basis, basisOK, basisLine = Basis(v), ok, e.line
	}
	t.Knots = EvenKnots
	if t.Basis == Cubic {
		t.Knots = QuantileKnots
	}
	knotsOK := true
	if e, ok := opts.get("knots"); ok {
		v, ok := p.choice(e, path, string(QuantileKnots), string(EvenKnots), string(AllKnots))
		t.Knots, knotsOK = KnotRule(v), ok
		if ok && basisOK && t.Basis == PSpline && t.Knots != EvenKnots {
			p.add(e.line, path, "knots %s does not suit a pspline curve: P-splines use evenly spaced knots (their difference penalty assumes equal spacing); use knots: even, or basis: cubic", t.Knots)
		}
	}
	switch e, ok := opts.get("size"); {
	case ok && knotsOK && t.Knots == AllKnots:
		p.add(e.line, path, "size conflicts with knots: all, which puts one knot at each distinct value so that the data fix the size: remove size, or use knots: quantile or even")
	case ok:
		if v, ok := p.count(e.val, e.line, path, "size"); ok && basisOK {
			if p.checkSize(v, e, path, t.Basis, "curve") {
				t.Size = []int{v}
			}
		}
	case t.Knots == AllKnots:
		t.Size = []int{0}
	default:
		t.Size = []int{defaultCurveSize}
	}
	if e, ok := opts.get("period"); ok {
		if basisOK && t.Basis != Cyclic {
			p.add(e.line, path, "period applies only to cyclic curves: add basis: cyclic, or remove period")
		} else {
			t.Period = p.period(e, path)
		}
	} else if t.Basis == Cyclic {
		p.add(basisLine, path, "a cyclic curve needs period: [start, end], the range whose ends join, e.g. period: [0, 24] for hour of day")
	}
	if e, ok := opts.get("smoothing"); ok {
		t.Smoothing = p.smoothing(e, path, 1)
	}
	if e, ok := opts.get("by"); ok {
		t.By, _ = p.word(e, path, "a factor column whose levels each get their own curve, e.g. by: site")
		if p.byLine == nil {
			p.byLine = map[string]int{}
		}
		p.byLine[path] = e.line
	}
}

// checkSize checks one basis dimension v, read from e, against the limits of
// basis b; what says what the basis belongs to ("curve").
func (p *specParser) checkSize(v int, e yamlEntry, path string, b Basis, what string) bool {
	raw := derefNode(e.val).Value
	if m := b.MinSize(); v < m {
		p.add(e.line, path, "%s %s is too small for a %s %s: use at least %d", e.key, raw, b, what, m)
		return false
	}
	if v > MaxBasisSize {
		p.add(e.line, path, "%s %s is too large: use at most %d (the model matrix gets a column per coefficient, so fitting time and memory grow with size)", e.key, raw, MaxBasisSize)
		return false
	}
	return true
}

// period reads a cyclic curve's period: two finite numbers, increasing.
func (p *specParser) period(e yamlEntry, path string) []float64 {
	return p.periodPair(e.val, e.line, path, e.key)
}

// periodPair reads n, the value of key, as a period [start, end]: two
// finite numbers, increasing.
func (p *specParser) periodPair(n *yaml.Node, line int, path, key string) []float64 {
	n = derefNode(n)
	if n.Kind != yaml.SequenceNode || len(n.Content) != 2 {
		p.add(line, path, "%s must be two numbers [start, end], e.g. [0, 24], not %s", key, describeNode(n))
		return nil
	}
	lo, ok1 := p.number(n.Content[0], line, path, key+"[0]")
	hi, ok2 := p.number(n.Content[1], line, path, key+"[1]")
	if !ok1 || !ok2 {
		return nil
	}
	if lo >= hi {
		p.add(line, path, "%s [%s, %s] must increase: give [start, end] with start < end, e.g. [0, 24]", key, derefNode(n.Content[0]).Value, derefNode(n.Content[1]).Value)
		return nil
	}
	return []float64{lo, hi}
}

// smoothing reads fixed smoothing strengths: a number, or a list of 1 to
// most numbers, each positive and finite.
func (p *specParser) smoothing(e yamlEntry, path string, most int) []float64 {
	n := derefNode(e.val)
	items := []*yaml.Node{n}
	if n.Kind == yaml.SequenceNode {
		items = n.Content
	}
	switch {
	case len(items) == 0:
		p.add(e.line, path, "smoothing is an empty list: give a positive number, or remove smoothing to have it chosen")
		return nil
	case len(items) > most && most == 1:
		p.add(e.line, path, "smoothing has %d values but a curve has one penalty: give one number", len(items))
		return nil
	case len(items) > most:
		p.add(e.line, path, "smoothing has %d values but a surface has %d penalties, one per margin: give one number for both or a list of %d", len(items), most, most)
		return nil
	}
	out := make([]float64, 0, len(items))
	for j, item := range items {
		key := "smoothing"
		if n.Kind == yaml.SequenceNode {
			key = "smoothing[" + strconv.Itoa(j) + "]"
		}
		v, ok := p.number(item, e.line, path, key)
		if !ok {
			return nil
		}
		if v <= 0 {
			p.add(e.line, path, "%s %s must be positive: it is a penalty strength λ > 0; remove smoothing to have it chosen", key, derefNode(item).Value)
			return nil
		}
		out = append(out, v)
	}
	return out
}
