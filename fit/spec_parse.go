package fit

import (
	"cmp"
	"fmt"
	"slices"
	"strings"
	"unicode"

	"go.yaml.in/yaml/v3"
)

// ParseSpec reads a model spec written in YAML (see DESIGN.md, "Model spec")
// and checks it. It reports every problem at once, as a *SpecError whose
// problems each name a line, the key at fault and what to do.
//
// Top-level keys: name, response and terms are required; family, link,
// weights, offset, selection, serial and watch are optional. Each term is a
// mapping with exactly one of curve: COLUMN, linear: COLUMN, factor: COLUMN
// or surface: [COLUMN, COLUMN]; curves also take basis, size, knots,
// period, smoothing and by; surfaces basis, size, knots, period and
// smoothing; factors shrink.
//
// Defaults filled in:
//   - family gaussian; link identity for gaussian, log for poisson and gamma,
//     logit for binomial. Allowed links: gaussian identity or log; poisson log
//     or identity; binomial logit; gamma log, inverse or identity.
//   - selection reml (or gcv).
//   - curve: basis cubic; size 10 (0 with knots: all, meaning one knot per
//     distinct value, resolved by the engine); knots quantile for cubic,
//     even for pspline and cyclic (pspline allows only even). A cyclic curve
//     needs period: [start, end]. by: COLUMN (none by default) makes one
//     curve per level of that column, read as text; a fixed smoothing then
//     applies to each level's curve.
//   - surface: basis pspline for both margins; basis is one of cubic,
//     pspline or cyclic for both margins, or a list of two, one per margin,
//     and fills Bases (Basis too when the margins agree). Size [5, 5] (one
//     number applies to both margins; a cyclic or pspline margin needs at
//     least 4, a cubic one 3). Knots, for both margins: quantile when both
//     are cubic, else even; a pspline margin allows only even, and all is
//     refused. Period is required exactly when a margin is cyclic: a list
//     of two entries, [start, end] for each cyclic margin and null for the
//     other (Periods; nil when no margin is cyclic). Smoothing, when given
//     as one number, applies to both margins.
//   - factor: shrink false (levels coded against the first level); shrink:
//     true gives every level a coefficient, shrunk towards zero by a ridge
//     penalty.
//   - serial (AR(1) errors; gaussian family with identity link only):
//     order, the numeric column giving time, is required; rho is a number
//     strictly between -1 and 1, or estimate (the default); gap, when
//     given, is above 0, and 0 (the default) means no gap rule.
//
// The result holds one Size entry per column of a curve or surface and, when
// smoothing is given, one Smoothing entry per penalty. No term repeats
// another, and a column has at most one curve, with or without by. No term
// uses the response, weights or offset column, as a covariate or as by; a
// column is never both a curve and a linear term, nor a factor and any
// other term. A curve or linear term may share a column with a surface. A
// by column is not the curve's own column and is read as text: it may also
// be a factor (and split other curves) but not a curve, linear or surface
// column, nor the serial order. The serial order column may also be a
// covariate but not the response, weights, offset or a factor. The watch
// section is checked (against baseline|previous, practical_shift > 0,
// 0 < level < 1, deviance_increase > 0, confirm_runs ≥ 1) and kept in
// Spec.Watch as string, float64 and int values. Unknown keys are errors
// everywhere.
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
	// byLine gives the line of each curve's by key, by term path, so that
	// problems found when the terms are compared point at it.
	byLine map[string]int
}

func (p *specParser) add(line int, path, format string, args ...any) {
	p.problems = append(p.problems, SpecProblem{Line: line, Path: path, Message: fmt.Sprintf(format, args...)})
}

// spec reads the top-level mapping.
func (p *specParser) spec(root *yaml.Node) *Spec {
	root = derefNode(root)
	if root.Kind != yaml.MappingNode {
		p.add(root.Line, "", "the spec must be a mapping of keys (name, response, terms, …), not %s", describeNode(root))
		return nil
	}
	s := &Spec{Lines: map[string]int{}}
	var family, link, terms, serial, watch *yamlEntry
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
		case "serial":
			serial = &e
		case "watch":
			watch = &e
		default:
			p.unknownKey(e, "", "known keys", "name", "response", "family", "link", "weights", "offset", "selection", "terms", "serial", "watch")
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
	if serial != nil {
		s.Serial = p.serial(s, *serial)
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
