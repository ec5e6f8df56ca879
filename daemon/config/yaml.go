package config

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"strings"

	"go.yaml.in/yaml/v3"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/fit/yamlnode"
)

// parser collects problems while it reads a config.
type parser struct {
	problems []Problem
	// failed marks scalars whose ${VAR} expansion failed: the problem is
	// already reported, so readers skip them quietly.
	failed map[*yaml.Node]bool
	opts   ParseOptions
}

func (p *parser) add(line int, path, format string, args ...any) {
	p.problems = append(p.problems, Problem{Line: line, Path: path, Message: fmt.Sprintf(format, args...)})
}

// document decodes data as a single YAML document and returns its top node,
// or nil after recording why it cannot.
func (p *parser) document(data []byte) *yaml.Node {
	if len(bytes.TrimSpace(data)) == 0 {
		p.add(1, "", "the config is empty: it needs at least database and models")
		return nil
	}
	dec := yaml.NewDecoder(bytes.NewReader(data))
	var doc yaml.Node
	if err := dec.Decode(&doc); err != nil {
		p.syntax(err, data)
		return nil
	}
	var extra yaml.Node
	switch err := dec.Decode(&extra); {
	case errors.Is(err, io.EOF):
	case err != nil:
		p.syntax(err, data)
		return nil
	case len(extra.Content) == 1 && isNull(extra.Content[0]):
		// an empty document after a trailing "---"
	default:
		p.add(extra.Line, "", "a second YAML document starts here: one config file holds one daemon's config; list every model under models")
		return nil
	}
	if len(doc.Content) == 0 {
		p.add(1, "", "the config is empty: it needs at least database and models")
		return nil
	}
	return doc.Content[0]
}

// syntax records a YAML syntax error with the line the YAML reader gives.
func (p *parser) syntax(err error, data []byte) {
	p.problems = append(p.problems, yamlnode.Syntax(err, data))
}

// entry is one key of a YAML mapping with its value.
type entry struct {
	key  string
	line int        // the key's line
	val  *yaml.Node // the value, aliases followed
}

// mapping checks that n is a mapping and returns its keys in order,
// reporting keys that are repeated, merged or not plain words, and keys
// not in known. what names the section for messages.
func (p *parser) mapping(n *yaml.Node, line int, path, what string, known ...string) ([]entry, bool) {
	n = deref(n)
	if p.failed[n] {
		return nil, false
	}
	if n.Kind != yaml.MappingNode {
		if isNull(n) {
			p.add(line, path, "%s has no value: give a mapping of keys (%s)", what, strings.Join(known, ", "))
		} else {
			p.add(line, path, "%s must be a mapping of keys (%s), not %s", what, strings.Join(known, ", "), describe(n))
		}
		return nil, false
	}
	var out []entry
	first := map[string]int{}
	for i := 0; i+1 < len(n.Content); i += 2 {
		k := deref(n.Content[i])
		switch {
		case k.Kind != yaml.ScalarNode:
			p.add(k.Line, path, "a key must be a plain word, not %s", describe(k))
			continue
		case k.ShortTag() == "!!merge":
			p.add(k.Line, path, "merge keys (<<) are not supported: write the keys out in full")
			continue
		}
		if l, dup := first[k.Value]; dup {
			p.add(k.Line, path, "key %q appears twice (first on line %d): keep one", clip(k.Value), l)
			continue
		}
		first[k.Value] = k.Line
		if !contains(known, k.Value) {
			hint := ""
			if c, ok := closest(k.Value, known); ok {
				hint = fmt.Sprintf(", did you mean %q?", c)
			}
			p.add(k.Line, path, "unknown key %q%s (%s takes %s)", clip(k.Value), hint, what, strings.Join(known, ", "))
			continue
		}
		out = append(out, entry{key: k.Value, line: k.Line, val: deref(n.Content[i+1])})
	}
	return out, true
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

// join extends a path with a key.
func join(path, key string) string {
	switch {
	case path == "":
		return key
	case key == "":
		return path
	}
	return path + "." + key
}

// text reads a scalar as text. Numbers are accepted as written; empty
// values, booleans, lists and mappings are not. want says what to give.
func (p *parser) text(e entry, path, want string) (string, bool) {
	n := e.val
	switch {
	case p.failed[n]:
		return "", false
	case isNull(n):
		p.add(e.line, path, "%s has no value: give %s", e.key, want)
		return "", false
	case n.Kind != yaml.ScalarNode || !isTextTag(n.ShortTag()):
		p.add(e.line, path, "%s must be %s, not %s", e.key, want, describe(n))
		return "", false
	case strings.TrimSpace(n.Value) == "":
		p.add(e.line, path, "%s is blank: give %s", e.key, want)
		return "", false
	}
	return n.Value, true
}

func isTextTag(tag string) bool { return tag == "!!str" || tag == "!!int" || tag == "!!float" }

// number reads a finite number.
func (p *parser) number(e entry, path string) (float64, bool) {
	n := e.val
	if p.failed[n] {
		return 0, false
	}
	if isNull(n) {
		p.add(e.line, path, "%s has no value: give a number", e.key)
		return 0, false
	}
	var v float64
	if tag := n.ShortTag(); n.Kind != yaml.ScalarNode || (tag != "!!int" && tag != "!!float") || n.Decode(&v) != nil {
		p.add(e.line, path, "%s must be a number, not %s", e.key, describe(n))
		return 0, false
	}
	if math.IsInf(v, 0) || math.IsNaN(v) {
		p.add(e.line, path, "%s must be a finite number, not %s", e.key, clip(n.Value))
		return 0, false
	}
	return v, true
}

// whole reads a whole number (2 and 2.0 alike).
func (p *parser) whole(e entry, path string) (int, bool) {
	v, ok := p.number(e, path)
	switch {
	case !ok:
		return 0, false
	case v != math.Trunc(v):
		p.add(e.line, path, "%s must be a whole number, not %s", e.key, clip(e.val.Value))
		return 0, false
	case math.Abs(v) > math.MaxInt32:
		p.add(e.line, path, "%s %s is out of range", e.key, clip(e.val.Value))
		return 0, false
	}
	return int(v), true
}

// list checks that n is a list and returns its items, aliases followed.
func (p *parser) list(e entry, path, want string) ([]*yaml.Node, bool) {
	n := e.val
	switch {
	case p.failed[n]:
		return nil, false
	case isNull(n):
		return nil, true
	case n.Kind != yaml.SequenceNode:
		p.add(e.line, path, "%s must be a list of %s, not %s", e.key, want, describe(n))
		return nil, false
	}
	items := make([]*yaml.Node, len(n.Content))
	for i, it := range n.Content {
		items[i] = deref(it)
	}
	return items, true
}

// closest returns the candidate closest to name, if close enough to
// suggest (see fit.ClosestName).
func closest(name string, candidates []string) (string, bool) {
	return fit.ClosestName(name, candidates)
}

// The node helpers shared with the spec parser.
var (
	deref    = yamlnode.Deref
	isNull   = yamlnode.IsNull
	describe = yamlnode.Describe
	clip     = yamlnode.Clip
)
