package fit

import (
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
)

// CheckColumns checks that the data have every column the spec uses (see
// Columns). It returns a *SpecError naming each missing column, where the
// spec uses it and the closest column the data have, or nil.
func (s *Spec) CheckColumns(columns []string) error {
	have := make(map[string]bool, len(columns))
	for _, c := range columns {
		have[c] = true
	}
	var problems []SpecProblem
	check := func(col, role string, line int, path string) {
		if col == "" || have[col] {
			return
		}
		have[col] = true // report each missing column once
		problems = append(problems, SpecProblem{Line: line, Path: path,
			Message: fmt.Sprintf("%s column %q is not in the data%s", role, col, suggestColumn(col, columns))})
	}
	check(s.Response, "response", s.Lines["response"], "")
	check(s.Weights, "weights", s.Lines["weights"], "")
	check(s.Offset, "offset", s.Lines["offset"], "")
	for i, t := range s.Terms {
		for _, col := range t.Columns {
			check(col, string(t.Kind), t.Line, termPath(i))
		}
		check(t.By, "by", t.Line, termPath(i))
	}
	if s.Serial != nil {
		check(s.Serial.Order, "serial order", s.Lines["serial.order"], "serial")
	}
	if len(problems) == 0 {
		return nil
	}
	slices.SortStableFunc(problems, func(a, b SpecProblem) int { return a.Line - b.Line })
	return &SpecError{Problems: problems}
}

// Columns returns the columns a fit reads: as numbers the response, weights,
// offset, the columns of curves, linear terms and surfaces, and the serial
// order column; as text the columns of factors and the by columns of
// curves. Each list is in that order (terms in spec order) without repeats.
func (s *Spec) Columns() (numeric, text []string) {
	add := func(list []string, col string) []string {
		if col == "" || slices.Contains(list, col) {
			return list
		}
		return append(list, col)
	}
	numeric = add(numeric, s.Response)
	numeric = add(numeric, s.Weights)
	numeric = add(numeric, s.Offset)
	for _, t := range s.Terms {
		for _, col := range t.Columns {
			if t.Kind == Factor {
				text = add(text, col)
			} else {
				numeric = add(numeric, col)
			}
		}
		text = add(text, t.By)
	}
	if s.Serial != nil {
		numeric = add(numeric, s.Serial.Order)
	}
	return numeric, text
}

// suggestColumn returns a hint for a missing column: the closest name the
// data have (ignoring case), or a few of the names when none is close.
func suggestColumn(col string, columns []string) string {
	if len(columns) == 0 {
		return " (the data have no columns)"
	}
	if best, ok := ClosestName(col, columns); ok {
		return fmt.Sprintf(": did you mean %q?", best)
	}
	const most = 8
	quoted := make([]string, 0, most+1)
	for _, c := range columns[:min(len(columns), most)] {
		quoted = append(quoted, strconv.Quote(c))
	}
	if len(columns) > most {
		quoted = append(quoted, fmt.Sprintf("and %d more", len(columns)-most))
	}
	return " (it has " + strings.Join(quoted, ", ") + ")"
}

// closestName returns the candidate closest to name, ignoring case, if it is
// within one edit per three runes of name (and at least one).
func ClosestName(name string, candidates []string) (string, bool) {
	best, bestDist := "", math.MaxInt
	for _, c := range candidates {
		if d := editDistance(strings.ToLower(name), strings.ToLower(c)); d < bestDist {
			best, bestDist = c, d
		}
	}
	return best, bestDist <= max(1, len([]rune(name))/3)
}

// editDistance returns the Levenshtein distance between a and b, counted in
// runes. Names longer than 64 runes are not compared: it returns a distance
// larger than either.
func editDistance(a, b string) int {
	ra, rb := []rune(a), []rune(b)
	if len(ra) > 64 || len(rb) > 64 {
		return len(ra) + len(rb) + 1
	}
	prev := make([]int, len(rb)+1)
	cur := make([]int, len(rb)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(ra); i++ {
		cur[0] = i
		for j := 1; j <= len(rb); j++ {
			cost := 1
			if ra[i-1] == rb[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		prev, cur = cur, prev
	}
	return prev[len(rb)]
}
