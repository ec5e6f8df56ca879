package fit

import (
	"fmt"
	"strings"
)

// SpecProblem is one thing wrong with a model spec.
type SpecProblem struct {
	// Line is the line of the spec file the problem is on, counting from
	// 1, or 0 when unknown.
	Line int `json:"line,omitempty"`
	// Path locates the mapping the problem is in: "" for the top level,
	// "terms[2]" for the third term (counting from 0), "watch" for the
	// watch section.
	Path string `json:"path,omitempty"`
	// Message says what is wrong and what to do; it names the key at fault.
	Message string `json:"message"`
}

// String formats the problem as "line N: PATH: MESSAGE", leaving out what
// is unknown or empty.
func (p SpecProblem) String() string {
	var b strings.Builder
	if p.Line > 0 {
		fmt.Fprintf(&b, "line %d: ", p.Line)
	}
	if p.Path != "" {
		b.WriteString(p.Path + ": ")
	}
	b.WriteString(p.Message)
	return b.String()
}

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
