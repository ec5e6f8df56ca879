package fit

import (
	"bytes"
	"cmp"
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
	"strconv"
	"strings"
	"unicode"
	"unicode/utf8"

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

// ParseSpec reads a model spec written in YAML (see DESIGN.md, "Model spec")
// and checks it. It reports every problem at once, as a *SpecError whose
// problems each name a line, the key at fault and what to do.
//
// Top-level keys: name, response and terms are required; family, link,
// weights, offset, selection and watch are optional. Each term is a mapping
// with exactly one of curve: COLUMN, linear: COLUMN, factor: COLUMN or
// surface: [COLUMN, COLUMN]; curves also take basis, size, knots, period and
// smoothing, surfaces basis, size, knots and smoothing.
//
// Defaults filled in:
//   - family gaussian; link identity for gaussian, log for poisson and gamma,
//     logit for binomial. Allowed links: gaussian identity or log; poisson log
//     or identity; binomial logit; gamma log, inverse or identity.
//   - selection reml (or gcv).
//   - curve: basis cubic; size 10 (0 with knots: all, meaning one knot per
//     distinct value, resolved by the engine); knots quantile for cubic,
//     even for pspline and cyclic (pspline allows only even).
//   - surface: basis pspline (or cubic; each margin has the same basis);
//     size [5, 5] (one number applies to both margins); knots even for
//     pspline, quantile for cubic. Smoothing, when given as one number,
//     applies to both margins.
//
// The result holds one Size entry per column of a curve or surface and, when
// smoothing is given, one Smoothing entry per penalty. No term repeats
// another; no term uses the response, weights or offset column; a column is
// never both a curve and a linear term, nor a factor and any other term. A
// curve or linear term may share a column with a surface. The watch section
// is checked (against baseline|previous, practical_shift > 0, 0 < level < 1,
// deviance_increase > 0, confirm_runs ≥ 1) and kept in Spec.Watch as string,
// float64 and int values.
//
// Terms are counted from 0 in error paths ("terms[2]" is the third term).
func ParseSpec(data []byte) (*Spec, error) {
	p := &specParser{}
	root := p.document(data)
	var s *Spec
	if root != nil {
		s = p.spec(root)
	}
	if len(p.problems) > 0 {
		slices.SortStableFunc(p.problems, func(a, b SpecProblem) int { return a.Line - b.Line })
		return nil, &SpecError{Problems: p.problems}
	}
	return s, nil
}

// specParser collects problems while it reads a spec.
type specParser struct {
	problems []SpecProblem
}

func (p *specParser) add(line int, path, format string, args ...any) {
	p.problems = append(p.problems, SpecProblem{Line: line, Path: path, Message: fmt.Sprintf(format, args...)})
}

// document decodes data as a single YAML document and returns its top node,
// or nil after recording why it cannot.
func (p *specParser) document(data []byte) *yaml.Node {
	dec := yaml.NewDecoder(bytes.NewReader(data))
	var doc yaml.Node
	if err := dec.Decode(&doc); err != nil {
		if errors.Is(err, io.EOF) {
			p.add(1, "", "the spec is empty: it needs at least name, response and terms")
		} else {
			p.syntax(err, data)
		}
		return nil
	}
	for {
		var extra yaml.Node
		err := dec.Decode(&extra)
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			p.syntax(err, data)
			return nil
		}
		if len(extra.Content) == 1 && isNullNode(extra.Content[0]) {
			continue // an empty document after a trailing "---"
		}
		p.add(extra.Line, "", "a second YAML document starts here: a spec file holds one model; put each model in its own file")
		break
	}
	if len(doc.Content) == 0 {
		p.add(1, "", "the spec is empty: it needs at least name, response and terms")
		return nil
	}
	return doc.Content[0]
}

