package yamlnode

import (
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"
)

func TestDescribe(t *testing.T) {
	for src, want := range map[string]string{
		"a: 1":   "a mapping",
		"[1, 2]": "a list",
		"~":      "an empty value",
		"hello":  `the text "hello"`,
		"42":     "42",
	} {
		var doc yaml.Node
		if err := yaml.Unmarshal([]byte(src), &doc); err != nil {
			t.Fatal(err)
		}
		if got := Describe(doc.Content[0]); got != want {
			t.Errorf("%q: %q, want %q", src, got, want)
		}
	}
	if c := Clip(strings.Repeat("é", 50)); len([]rune(c)) != 41 {
		t.Errorf("clip kept %d runes", len([]rune(c)))
	}
}
