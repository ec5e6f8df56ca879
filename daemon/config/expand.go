package config

import (
	"fmt"
	"strings"

	"go.yaml.in/yaml/v3"
)

// expand replaces ${NAME} in every scalar value of the tree under n (not in
// keys) by the environment variable NAME, read through p.opts.Getenv.
//
// Rules: NAME is a letter or underscore followed by letters, digits and
// underscores; a variable that is unset or empty is a problem naming it and
// the line; $${ stands for a literal ${; any other $ is kept as written, so
// that values such as passwords may hold one. Expansion happens once: a
// value that holds ${…} after expansion is not expanded again. It happens
// after the YAML is read, inside each value, so a value with YAML's special
// characters (# : ' ") cannot change the structure of the file. A value
// that expands to a number is read as a number, quoted or not (level:
// "${LEVEL}"). Inside a flow collection ({…} or […]) YAML needs the
// reference quoted: {secret: "${HOOK_SECRET}"}. The line reported for a
// reference inside a folded (>) value is approximate.
func (p *parser) expand(n *yaml.Node, path string) {
	switch n.Kind {
	case yaml.DocumentNode:
		for _, c := range n.Content {
			p.expand(c, path)
		}
	case yaml.MappingNode:
		for i := 0; i+1 < len(n.Content); i += 2 {
			key := deref(n.Content[i]).Value
			p.expand(n.Content[i+1], join(path, clip(key)))
		}
	case yaml.SequenceNode:
		for i, c := range n.Content {
			p.expand(c, fmt.Sprintf("%s[%d]", path, i))
		}
	case yaml.ScalarNode:
		if !strings.Contains(n.Value, "${") {
			return
		}
		v, ok := p.expandValue(n, path)
		if !ok {
			p.failed[n] = true
			return
		}
		n.Value = v
		if n.Style&yaml.TaggedStyle == 0 {
			// Not explicitly tagged: a value that is now a number is
			// read as one, quoted or not (level: "${LEVEL}").
			probe := yaml.Node{Kind: yaml.ScalarNode, Value: v}
			if t := probe.ShortTag(); t == "!!int" || t == "!!float" {
				n.Tag, n.Style = t, n.Style&^(yaml.SingleQuotedStyle|yaml.DoubleQuotedStyle|yaml.LiteralStyle|yaml.FoldedStyle)
			} else {
				n.Tag = "!!str"
			}
		}
	}
}

// expandValue expands one scalar, reporting each bad or missing reference.
func (p *parser) expandValue(n *yaml.Node, path string) (string, bool) {
	var b strings.Builder
	s := n.Value
	ok := true
	for {
		i := strings.Index(s, "${")
		if i < 0 {
			b.WriteString(s)
			break
		}
		if i > 0 && s[i-1] == '$' { // $${ is a literal ${
			b.WriteString(s[:i-1] + "${")
			s = s[i+2:]
			continue
		}
		b.WriteString(s[:i])
		line := refLine(n, n.Value, len(n.Value)-len(s)+i)
		end := strings.IndexByte(s[i:], '}')
		if end < 0 {
			p.add(line, path, "%q opens ${ without a closing }: write ${NAME} for an environment variable, or $${ for a literal ${", clip(s[i:]))
			return "", false
		}
		name := s[i+2 : i+end]
		s = s[i+end+1:]
		if !isEnvName(name) {
			p.add(line, path, "${%s} is not an environment variable reference: a name is letters, digits and underscores, not starting with a digit (write $${ for a literal ${)", clip(name))
			ok = false
			continue
		}
		v := p.opts.Getenv(name)
		if v == "" {
			p.add(line, path, "environment variable %s is not set (or is empty): set it before starting curvewatch, or write the value in the file", name)
			ok = false
			continue
		}
		b.WriteString(v)
	}
	return b.String(), ok
}

// refLine is the line of the reference at byte offset off of the value of
// n: the node's line plus the line breaks before it (plus one for a block
// scalar, whose text starts below its | or > indicator).
func refLine(n *yaml.Node, value string, off int) int {
	line := n.Line + strings.Count(value[:off], "\n")
	if n.Style&(yaml.LiteralStyle|yaml.FoldedStyle) != 0 {
		line++
	}
	return line
}

func isEnvName(s string) bool {
	if s == "" {
		return false
	}
	for i, r := range s {
		switch {
		case r == '_', r >= 'A' && r <= 'Z', r >= 'a' && r <= 'z':
		case r >= '0' && r <= '9' && i > 0:
		default:
			return false
		}
	}
	return true
}
