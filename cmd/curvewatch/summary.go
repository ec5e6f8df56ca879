package main

import (
	"cmp"
	"fmt"
	"io"
	"maps"
	"math"
	"slices"
	"strings"
	"unicode/utf8"

	"github.com/curvewatch/curvewatch/fit"
)

// writeSummary writes the human summary of a fit: the model as a whole,
// then each term on the link scale, then the engine's warnings. It holds no
// timings or paths, so the same fit always gives the same text.
func writeSummary(w io.Writer, doc *fit.Document) error {
	var b strings.Builder
	writeOverall(&b, doc)
	b.WriteString("\n")
	writeTerms(&b, doc)
	for _, msg := range doc.Warnings {
		b.WriteString("\nwarning: " + msg)
	}
	if len(doc.Warnings) > 0 {
		b.WriteString("\n")
	}
	_, err := io.WriteString(w, b.String())
	return err
}

// writeOverall writes the model-wide figures, one labelled row each.
func writeOverall(b *strings.Builder, doc *fit.Document) {
	fmt.Fprintf(b, "model %s\n", doc.Model)
	conv := doc.Convergence
	if !conv.Converged {
		fmt.Fprintf(b, "  NOT CONVERGED: the fit stopped after %s with the deviance still changing; do not use it\n", plural(conv.Iterations, "iteration", "iterations"))
	}
	row := func(label, format string, args ...any) {
		fmt.Fprintf(b, "  %-11s %s\n", label, fmt.Sprintf(format, args...))
	}
	response := ""
	if doc.Spec != nil {
		response = doc.Spec.Response + " · "
	}
	row("response", "%s%s family · %s link", response, doc.Family, doc.Link)
	rows := count(doc.Data.RowsUsed) + " used of " + count(doc.Data.RowsRead) + " read"
	if dropped := doc.Data.RowsRead - doc.Data.RowsUsed; dropped > 0 {
		rows += fmt.Sprintf(" · %s dropped for a missing value (%s)", count(dropped), droppedCounts(doc.Data.Dropped))
	}
	row("rows", "%s", rows)
	row("explained", "%.1f%% of the deviance", 100*doc.DevianceExplained)
	if doc.ScaleEstimated {
		row("scale", "%.4g, estimated from the residuals", doc.Scale)
	}
	row("edf", "%.2f in total, for %s", doc.EDFTotal, plural(len(doc.Coefficients), "coefficient", "coefficients"))
	row("aic", "%.1f", doc.AIC)
	lag := fmt.Sprintf("lag-one autocorrelation %+.2f in row order", doc.ResidualLag1)
	if doc.ResidualLag1 > 0.3 && doc.Serial == nil {
		lag += " · rows look serially correlated, so the bands are too narrow: consider serial: in the spec"
	}
	row("residuals", "%s", lag)
	if sr := doc.Serial; sr != nil {
		how := "fixed"
		if sr.Estimated {
			how = "estimated"
		}
		row("serial", "AR(1) errors along %s · ρ %.3f (%s) · %s", sr.Order, sr.Rho, how, plural(sr.Stretches, "stretch", "stretches"))
	}
	row("smoothing", "%s", criterionText(doc))
	passes := plural(conv.Passes, "pass", "passes") + " over the rows"
	if conv.Converged {
		row("converged", "yes · %s · %s", plural(conv.Iterations, "iteration", "iterations"), passes)
	} else {
		row("converged", "NO · stopped after %s (relative change %.3g) · %s", plural(conv.Iterations, "iteration", "iterations"), conv.RelativeChange, passes)
	}
}

// droppedCounts lists dropped-row counts by column, largest first.
func droppedCounts(dropped map[string]int) string {
	cols := slices.SortedFunc(maps.Keys(dropped), func(a, b string) int {
		return cmp.Or(cmp.Compare(dropped[b], dropped[a]), cmp.Compare(a, b))
	})
	parts := make([]string, len(cols))
	for i, c := range cols {
		parts[i] = c + " " + count(dropped[c])
	}
	return strings.Join(parts, ", ")
}

// criterionText says how the smoothing strengths were found.
func criterionText(doc *fit.Document) string {
	c := doc.Criterion
	if c.Name == "none" || c.Name == "" {
		for _, t := range doc.Terms {
			if t.Kind == fit.Curve || t.Kind == fit.Surface {
				return "none chosen: the spec fixes every smoothing strength"
			}
		}
		return "none needed: the model has no curves or surfaces"
	}
	s := fmt.Sprintf("strengths chosen by %s · score %.6g · %s", c.Name, c.Value, plural(c.Iterations, "search step", "search steps"))
	if !c.Converged {
		s += " (stopped early)"
	}
	return s
}

// termLayout aligns the term rows: kind, then name, then the figures.
type termLayout struct {
	b    *strings.Builder
	name int // width of the name column
}

const kindWidth = 9 // "intercept"

func (l termLayout) row(kind, name, text string) {
	fmt.Fprintf(l.b, "  %-*s %-*s  %s\n", kindWidth, kind, l.name, name, text)
}

// more continues a term on the next line, under its figures.
func (l termLayout) more(text string) { l.row("", "", text) }