// syntax records a YAML syntax error. The YAML reader gives the line where
// the construct it was reading began, so the mistake is there or after it.
func (p *specParser) syntax(err error, data []byte) {
	msg := strings.TrimPrefix(err.Error(), "yaml: ")
	if rest, ok := strings.CutPrefix(msg, "line "); ok {
		if num, after, ok := strings.Cut(rest, ": "); ok {
			if n, err := strconv.Atoi(num); err == nil {
				p.add(n, "", "not valid YAML: %s (the mistake is on this line or after it)", after)
				return
			}
		}
	}
	if line := badCharLine(data); line > 0 {
		p.add(line, "", "not valid YAML: %s (this line holds a control character or bytes that are not UTF-8)", msg)
		return
	}
	if strings.Contains(msg, "end of stream") {
		msg += ": a quote or bracket is not closed"
	}
	p.add(0, "", "not valid YAML: %s", msg)
}

// badCharLine returns the line of the first character YAML does not allow
// (a control character other than tab and line breaks, or invalid UTF-8),
// or 0 if there is none.
func badCharLine(data []byte) int {
	line := 1
	for i := 0; i < len(data); {
		r, size := utf8.DecodeRune(data[i:])
		switch {
		case r == '\n':
			line++
		case r == '\t' || r == '\r' || r == 0x85:
		case r == utf8.RuneError && size == 1, r < 0x20, r >= 0x7f && r < 0xa0, r == 0xfffe, r == 0xffff:
			return line
		}
		i += size
	}
	return 0
}

// spec reads the top-level mapping.
func (p *specParser) spec(root *yaml.Node) *Spec {
	root = derefNode(root)
	if root.Kind != yaml.MappingNode {
		p.add(root.Line, "", "the spec must be a mapping of keys (name, response, terms, …), not %s", describeNode(root))
		return nil
	}
	s := &Spec{Lines: map[string]int{}}
	var family, link, terms, watch *yamlEntry
	for _, e := range p.entries(root, "") {
		s.Lines[e.key] = e.line
		switch e.key {
		case "name":
			s.Name, _ = p.word(e, "", "a name such as sonde-07-oxygen")
			if strings.ContainsFunc(s.Name, unicode.IsControl) {
				p.add(e.line, "", "name %q holds a control character: use letters, digits and punctuation", s.Name)
			}
		case "response":
			s.Response, _ = p.word(e, "", "the column the model explains")
		case "weights":
			s.Weights, _ = p.word(e, "", "a column of prior weights")
		case "offset":
			s.Offset, _ = p.word(e, "", "a column added on the link scale")
		case "selection":
			v, _ := p.choice(e, "", string(REML), string(GCV))
			s.Selection = Selection(v)
		case "family":
			family = &e
		case "link":
			link = &e
		case "terms":
			terms = &e
		case "watch":
			watch = &e
		default:
			p.unknownKey(e, "", "known keys", "name", "response", "family", "link", "weights", "offset", "selection", "terms", "watch")
		}
	}
	for _, key := range []string{"name", "response", "terms"} {
		if _, ok := s.Lines[key]; !ok {
			p.add(root.Line, "", "missing key %q: every spec needs name, response and terms", key)
		}
	}
	p.familyLink(s, family, link)
	s.Selection = cmp.Or(s.Selection, REML)
	p.roles(s)
	if terms != nil {
		s.Terms = p.terms(s, *terms)
	}
	if watch != nil {
		s.Watch = p.watch(*watch)
	}
	return s
}

// familyLink reads family and link and applies their defaults.
func (p *specParser) familyLink(s *Spec, family, link *yamlEntry) {
	s.Family = Gaussian
	familyOK := true
	if family != nil {
		v, ok := p.choice(*family, "", string(Gaussian), string(Poisson), string(Binomial), string(Gamma))
		s.Family, familyOK = Family(v), ok
	}
	allowed := allowedLinks(s.Family)
	if link == nil {
		if familyOK {
			s.Link = allowed[0]
		}
		return
	}
	v, ok := p.choice(*link, "", string(Identity), string(Log), string(Logit), string(Inverse))
	s.Link = Link(v)
	if ok && familyOK && !slices.Contains(allowed, s.Link) {
		p.add(link.line, "", "link %q does not go with family %s: use %s", s.Link, s.Family, joinLinks(allowed))
	}
}

// allowedLinks returns the links allowed for family f, its default first.
func allowedLinks(f Family) []Link {
	switch f {
	case Gaussian:
		return []Link{Identity, Log}
	case Poisson:
		return []Link{Log, Identity}
	case Binomial:
		return []Link{Logit}
	case Gamma:
		return []Link{Log, Inverse, Identity}
	}
	return nil
}

