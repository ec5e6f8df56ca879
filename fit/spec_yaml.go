package fit

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
	"strings"

	"go.yaml.in/yaml/v3"

	"github.com/curvewatch/curvewatch/fit/yamlnode"
)

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
	p.problems = append(p.problems, yamlnode.Syntax(err, data))
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
	if c, ok := ClosestName(e.key, known); ok {
		hint = fmt.Sprintf(", did you mean %q?", c)
	}
	list := ""
	if len(known) > 0 {
		list = ": " + strings.Join(known, ", ")
	}
	p.add(e.line, path, "unknown key %q%s (%s%s)", clipText(e.key), hint, label, list)
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

// flag reads the value of e as true or false.
func (p *specParser) flag(e yamlEntry, path string) (bool, bool) {
	n := derefNode(e.val)
	var v bool
	switch {
	case isNullNode(n):
		p.add(e.line, path, "%s has no value: give true or false", e.key)
	case n.Kind != yaml.ScalarNode || n.ShortTag() != "!!bool" || n.Decode(&v) != nil:
		p.add(e.line, path, "%s must be true or false, not %s", e.key, describeNode(n))
	default:
		return v, true
	}
	return false, false
}

// The node helpers shared with the daemon's config reader.
var (
	derefNode    = yamlnode.Deref
	isNullNode   = yamlnode.IsNull
	describeNode = yamlnode.Describe
	clipText     = yamlnode.Clip
)
