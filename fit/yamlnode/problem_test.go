package yamlnode_test

import (
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"

	"github.com/curvewatch/curvewatch/fit/yamlnode"
)

func TestSyntax(t *testing.T) {
	tests := []struct {
		name     string
		doc      string
		line     int
		contains string
	}{
		{"bad indentation", "name: a\n  terms: [\n", 0, "not valid YAML"},
		{"unclosed quote", "name: \"sonde\nresponse: y\n", 0, "not valid YAML"},
		{"mapping in a sequence", "terms:\n  - a\n  b: c\n", 1, "on this line or after it"},
		{"control character", "name: sonde\nresponse: \x01y\n", 2, "control character"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			var n yaml.Node
			err := yaml.Unmarshal([]byte(tc.doc), &n)
			if err == nil {
				t.Fatalf("%q parsed", tc.doc)
			}
			p := yamlnode.Syntax(err, []byte(tc.doc))
			if (tc.line > 0 && p.Line != tc.line) || !strings.Contains(p.Message, tc.contains) {
				t.Errorf("%+v, want line %d and %q", p, tc.line, tc.contains)
			}
			if !strings.HasPrefix(p.String(), "line ") && p.Line > 0 {
				t.Errorf("String() = %q", p.String())
			}
		})
	}
}
