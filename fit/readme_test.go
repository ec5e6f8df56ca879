package fit_test

import (
	"os"
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// The README's example spec must stay valid: prose examples drift unless a
// test reads them.
func TestReadmeSpecParses(t *testing.T) {
	raw, err := os.ReadFile("../README.md")
	if err != nil {
		t.Fatal(err)
	}
	text := string(raw)
	start := strings.Index(text, "```yaml\n")
	if start < 0 {
		t.Fatal("README has no yaml block")
	}
	body := text[start+len("```yaml\n"):]
	body = body[:strings.Index(body, "```")]
	if _, err := fit.ParseSpec([]byte(body)); err != nil {
		t.Fatalf("the README's example spec is rejected:\n%v", err)
	}
}
