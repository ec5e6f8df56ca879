package fit

import (
	"strings"

	"github.com/curvewatch/curvewatch/fit/yamlnode"
)

// SpecProblem is one thing wrong with a model spec: its Path locates the
// mapping the problem is in ("" for the top level, "terms[2]" for the third
// term, "watch" for the watch section), and its Message names the key at
// fault.
type SpecProblem = yamlnode.Problem

// SpecError reports every problem found in a model spec, in line order, so
// that a user can fix them all in one go.
type SpecError struct {
	Problems []SpecProblem
}

// Error lists the problems one per line.
func (e *SpecError) Error() string {
	if len(e.Problems) == 0 {
		return "invalid model spec"
	}
	lines := make([]string, len(e.Problems))
	for i, p := range e.Problems {
		lines[i] = p.String()
	}
	return strings.Join(lines, "\n")
}