func joinLinks(links []Link) string {
	if len(links) == 1 {
		return string(links[0])
	}
	words := make([]string, len(links))
	for i, l := range links {
		words[i] = string(l)
	}
	return "one of " + strings.Join(words, ", ")
}

// roles checks that response, weights and offset are three different columns.
func (p *specParser) roles(s *Spec) {
	if s.Weights != "" && s.Weights == s.Response {
		p.add(s.Lines["weights"], "", "weights %q is the response column: prior weights must be a column of their own", s.Weights)
	}
	if s.Offset != "" && s.Offset == s.Response {
		p.add(s.Lines["offset"], "", "offset %q is the response column: an offset must be a column of its own", s.Offset)
	}
	if s.Offset != "" && s.Offset == s.Weights {
		p.add(s.Lines["offset"], "", "offset %q is also the weights column: use a separate column for each", s.Offset)
	}
}

// terms reads the terms list and checks the terms against each other.
func (p *specParser) terms(s *Spec, e yamlEntry) []TermSpec {
	n := derefNode(e.val)
	if isNullNode(n) {
		p.add(e.line, "", "terms has no value: list at least one term, e.g. terms: [{curve: water_temp}]")
		return nil
	}
	if n.Kind != yaml.SequenceNode {
		p.add(e.line, "", "terms must be a list of terms, not %s", describeNode(n))
		return nil
	}
	if len(n.Content) == 0 {
		p.add(e.line, "", "terms is empty: list at least one term, e.g. terms: [{curve: water_temp}]")
		return nil
	}
	var out []TermSpec
	var good []int               // indexes of the terms whose kind and columns are known
	read := map[*yaml.Node]int{} // term nodes read, so an alias is not read twice
	for i, item := range n.Content {
		if j, again := read[derefNode(item)]; again {
			p.add(item.Line, termPath(i), "duplicate of terms[%d] (an alias of the same term): remove one", j)
			out = append(out, TermSpec{Line: item.Line})
			continue
		}
		read[derefNode(item)] = i
		t := p.term(item, i)
		if t.Kind != "" && len(t.Columns) > 0 {
			good = append(good, i)
		}
		out = append(out, t)
	}
	p.overlaps(s, out, good)
	return out
}

// overlaps checks that no column is used twice: in two terms, or in a term
// and as the response, weights or offset. Only the good terms, those whose
// kind and columns could be read, are checked.
func (p *specParser) overlaps(s *Spec, terms []TermSpec, good []int) {
	same := map[string]int{}               // term identity → first term
	users := map[string]map[TermKind]int{} // column → first term of each kind using it
	for _, i := range good {
		t := terms[i]
		path := termPath(i)
		cols := slices.Clone(t.Columns)
		slices.Sort(cols) // a surface's columns in either order are the same surface
		id := string(t.Kind) + "\x00" + strings.Join(cols, "\x00")
		if j, dup := same[id]; dup {
			p.add(t.Line, path, "duplicate of terms[%d] (%s %s): remove one", j, t.Kind, terms[j].Name())
			continue
		}
		same[id] = i
		for _, col := range t.Columns {
			switch col {
			case s.Response:
				p.add(t.Line, path, "%s %q is the response column: a column cannot explain itself; remove the term", t.Kind, col)
				continue
			case s.Weights:
				p.add(t.Line, path, "%s %q is the weights column: prior weights cannot also be a covariate; remove the term", t.Kind, col)
				continue
			case s.Offset:
				p.add(t.Line, path, "%s %q is the offset column: an offset enters with a fixed coefficient of 1 and cannot also be a covariate; remove the term", t.Kind, col)
				continue
			}
			if users[col] == nil {
				users[col] = map[TermKind]int{}
			}
			clash, reason := -1, ""
			for kind, j := range users[col] {
				if why, ok := overlapReason(kind, t.Kind); ok && (clash < 0 || j < clash) {
					clash, reason = j, why
				}
			}
			if clash >= 0 {
				p.add(t.Line, path, "column %q is in terms[%d] (%s) and in this %s: %s", col, clash, terms[clash].Kind, t.Kind, reason)
			}
			if _, ok := users[col][t.Kind]; !ok {
				users[col][t.Kind] = i
			}
		}
	}
}

