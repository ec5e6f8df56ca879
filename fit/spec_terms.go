package fit

import (
	"cmp"
	"slices"
	"strconv"
	"strings"

	"go.yaml.in/yaml/v3"
)

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

// byUse marks, among the kinds of term using a column, a curve's by column.
const byUse TermKind = "by"

// overlaps checks that no column is used twice: in two terms, or in a term
// and as the response, weights or offset. A curve's by column counts as a
// use of that column. Only the good terms, those whose kind and columns
// could be read, are checked.
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
			if t.Kind == Curve && t.By != terms[j].By {
				p.add(t.Line, path, "terms[%d] is already a curve of %q: a column has one curve, plain or with by, not both; keep one", j, t.Columns[0])
			} else {
				p.add(t.Line, path, "duplicate of terms[%d] (%s %s): remove one", j, t.Kind, terms[j].Name())
			}
			continue
		}
		same[id] = i
		for _, col := range t.Columns {
			if !p.roleClash(s, col, string(t.Kind), "remove the term", t.Line, path) {
				p.claim(users, terms, col, t.Kind, i, t.Line)
			}
		}
		if t.By == "" {
			continue
		}
		line := cmp.Or(p.byLine[path], t.Line)
		switch {
		case t.By == t.Columns[0]:
			p.add(line, path, "by %q is the curve's own column: by names a factor column whose levels each get their own curve, e.g. by: site; use another column or remove by", t.By)
		case !p.roleClash(s, t.By, "by", "use a factor column for by, or remove by", line, path):
			p.claim(users, terms, t.By, byUse, i, line)
		}
	}
}

// roleClash reports col, used by a term as what ("curve", "by", …), if it
// is the response, weights or offset column; fix says what to do.
func (p *specParser) roleClash(s *Spec, col, what, fix string, line int, path string) bool {
	switch col {
	case s.Response:
		p.add(line, path, "%s %q is the response column: a column cannot explain itself; %s", what, col, fix)
	case s.Weights:
		p.add(line, path, "%s %q is the weights column: prior weights cannot also be a covariate; %s", what, col, fix)
	case s.Offset:
		p.add(line, path, "%s %q is the offset column: an offset enters with a fixed coefficient of 1 and cannot also be a covariate; %s", what, col, fix)
	default:
		return false
	}
	return true
}

// claim records that terms[i] uses col as kind (byUse for its by column),
// reporting a clash with an earlier term that uses col in a way that
// cannot go with this one.
func (p *specParser) claim(users map[string]map[TermKind]int, terms []TermSpec, col string, kind TermKind, i, line int) {
	if users[col] == nil {
		users[col] = map[TermKind]int{}
	}
	clash, clashKind, reason := -1, TermKind(""), ""
	for k, j := range users[col] {
		if why, ok := overlapReason(k, kind); ok && (clash < 0 || j < clash) {
			clash, clashKind, reason = j, k, why
		}
	}
	path := termPath(i)
	switch {
	case clash < 0:
	case kind == byUse:
		p.add(line, path, "by column %q is in terms[%d] (%s): %s", col, clash, terms[clash].Kind, reason)
	case clashKind == byUse:
		p.add(line, path, "column %q is the by column of terms[%d] and in this %s: %s", col, clash, kind, reason)
	default:
		p.add(line, path, "column %q is in terms[%d] (%s) and in this %s: %s", col, clash, terms[clash].Kind, kind, reason)
	}
	if _, ok := users[col][kind]; !ok {
		users[col][kind] = i
	}
}

// overlapReason explains why one column cannot be used as kinds a and b,
// if it cannot. A curve or linear term may share a column with a surface,
// as in DESIGN.md's example: the engine keeps them apart. A by column may
// also be a factor (the levels' mean differences) and split other curves.
func overlapReason(a, b TermKind) (string, bool) {
	switch {
	case a == byUse || b == byUse:
		if a == Factor || b == Factor || a == b {
			return "", false
		}
		return "a by column is read as categories, one curve per level, and cannot also be a curve, linear or surface column, which are read as numbers; use a factor column for by", true
	case a == Factor || b == Factor:
		return "a factor treats the column as categories, the other term as numbers; pick one", true
	case a == Curve && b == Linear, a == Linear && b == Curve:
		return "a curve already contains the straight line, so the two cannot be told apart; pick one", true
	}
	return "", false
}

func termPath(i int) string { return "terms[" + strconv.Itoa(i) + "]" }

// Keys a term may have besides its kind, and which kinds take them.
var (
	curveKeys   = []string{"basis", "size", "knots", "period", "smoothing", "by"}
	surfaceKeys = []string{"basis", "size", "knots", "period", "smoothing"}
	factorKeys  = []string{"shrink"}
)

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
		switch {
		case slices.Contains([]string{"curve", "linear", "factor", "surface"}, e.key):
			kinds = append(kinds, e)
		case slices.Contains(curveKeys, e.key) || slices.Contains(factorKeys, e.key):
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
			p.unknownKey(e, path, "known keys for a curve", curveKeys...)
		case Surface:
			p.unknownKey(e, path, "known keys for a surface", surfaceKeys...)
		case Factor:
			p.unknownKey(e, path, "known keys for a factor", factorKeys...)
		case Linear:
			p.unknownKey(e, path, "a linear term has no other keys")
		default:
			p.unknownKey(e, path, "known keys", append([]string{"curve", "linear", "factor", "surface"}, append(curveKeys, factorKeys...)...)...)
		}
	}
	if t.Kind == "" {
		return t
	}
	var own termOptions // the options this kind of term takes
	for _, e := range opts {
		if p.misplaced(e, t, path) {
			continue
		}
		own = append(own, e)
	}
	switch t.Kind {
	case Curve:
		p.curveOptions(&t, own, path)
	case Surface:
		p.surfaceOptions(&t, own, path)
	case Factor:
		if e, ok := own.get("shrink"); ok {
			t.Shrink, _ = p.flag(e, path)
		}
	}
	return t
}

// misplaced reports option e if a term of t's kind does not take it.
func (p *specParser) misplaced(e yamlEntry, t TermSpec, path string) bool {
	switch {
	case e.key == "shrink" && t.Kind == Linear:
		p.add(e.line, path, "shrink applies only to factor terms, where it shrinks the levels' coefficients towards zero; remove it, or write factor: %s if the column holds categories", t.Name())
	case e.key == "shrink" && t.Kind != Factor:
		p.add(e.line, path, "shrink applies only to factor terms, where it shrinks the levels' coefficients towards zero; remove it (a %s's wiggliness is already penalised, with smoothing)", t.Kind)
	case e.key == "by" && t.Kind == Factor:
		p.add(e.line, path, "by applies only to curves, not to a factor term (a factor already has one coefficient per level): remove it")
	case e.key == "by" && t.Kind == Surface:
		p.add(e.line, path, "by applies only to curves, not to a surface (one surface per level is not supported): remove it")
	case e.key == "by" && t.Kind != Curve:
		p.add(e.line, path, "by applies only to curves, not to a %s term: remove it, or write curve: %s with by for one curve per level", t.Kind, t.Name())
	case e.key == "by" || e.key == "shrink":
		return false
	case t.Kind == Linear:
		p.add(e.line, path, "%s applies only to curves and surfaces, not to a linear term: remove it, or write curve: %s for a smooth curve", e.key, t.Name())
	case t.Kind == Factor:
		p.add(e.line, path, "%s applies only to curves and surfaces, not to a factor term (a factor has one coefficient per level): remove it", e.key)
	default:
		return false
	}
	return true
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
