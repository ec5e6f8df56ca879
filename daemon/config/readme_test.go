package config

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// The README's example config (its second yaml block) must stay valid,
// with its spec_file given the README's example spec (the first block).
func TestReadmeConfigParses(t *testing.T) {
	raw, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	var blocks []string
	for rest := string(raw); ; {
		start := strings.Index(rest, "```yaml\n")
		if start < 0 {
			break
		}
		rest = rest[start+len("```yaml\n"):]
		end := strings.Index(rest, "```")
		if end < 0 {
			t.Fatal("an unclosed yaml block in the README")
		}
		blocks, rest = append(blocks, rest[:end]), rest[end:]
	}
	if len(blocks) < 2 {
		t.Fatalf("the README has %d yaml blocks; want the example spec, then the example config", len(blocks))
	}
	dir := t.TempDir()
	if err := os.WriteFile(filepath.Join(dir, "sonde-07.yaml"), []byte(blocks[0]), 0o600); err != nil {
		t.Fatal(err)
	}
	// Placeholders for the variables the example reads.
	env := map[string]string{"DATABASE_URL": "postgres://curvewatch@db.example:5432/monitoring", "HOOK_SECRET": "placeholder", "CURVEWATCH_API_TOKEN": "placeholder-placeholder"}
	cfg, err := Parse(strings.NewReader(blocks[1]), ParseOptions{Dir: dir, Getenv: func(k string) string { return env[k] }})
	if err != nil {
		t.Fatalf("the README's example config is rejected:\n%v", err)
	}
	if len(cfg.Models) == 0 || cfg.Models[0].Source.Overlap == 0 {
		t.Errorf("the README's example config read as %+v", cfg.Models)
	}
}