// overlapReason explains why one column cannot be in terms of kinds a and
// b, if it cannot. A curve or linear term may share a column with a
// surface, as in DESIGN.md's example: the engine keeps them apart.
func overlapReason(a, b TermKind) (string, bool) {
	switch {
	case a == Factor || b == Factor:
		return "a factor treats the column as categories, the other term as numbers; pick one", true
	case a == Curve && b == Linear, a == Linear && b == Curve:
		return "a curve already contains the straight line, so the two cannot be told apart; pick one", true
	}
	return "", false
}

func termPath(i int) string { return "terms[" + strconv.Itoa(i) + "]" }

// term reads terms[i]. Kind and Columns are left empty when they cannot be
// read.
func (p *specParser) term(item *yaml.Node, i int) TermSpec {
	path := termPath(i)
	n := derefNode(item)
	t := TermSpec{Line: item.Line}
	if n.Kind != yaml.MappingNode {
		p.add(item.Line, path, "a term must be a mapping such as {curve: water_temp}, not %s", describeNode(n))
		return t
	}
	var kinds, opts, unknown []yamlEntry
	for _, e := range p.entries(n, path) {
		switch e.key {
		case "curve", "linear", "factor", "surface":
			kinds = append(kinds, e)
		case "basis", "size", "knots", "period", "smoothing":
			opts = append(opts, e)
		default:
			unknown = append(unknown, e)
		}
	}
	switch len(kinds) {
	case 0:
		p.add(item.Line, path, "the term has none of curve, linear, factor or surface: add one, e.g. curve: water_temp")
	case 1:
		t.Kind = TermKind(kinds[0].key)
		t.Columns = p.termColumns(kinds[0], path)
	default:
		p.add(kinds[1].line, path, "the term has both %s and %s: a term is exactly one of curve, linear, factor or surface; split it into separate terms", kinds[0].key, kinds[1].key)
	}
	for _, e := range unknown {
		switch t.Kind {
		case Curve:
			p.unknownKey(e, path, "known keys for a curve", "basis", "size", "knots", "period", "smoothing")
		case Surface:
			p.unknownKey(e, path, "known keys for a surface", "basis", "size", "knots", "smoothing")
		case Linear, Factor:
			p.unknownKey(e, path, "a "+string(t.Kind)+" term has no other keys")
		default:
			p.unknownKey(e, path, "known keys", "curve", "linear", "factor", "surface", "basis", "size", "knots", "period", "smoothing")
		}
	}
	switch t.Kind {
	case Curve:
		p.curveOptions(&t, termOptions(opts), path)
	case Surface:
		p.surfaceOptions(&t, termOptions(opts), path)
	case Linear:
		for _, e := range opts {
			p.add(e.line, path, "%s applies only to curves and surfaces, not to a linear term: remove it, or write curve: %s for a smooth curve", e.key, t.Name())
		}
	case Factor:
		for _, e := range opts {
			p.add(e.line, path, "%s applies only to curves and surfaces, not to a factor term (a factor has one coefficient per level): remove it", e.key)
		}
	}
	return t
}

// termColumns reads the column of a curve, linear or factor term, or the two
// columns of a surface. It returns nil when they are unusable.
func (p *specParser) termColumns(e yamlEntry, path string) []string {
	if e.key != "surface" {
		col, ok := p.word(e, path, "a column name")
		if !ok {
			return nil
		}
		return []string{col}
	}
	n := derefNode(e.val)
	switch {
	case isNullNode(n):
		p.add(e.line, path, "surface has no value: give two columns, e.g. surface: [water_temp, flow]")
		return nil
	case n.Kind != yaml.SequenceNode:
		p.add(e.line, path, "surface must be a list of two columns, e.g. [water_temp, flow], not %s", describeNode(n))
		return nil
	case len(n.Content) != 2:
		p.add(e.line, path, "surface has %d columns: a surface needs exactly two, e.g. [water_temp, flow] (use curve: COLUMN for one)", len(n.Content))
		return nil
	}
	cols := make([]string, 0, 2)
	for j, c := range n.Content {
		col, ok := p.text(c, c.Line, path, "surface["+strconv.Itoa(j)+"]", "a column name")
		if ok {
			cols = append(cols, col)
		}
	}
	if len(cols) != 2 {
		return nil
	}
	if cols[0] == cols[1] {
		p.add(e.line, path, "surface [%s, %s] names one column twice: a surface needs two different columns (use curve: %s for one)", cols[0], cols[1], cols[0])
		return nil
	}
	return cols
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
}

