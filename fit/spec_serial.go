package fit

import (
	"slices"

	"go.yaml.in/yaml/v3"
)

// serial reads the serial section, which asks for AR(1) errors, and checks
// it against the family, the link and the columns the terms read as text.
func (p *specParser) serial(s *Spec, e yamlEntry) *SerialSpec {
	const path = "serial"
	n := derefNode(e.val)
	switch {
	case isNullNode(n):
		p.add(e.line, "", "serial has no value: give at least order, the column giving time, e.g. serial: {order: hours_since_start, rho: estimate}")
		return nil
	case n.Kind != yaml.MappingNode:
		p.add(e.line, "", "serial must be a mapping of keys (order, rho, gap), not %s", describeNode(n))
		return nil
	}
	if slices.Contains(allowedLinks(s.Family), s.Link) && (s.Family != Gaussian || s.Link != Identity) {
		p.add(e.line, "", "serial (AR(1) errors) needs family gaussian with link identity, not family %s with link %s: the correlation is between successive errors y − μ of a Gaussian model; remove serial, or use family: gaussian and link: identity", s.Family, s.Link)
	}
	out := &SerialSpec{Estimate: true}
	orderLine := 0
	for _, f := range p.entries(n, path) {
		switch f.key {
		case "order":
			out.Order, _ = p.word(f, path, "the numeric column giving time, e.g. hours_since_start")
			orderLine = f.line
		case "rho":
			out.Rho, out.Estimate = p.rho(f, path)
		case "gap":
			v, ok := p.number(f.val, f.line, path, f.key)
			if ok && v <= 0 {
				p.add(f.line, path, "gap %s must be above 0: it is the largest step in order between two rows of one stretch; remove gap to have every row follow the one before", clipText(derefNode(f.val).Value))
			} else if ok {
				out.Gap = v
			}
		default:
			p.unknownKey(f, path, "known keys", "order", "rho", "gap")
		}
	}
	if orderLine == 0 {
		p.add(e.line, path, "missing key \"order\": serial needs the numeric column giving time, e.g. order: hours_since_start")
		return out
	}
	s.Lines["serial.order"] = orderLine
	if out.Order != "" {
		p.serialOrder(s, out.Order, orderLine, path)
	}
	return out
}

// rho reads the lag-one correlation: a number strictly between −1 and 1,
// or the word estimate. It returns the value and whether to estimate it.
func (p *specParser) rho(f yamlEntry, path string) (float64, bool) {
	n := derefNode(f.val)
	const want = "a number strictly between -1 and 1, e.g. 0.8, or the word estimate to have it fitted"
	switch {
	case isNullNode(n):
		p.add(f.line, path, "rho has no value: give %s", want)
		return 0, false
	case n.Kind != yaml.ScalarNode || n.ShortTag() != "!!str" && n.ShortTag() != "!!int" && n.ShortTag() != "!!float":
		p.add(f.line, path, "rho must be %s, not %s", want, describeNode(n))
		return 0, false
	case n.ShortTag() == "!!str" && n.Value == "estimate":
		return 0, true
	case n.ShortTag() == "!!str":
		p.add(f.line, path, "rho %q is neither a number nor the word estimate: give %s", clipText(n.Value), want)
		return 0, false
	}
	v, ok := p.number(n, f.line, path, "rho")
	if ok && (v <= -1 || v >= 1) {
		p.add(f.line, path, "rho %s must be strictly between -1 and 1: it is the correlation of successive errors, and at ±1 they would wander as a random walk with no fixed variance; give e.g. 0.8, or estimate", clipText(n.Value))
		return 0, false
	}
	return v, false
}

// serialOrder checks that the order column can be read as numbers: it is
// not the response, weights or offset, nor a column a term reads as text.
func (p *specParser) serialOrder(s *Spec, col string, line int, path string) {
	switch col {
	case s.Response:
		p.add(line, path, "order %q is the response column: order needs the column giving time, e.g. hours_since_start", col)
		return
	case s.Weights:
		p.add(line, path, "order %q is the weights column: order needs the column giving time, e.g. hours_since_start", col)
		return
	case s.Offset:
		p.add(line, path, "order %q is the offset column: order needs the column giving time, e.g. hours_since_start", col)
		return
	}
	for i, t := range s.Terms {
		switch {
		case t.Kind == Factor && slices.Contains(t.Columns, col):
			p.add(line, path, "order %q is the column of the factor in terms[%d], read as categories: order needs a numeric column giving time; remove that factor or use another column", col, i)
			return
		case t.By == col:
			p.add(line, path, "order %q is the by column of terms[%d], read as categories: order needs a numeric column giving time; use another column", col, i)
			return
		}
	}
}