func writeTerms(b *strings.Builder, doc *fit.Document) {
	fmt.Fprintf(b, "terms on the %s link scale, each ± one standard error\n", doc.Link)
	l := termLayout{b: b, name: 10}
	for _, t := range doc.Terms {
		l.name = max(l.name, utf8.RuneCountInString(termName(t)))
		for lv := range t.Levels {
			l.name = max(l.name, utf8.RuneCountInString(lv)+2)
		}
	}
	l.row("intercept", "", plusMinus(doc.Intercept.Estimate, doc.Intercept.SE, false)+"  (at the reference levels, linear columns at 0)")
	for _, t := range doc.Terms {
		switch t.Kind {
		case fit.Curve:
			writeCurve(l, t)
		case fit.Surface:
			writeSurface(l, t)
		case fit.Linear:
			if t.Estimate != nil && t.SE != nil {
				l.row("linear", t.Name, plusMinus(*t.Estimate, *t.SE, true)+" per unit of "+t.Columns[0])
			} else {
				l.row("linear", t.Name, "no estimate")
			}
		case fit.Factor:
			writeFactor(l, t)
		default:
			l.row(string(t.Kind), t.Name, "")
		}
		if len(t.Aliased) > 0 {
			l.more("aliased, fixed at zero: " + strings.Join(t.Aliased, ", "))
		}
	}
}

func termName(t fit.TermResult) string {
	if t.Kind == fit.Surface && len(t.Columns) == 2 {
		return t.Columns[0] + " × " + t.Columns[1]
	}
	return t.Name
}

// smoothText gives a curve's or surface's EDF and smoothing strengths.
func smoothText(t fit.TermResult) string {
	word := "strength"
	if len(t.Smoothing) > 1 {
		word = "strengths"
	}
	s := fmt.Sprintf("edf %.2f · %s %s", t.EDF, word, strengths(t.Smoothing))
	switch {
	case t.SmoothingFixed:
		s += " (fixed)"
	case t.SmoothingLimit == "upper" && t.Kind == fit.Curve:
		s += " (the most allowed: the curve is a straight line)"
	case t.SmoothingLimit == "upper":
		s += " (the most allowed: the surface is as flat as its penalties permit)"
	case t.SmoothingLimit == "lower":
		s += " (the least allowed: as wiggly as the basis permits)"
	}
	return s
}

// writeCurve draws the curve's shape beside its EDF and strength, and
// gives the size of its effect under them.
func writeCurve(l termLayout, t fit.TermResult) {
	if t.Grid == nil || len(t.Grid.Fit) == 0 {
		l.row("curve", t.Name, smoothText(t))
		return
	}
	l.row("curve", t.Name, sparkline(t.Grid.Fit, sparkWidth)+"  "+smoothText(t))
	lo, hi := minMax(t.Grid.Fit)
	xlo, xhi := minMax(t.Grid.X)
	l.more(fmt.Sprintf("effect %s over %s %s", span(lo, hi, true), t.Columns[0], span(xlo, xhi, false)))
	writeInference(l, t)
}

// writeInference gives a curve's or surface's tests: is it zero, and does a
// straight line (a plane, for a surface) fit inside its 95% simultaneous
// band.
func writeInference(l termLayout, t fit.TermResult) {
	inf := t.Inference
	if inf == nil {
		return
	}
	zero := fmt.Sprintf("zero everywhere? p %s", pValue(inf.ZeroTest.PValue))
	shape := "line"
	switch {
	case t.Kind == fit.Surface && t.Interaction:
		shape = "constant"
	case t.Kind == fit.Surface:
		shape = "plane"
	}
	straight := fmt.Sprintf("no straight %s fits its %.0f%% band", shape, 100*inf.SimultaneousLevel)
	if inf.StraightFits {
		straight = fmt.Sprintf("a straight %s fits inside its %.0f%% band", shape, 100*inf.SimultaneousLevel)
	}
	l.more(zero + " · " + straight)
}

// pValue prints a p-value with two significant digits, or as a bound.
func pValue(p float64) string {
	switch {
	case p < 1e-4:
		return "< 0.0001"
	case p < 0.01:
		return fmt.Sprintf("= %.1g", p)
	}
	return fmt.Sprintf("= %.2f", p)
}

func writeSurface(l termLayout, t fit.TermResult) {
	l.row("surface", termName(t), smoothText(t))
	g := t.SurfaceGrid
	if g == nil || len(g.Fit) == 0 || len(t.Columns) != 2 {
		return
	}
	var all []float64
	for _, r := range g.Fit {
		all = append(all, r...)
	}
	lo, hi := minMax(all)
	x1lo, x1hi := minMax(g.X1)
	x2lo, x2hi := minMax(g.X2)
	l.more(fmt.Sprintf("effect %s over %s %s and %s %s", span(lo, hi, true),
		t.Columns[0], span(x1lo, x1hi, false), t.Columns[1], span(x2lo, x2hi, false)))
	writeInference(l, t)
}

func writeFactor(l termLayout, t fit.TermResult) {
	if t.Shrunk {
		head := "levels shrunk towards zero (a random effect per level)"
		if t.LevelVariance != nil {
			head += fmt.Sprintf(" · level sd %.3g · edf %.1f of %d levels", math.Sqrt(*t.LevelVariance), t.EDF, len(t.Levels))
		}
		l.row("factor", t.Name, head)
		for _, lv := range levelOrder(t.Levels) {
			e := t.Levels[lv]
			l.row("", "  "+lv, plusMinus(e.Estimate, e.SE, true))
		}
		return
	}
	l.row("factor", t.Name, "levels compared with "+t.Reference)
	for _, lv := range levelOrder(t.Levels) {
		e := t.Levels[lv]
		l.row("", "  "+lv, plusMinus(e.Estimate, e.SE, true))
	}
}

// levelOrder lists factor levels in the engine's coding order.
func levelOrder(levels map[string]fit.Estimate) []string {
	return fit.SortLevels(slices.Collect(maps.Keys(levels)))
}