// surfaceOptions reads the options of a surface and fills in their defaults.
func (p *specParser) surfaceOptions(t *TermSpec, opts termOptions, path string) {
	t.Basis = PSpline
	basisOK := true
	if e, ok := opts.get("basis"); ok {
		if n := derefNode(e.val); n.Kind == yaml.ScalarNode && n.Value == string(Cyclic) {
			p.add(e.line, path, "basis cyclic does not suit a surface: its margins use cubic or pspline")
			basisOK = false
		} else {
			v, ok := p.choice(e, path, string(Cubic), string(PSpline))
			t.Basis, basisOK = Basis(v), ok
		}
	}
	t.Knots = EvenKnots
	if t.Basis == Cubic {
		t.Knots = QuantileKnots
	}
	if e, ok := opts.get("knots"); ok {
		v, ok := p.choice(e, path, string(QuantileKnots), string(EvenKnots), string(AllKnots))
		t.Knots = KnotRule(v)
		switch {
		case ok && t.Knots == AllKnots:
			p.add(e.line, path, "knots all is for curves only: a knot at every distinct value of both columns would give a surface far too many coefficients; use knots: even or quantile")
		case ok && basisOK && t.Basis == PSpline && t.Knots != EvenKnots:
			p.add(e.line, path, "knots %s does not suit a pspline surface: P-splines use evenly spaced knots (their difference penalty assumes equal spacing); use knots: even, or basis: cubic", t.Knots)
		}
	}
	t.Size = []int{defaultMarginSize, defaultMarginSize}
	if e, ok := opts.get("size"); ok {
		t.Size = p.surfaceSize(e, path, t.Basis, basisOK)
	}
	if e, ok := opts.get("period"); ok {
		p.add(e.line, path, "period applies only to cyclic curves, and a surface cannot be cyclic: remove period")
	}
	if e, ok := opts.get("smoothing"); ok {
		t.Smoothing = p.smoothing(e, path, 2)
		if len(t.Smoothing) == 1 {
			t.Smoothing = append(t.Smoothing, t.Smoothing[0])
		}
	}
}

