// Package yamlnode holds the small yaml.Node helpers that curvewatch's two
// YAML readers (the model spec and the daemon config) share for their
// error messages.
package yamlnode

import (
	"strconv"

	"go.yaml.in/yaml/v3"
)

// Deref follows aliases to the node they name.
func Deref(n *yaml.Node) *yaml.Node {
	for n.Kind == yaml.AliasNode && n.Alias != nil {
		n = n.Alias
	}
	return n
}

// IsNull reports whether n is an empty (null) scalar.
func IsNull(n *yaml.Node) bool {
	n = Deref(n)
	return n.Kind == yaml.ScalarNode && n.ShortTag() == "!!null"
}

// Describe says what a node is, for "must be X, not Y" messages.
func Describe(n *yaml.Node) string {
	n = Deref(n)
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
			return "the text " + strconv.Quote(Clip(n.Value))
		case "!!int", "!!float", "!!bool":
			return Clip(n.Value)
		}
		return "a value tagged " + Clip(n.Tag)
	}
	return "an alias"
}

// Clip shortens s to 40 characters for an error message.
func Clip(s string) string {
	const most = 40
	if r := []rune(s); len(r) > most {
		return string(r[:most]) + "…"
	}
	return s
}
