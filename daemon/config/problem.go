package config

import (
	"fmt"
	"strings"

	"github.com/curvewatch/curvewatch/fit/yamlnode"
)

// Problem is one thing wrong with a config: its Path names the key at
// fault ("database", "models[1].schedule", "models[0].spec.terms[2]"; list
// entries count from 0).
type Problem = yamlnode.Problem

// Error reports every problem found in a config, in line order, so that a
// user can fix them all in one go.
type Error struct {
	// File is the config file's name as given to Load, or "" for Parse.
	File     string
	Problems []Problem
}

// Error lists the problems one per line, after a heading naming the file
// when it is known.
func (e *Error) Error() string {
	lines := make([]string, 0, len(e.Problems)+1)
	if e.File != "" {
		lines = append(lines, fmt.Sprintf("config %s has %s:", e.File, count(len(e.Problems), "problem", "problems")))
	}
	for _, p := range e.Problems {
		lines = append(lines, p.String())
	}
	if len(lines) == 0 {
		return "invalid config"
	}
	return strings.Join(lines, "\n")
}

// count writes n with the singular or plural noun.
func count(n int, one, many string) string {
	if n == 1 {
		return "1 " + one
	}
	return fmt.Sprintf("%d %s", n, many)
}