// surfaceSize reads a surface's size: one whole number for both margins, or
// a list of two.
func (p *specParser) surfaceSize(e yamlEntry, path string, b Basis, basisOK bool) []int {
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
		if !ok || (basisOK && !p.checkSize(v, yamlEntry{key: key, line: e.line, val: item}, path, b, "surface margin")) {
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
	n := derefNode(e.val)
	if n.Kind != yaml.SequenceNode || len(n.Content) != 2 {
		p.add(e.line, path, "period must be two numbers [start, end], e.g. [0, 24], not %s", describeNode(n))
		return nil
	}
	lo, ok1 := p.number(n.Content[0], e.line, path, "period[0]")
	hi, ok2 := p.number(n.Content[1], e.line, path, "period[1]")
	if !ok1 || !ok2 {
		return nil
	}
	if lo >= hi {
		p.add(e.line, path, "period [%s, %s] must increase: give [start, end] with start < end, e.g. [0, 24]", derefNode(n.Content[0]).Value, derefNode(n.Content[1]).Value)
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

// watch reads the watch section, the spec's tolerances for comparing fits.
func (p *specParser) watch(e yamlEntry) map[string]any {
	const path = "watch"
	const keys = "against, practical_shift, level, deviance_increase, confirm_runs"
	n := derefNode(e.val)
	if n.Kind != yaml.MappingNode {
		p.add(e.line, "", "watch must be a mapping of keys (%s), not %s", keys, describeNode(n))
		return nil
	}
	out := map[string]any{}
	for _, f := range p.entries(n, path) {
		switch f.key {
		case "against":
			if v, ok := p.choice(f, path, "baseline", "previous"); ok {
				out[f.key] = v
			}
		case "practical_shift", "deviance_increase", "level":
			v, ok := p.number(f.val, f.line, path, f.key)
			switch {
			case !ok:
			case f.key == "level" && (v <= 0 || v >= 1):
				p.add(f.line, path, "level %s must be between 0 and 1, e.g. 0.99 for a 99%% simultaneous band", derefNode(f.val).Value)
			case v <= 0:
				p.add(f.line, path, "%s %s must be above 0 (%s)", f.key, derefNode(f.val).Value, watchMeaning(f.key))
			default:
				out[f.key] = v
			}
		case "confirm_runs":
			if v, ok := p.count(f.val, f.line, path, f.key); ok && v < 1 {
				p.add(f.line, path, "confirm_runs %d must be at least 1: it counts consecutive breaching runs before an alert fires", v)
			} else if ok {
				out[f.key] = v
			}
		default:
			p.unknownKey(f, path, "known keys", "against", "practical_shift", "level", "deviance_increase", "confirm_runs")
		}
	}
	if len(out) == 0 {
		return nil
	}
	return out
}

func watchMeaning(key string) string {
	if key == "practical_shift" {
		return "it is the smallest curve shift worth an alert, in link-scale units, e.g. 0.5"
	}
	return "it is the relative increase in predictive deviance that alerts, e.g. 0.15"
}

// yamlEntry is one key of a YAML mapping with its value.
type yamlEntry struct {
	key  string
	line int        // the key's line
	val  *yaml.Node // the value as written; it may be an alias
}

// entries returns the keys of mapping m in order, reporting keys that are
// repeated, merged (<<) or not plain scalars.
func (p *specParser) entries(m *yaml.Node, path string) []yamlEntry {
	var out []yamlEntry
	first := map[string]int{}
	for i := 0; i+1 < len(m.Content); i += 2 {
		k := derefNode(m.Content[i])
		switch {
		case k.Kind != yaml.ScalarNode:
			p.add(k.Line, path, "a key must be a plain word, not %s", describeNode(k))
			continue
		case k.ShortTag() == "!!merge":
			p.add(k.Line, path, "merge keys (<<) are not supported: write the keys out in full")
			continue
		}
		if line, dup := first[k.Value]; dup {
			p.add(k.Line, path, "key %q appears twice (first on line %d): keep one", clipText(k.Value), line)
			continue
		}
		first[k.Value] = k.Line
		out = append(out, yamlEntry{key: k.Value, line: k.Line, val: m.Content[i+1]})
	}
	return out
}

// unknownKey reports the key of e as unknown, suggesting the closest known
// key when one is close, and listing them all after label.
func (p *specParser) unknownKey(e yamlEntry, path, label string, known ...string) {
	hint := ""
	if c, ok := closestName(e.key, known); ok {
		hint = fmt.Sprintf(", did you mean %q?", c)
	}
	list := ""
	if len(known) > 0 {
		list = ": " + strings.Join(known, ", ")
	}
	p.add(e.line, path, "unknown key %q%s (%s%s)", clipText(e.key), hint, label, list)
}

// derefNode follows aliases to the node they name.
func derefNode(n *yaml.Node) *yaml.Node {
	for n.Kind == yaml.AliasNode && n.Alias != nil {
		n = n.Alias
	}
	return n
}

func isNullNode(n *yaml.Node) bool {
	n = derefNode(n)
	return n.Kind == yaml.ScalarNode && n.ShortTag() == "!!null"
}

// describeNode says what a node is, for "must be X, not Y" messages.
func describeNode(n *yaml.Node) string {
	n = derefNode(n)
	switch n.Kind {
	case yaml.MappingNode:
		return "a mapping"
	case yaml.SequenceNode:
		return "a list"
	case yaml.ScalarNode:
		switch n.ShortTag() {
		case "!!null":
			return "an empty value"
		case "!!str":
			return "the text " + strconv.Quote(clipText(n.Value))
		case "!!int", "!!float", "!!bool":
			return clipText(n.Value)
		}
		return "a value tagged " + clipText(n.Tag)
	}
	return "an alias"
}

// clipText shortens s for an error message.
func clipText(s string) string {
	const most = 40
	if r := []rune(s); len(r) > most {
		return string(r[:most]) + "…"
	}
	return s
}

// word reads the value of e as a name: of a column or of the model.
func (p *specParser) word(e yamlEntry, path, want string) (string, bool) {
	return p.text(e.val, e.line, path, e.key, want)
}

// text reads a scalar as a name. Numbers are accepted as written, so that a
// column may be called 2024; empty values, booleans, lists and mappings are
// not.
func (p *specParser) text(n *yaml.Node, line int, path, key, want string) (string, bool) {
	n = derefNode(n)
	if isNullNode(n) {
		p.add(line, path, "%s has no value: give %s", key, want)
		return "", false
	}
	if tag := n.ShortTag(); n.Kind != yaml.ScalarNode || (tag != "!!str" && tag != "!!int" && tag != "!!float") {
		p.add(line, path, "%s must be %s, not %s", key, want, describeNode(n))
		return "", false
	}
	if strings.TrimSpace(n.Value) == "" {
		p.add(line, path, "%s is blank: give %s", key, want)
		return "", false
	}
	return n.Value, true
}

// choice reads the value of e as one of the allowed words.
func (p *specParser) choice(e yamlEntry, path string, allowed ...string) (string, bool) {
	n := derefNode(e.val)
	list := strings.Join(allowed, ", ")
	switch {
	case isNullNode(n):
		p.add(e.line, path, "%s has no value: use one of %s", e.key, list)
	case n.Kind != yaml.ScalarNode || n.ShortTag() != "!!str":
		p.add(e.line, path, "%s must be one of %s, not %s", e.key, list, describeNode(n))
	case !slices.Contains(allowed, n.Value):
		p.add(e.line, path, "%s %q is not one of %s", e.key, clipText(n.Value), list)
	default:
		return n.Value, true
	}
	return "", false
}

// number reads a finite number.
func (p *specParser) number(n *yaml.Node, line int, path, key string) (float64, bool) {
	n = derefNode(n)
	if isNullNode(n) {
		p.add(line, path, "%s has no value: give a number", key)
		return 0, false
	}
	var v float64
	if tag := n.ShortTag(); n.Kind != yaml.ScalarNode || (tag != "!!int" && tag != "!!float") || n.Decode(&v) != nil {
		p.add(line, path, "%s must be a number, not %s", key, describeNode(n))
		return 0, false
	}
	if math.IsInf(v, 0) || math.IsNaN(v) {
		p.add(line, path, "%s must be a finite number, not %s", key, clipText(n.Value))
		return 0, false
	}
	return v, true
}

// count reads a whole number (10 and 10.0 alike).
func (p *specParser) count(n *yaml.Node, line int, path, key string) (int, bool) {
	v, ok := p.number(n, line, path, key)
	switch {
	case !ok:
		return 0, false
	case v != math.Trunc(v):
		p.add(line, path, "%s must be a whole number, not %s", key, clipText(derefNode(n).Value))
		return 0, false
	case math.Abs(v) > math.MaxInt32:
		p.add(line, path, "%s %s is out of range", key, clipText(derefNode(n).Value))
		return 0, false
	}
	return int(v), true
}

// SpecProblem is one thing wrong with a model spec.
type SpecProblem struct {
	// Line is the line of the spec file the problem is on, counting from
	// 1, or 0 when unknown.
	Line int `json:"line,omitempty"`
	// Path locates the mapping the problem is in: "" for the top level,
	// "terms[2]" for the third term (counting from 0), "watch" for the
	// watch section.
	Path string `json:"path,omitempty"`
	// Message says what is wrong and what to do; it names the key at fault.
	Message string `json:"message"`
}

// String formats the problem as "line N: PATH: MESSAGE", leaving out what
// is unknown or empty.
func (p SpecProblem) String() string {
	var b strings.Builder
	if p.Line > 0 {
		fmt.Fprintf(&b, "line %d: ", p.Line)
	}
	if p.Path != "" {
		b.WriteString(p.Path + ": ")
	}
	b.WriteString(p.Message)
	return b.String()
}

// SpecError reports every problem found in a model spec, in line order, so
// that a user can fix them all in one go.
type SpecError struct {
	Problems []SpecProblem
}

// Error lists the problems one per line.
func (e *SpecError) Error() string {
	if len(e.Problems) == 0 {
		return "invalid model spec"
	}
	lines := make([]string, len(e.Problems))
	for i, p := range e.Problems {
		lines[i] = p.String()
	}
	return strings.Join(lines, "\n")
}

// CheckColumns checks that the data have every column the spec uses (see
// Columns). It returns a *SpecError naming each missing column, where the
// spec uses it and the closest column the data have, or nil.
func (s *Spec) CheckColumns(columns []string) error {
	have := make(map[string]bool, len(columns))
	for _, c := range columns {
		have[c] = true
	}
	var problems []SpecProblem
	check := func(col, role string, line int, path string) {
		if col == "" || have[col] {
			return
		}
		have[col] = true // report each missing column once
		problems = append(problems, SpecProblem{Line: line, Path: path,
			Message: fmt.Sprintf("%s column %q is not in the data%s", role, col, suggestColumn(col, columns))})
	}
	check(s.Response, "response", s.Lines["response"], "")
	check(s.Weights, "weights", s.Lines["weights"], "")
	check(s.Offset, "offset", s.Lines["offset"], "")
	for i, t := range s.Terms {
		for _, col := range t.Columns {
			check(col, string(t.Kind), t.Line, termPath(i))
		}
	}
	if len(problems) == 0 {
		return nil
	}
	slices.SortStableFunc(problems, func(a, b SpecProblem) int { return a.Line - b.Line })
	return &SpecError{Problems: problems}
}

// Columns returns the columns a fit reads: as numbers the response, weights,
// offset and the columns of curves, linear terms and surfaces; as text the
// columns of factors. Each list is in spec order without repeats.
func (s *Spec) Columns() (numeric, text []string) {
	add := func(list []string, col string) []string {
		if col == "" || slices.Contains(list, col) {
			return list
		}
		return append(list, col)
	}
	numeric = add(numeric, s.Response)
	numeric = add(numeric, s.Weights)
	numeric = add(numeric, s.Offset)
	for _, t := range s.Terms {
		for _, col := range t.Columns {
			if t.Kind == Factor {
				text = add(text, col)
			} else {
				numeric = add(numeric, col)
			}
		}
	}
	return numeric, text
}

// suggestColumn returns a hint for a missing column: the closest name the
// data have (ignoring case), or a few of the names when none is close.
func suggestColumn(col string, columns []string) string {
	if len(columns) == 0 {
		return " (the data have no columns)"
	}
	if best, ok := closestName(col, columns); ok {
		return fmt.Sprintf(": did you mean %q?", best)
	}
	const most = 8
	quoted := make([]string, 0, most+1)
	for _, c := range columns[:min(len(columns), most)] {
		quoted = append(quoted, strconv.Quote(c))
	}
	if len(columns) > most {
		quoted = append(quoted, fmt.Sprintf("and %d more", len(columns)-most))
	}
	return " (it has " + strings.Join(quoted, ", ") + ")"
}

// closestName returns the candidate closest to name, ignoring case, if it is
// within one edit per three runes of name (and at least one).
func closestName(name string, candidates []string) (string, bool) {
	best, bestDist := "", math.MaxInt
	for _, c := range candidates {
		if d := editDistance(strings.ToLower(name), strings.ToLower(c)); d < bestDist {
			best, bestDist = c, d
		}
	}
	return best, bestDist <= max(1, len([]rune(name))/3)
}

// editDistance returns the Levenshtein distance between a and b, counted in
// runes. Names longer than 64 runes are not compared: it returns a distance
// larger than either.
func editDistance(a, b string) int {
	ra, rb := []rune(a), []rune(b)
	if len(ra) > 64 || len(rb) > 64 {
		return len(ra) + len(rb) + 1
	}
	prev := make([]int, len(rb)+1)
	cur := make([]int, len(rb)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(ra); i++ {
		cur[0] = i
		for j := 1; j <= len(rb); j++ {
			cost := 1
			if ra[i-1] == rb[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		prev, cur = cur, prev
	}
	return prev[len(rb)]
}
