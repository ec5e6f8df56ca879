package main

import (
	"fmt"
	"io"
	"maps"
	"math"
	"slices"
	"strconv"
	"strings"
	"unicode/utf8"

	"github.com/curvewatch/curvewatch/fit"
)

// compareNames is what the human report says about where things came from:
// file names without their folders, so that the same comparison always
// prints the same text.
type compareNames struct {
	reference, candidate, data string
	heldOut                    bool
	link                       string
}

// compareCaution is the report's last line: what its verdicts are and are not.
const compareCaution = "statistical evidence, not a compliance determination"

// reportWidth is the column the labelled lines of the report are filled
// to, in characters.
const reportWidth = 100

// fillSegments writes text after first, filled to width characters. It
// breaks between the " · " separated parts of text where it can (ending
// the line with the separator) and between words inside a part that is
// too long; continuation lines are indented to first's width.
func fillSegments(text, first string, width int) string {
	indent := strings.Repeat(" ", utf8.RuneCountInString(first))
	var b strings.Builder
	line := first
	fits := func(s string) bool { return utf8.RuneCountInString(line+s) <= width }
	parts := strings.Split(text, " · ")
	for i, part := range parts {
		sep := ""
		if i > 0 {
			sep = " · "
		}
		if fits(sep + part) {
			line += sep + part
			continue
		}
		if i > 0 {
			b.WriteString(line + " ·\n")
			line = indent
		}
		for j, word := range strings.Fields(part) {
			gap := " "
			if j == 0 {
				gap = ""
			}
			if line != indent && line != first && !fits(gap+word) {
				b.WriteString(line + "\n")
				line, gap = indent, ""
			}
			line += gap + word
		}
	}
	return b.String() + line + "\n"
}

// maxIntervals is how many intervals outside the band a term row lists.
const maxIntervals = 3

// writeCompareReport writes the comparison in words: the two fits, the
// tolerance and the overlap; a table of the terms; the level, the noise
// and the predictions; then what breached and what to do.
func writeCompareReport(w io.Writer, rep *fit.ShiftReport, names compareNames) error {
	var b strings.Builder
	row := func(label, format string, args ...any) {
		b.WriteString(fillSegments(fmt.Sprintf(format, args...), fmt.Sprintf("  %-11s ", label), reportWidth))
	}
	fmt.Fprintf(&b, "compare %s: has anything changed from the reference to the candidate?\n", rep.Model)
	fixedScale := rep.Noise == nil
	row("reference", "%s", fitLine(names.reference, rep.Reference, fixedScale))
	row("candidate", "%s", fitLine(names.candidate, rep.Candidate, fixedScale))
	row("tolerance", "%s", toleranceLine(rep.Tolerance, rep.Tests, names.link, rep.Degradation != nil))
	row("overlap", "%s", overlapLine(rep.Overlap, rep.Reference.Window != nil && rep.Candidate.Window != nil))
	b.WriteString("\n")
	writeShiftTable(&b, rep.Terms)
	b.WriteString("\n")
	row("level", "%s", levelLine(rep.Level))
	row("noise", "%s", noiseLine(rep.Noise))
	row("prediction", "%s", predictionLine(rep.Degradation, rep.Tolerance, names))
	for _, msg := range rep.Warnings {
		row("warning", "%s", msg)
	}
	b.WriteString("\n")
	row("result", "%s", resultLine(rep))
	row("caution", "%s", compareCaution)
	_, err := io.WriteString(w, b.String())
	return err
}

// fitLine describes one of the compared fits.
func fitLine(file string, f fit.FitBrief, fixedScale bool) string {
	s := file + " · " + plural(f.N, "row", "rows")
	if win := f.Window; win != nil {
		s += fmt.Sprintf(" · %s %s", win.Column, span(win.First, win.Last, false))
	}
	s += fmt.Sprintf(" · %.1f%% of the deviance explained", 100*f.DevianceExplained)
	if !fixedScale {
		s += " · scale " + strconv.FormatFloat(f.Scale, 'g', 3, 64)
	}
	return s
}

// toleranceLine gives the tolerance in one line.
func toleranceLine(t fit.Tolerance, tests int, link string, predictive bool) string {
	adjust := "Holm across " + plural(tests, "test", "tests")
	if t.Multiplicity == "none" {
		adjust = "no multiplicity adjustment"
	}
	s := fmt.Sprintf("a shift breaches outside the %s%% simultaneous band and above %s (%s link scale) · %s",
		percent(t.Level), strconv.FormatFloat(t.PracticalShift, 'g', 4, 64), link, adjust)
	if predictive {
		s += " · predictive ratio above " + strconv.FormatFloat(1+t.DevianceIncrease, 'f', -1, 64)
	}
	return s
}

// percent formats a fraction as a percentage without trailing zeros.
func percent(x float64) string { return strconv.FormatFloat(100*x, 'f', -1, 64) }

// overlapLine says whether the fits share rows and what was done about it.
func overlapLine(o fit.OverlapNote, windows bool) string {
	switch {
	case o.Shared > 0:
		return fmt.Sprintf("about %.0f%% of the rows are shared (allowed): each difference's variance is scaled by 1 − %.3f", 100*o.Shared, o.Shared)
	case o.WindowsOverlap:
		return "the time windows overlap, but the row sketches find no shared rows: compared as independent"
	case windows:
		return "none: disjoint time windows, and the row sketches find no shared rows"
	}
	return "none: the row sketches find no shared rows"
}

// shiftTable lays out the term table: a header, then a row per term and
// per factor level; right-aligned columns are numbers.
type shiftTable struct {
	rows  [][]string
	right []bool
}

var shiftColumns = []string{"term", "verdict", "score", "size", "outside the band", "edf", "shape"}

func writeShiftTable(b *strings.Builder, terms []fit.TermShift) {
	t := shiftTable{rows: [][]string{shiftColumns}, right: []bool{false, false, true, true, false, true, false}}
	var notes []string
	for _, ts := range terms {
		score, edf := emptyCell, emptyCell
		if ts.Verdict != fit.VerdictNotCompared {
			score = strconv.FormatFloat(ts.Score, 'f', 2, 64)
		}
		if ts.Kind == fit.Curve || ts.Kind == fit.Surface {
			edf = strconv.FormatFloat(ts.EDFChange, 'f', 2, 64)
			if ts.EDFChange >= 0 {
				edf = "+" + edf
			}
		}
		t.rows = append(t.rows, []string{ts.Name, verdictWord(ts.Verdict), score, shiftSize(ts.Size, ts.Verdict), shiftWhere(ts), edf, ts.ShapeChange})
		for _, lv := range fit.SortLevels(slices.Collect(maps.Keys(ts.Levels))) {
			ls := ts.Levels[lv]
			t.rows = append(t.rows, []string{"  " + lv, verdictWord(ls.Verdict), "", shiftSize(math.Abs(ls.Delta), ls.Verdict),
				"Δ " + plusMinus(ls.Delta, ls.SE, true), "", ""})
		}
		if ts.Note != "" {
			notes = append(notes, ts.Name+": "+ts.Note)
		}
	}
	t.write(b)
	for _, n := range notes {
		b.WriteString("  note: " + n + "\n")
	}
}

const emptyCell = "—"

func (t shiftTable) write(b *strings.Builder) {
	width := make([]int, len(t.right))
	for _, r := range t.rows {
		for i, c := range r {
			width[i] = max(width[i], utf8.RuneCountInString(c))
		}
	}
	for _, r := range t.rows {
		var line strings.Builder
		line.WriteString(" ")
		for i, c := range r {
			pad := strings.Repeat(" ", width[i]-utf8.RuneCountInString(c))
			line.WriteString(" ")
			if t.right[i] {
				line.WriteString(pad + c)
			} else {
				line.WriteString(c + pad)
			}
			line.WriteString(" ")
		}
		b.WriteString(strings.TrimRight(line.String(), " ") + "\n")
	}
}

// verdictWord is a verdict as the table shows it: a breach in capitals.
func verdictWord(v string) string {
	if v == fit.VerdictShifted {
		return "SHIFTED"
	}
	return v
}

// shiftSize formats a shift size on the link scale with three decimals.
func shiftSize(x float64, verdict string) string {
	if verdict == fit.VerdictNotCompared || math.IsNaN(x) {
		return emptyCell
	}
	return strconv.FormatFloat(x, 'f', 3, 64)
}

// shiftWhere says where a term's shift left its band: covariate intervals for a
// curve, a share of the grid for a surface.
func shiftWhere(ts fit.TermShift) string {
	switch {
	case len(ts.Outside) > 0:
		d := 4
		if len(ts.Common) > 0 {
			d = decimalsFor(ts.Common[0][1]-ts.Common[0][0], 3)
		}
		parts := make([]string, 0, maxIntervals+1)
		for i, iv := range ts.Outside {
			if i == maxIntervals {
				parts = append(parts, fmt.Sprintf("and %d more", len(ts.Outside)-maxIntervals))
				break
			}
			parts = append(parts, strconv.FormatFloat(iv[0], 'f', d, 64)+" … "+strconv.FormatFloat(iv[1], 'f', d, 64))
		}
		return strings.Join(parts, ", ")
	case ts.Kind == fit.Surface && ts.OutsideFraction > 0:
		return fmt.Sprintf("%.0f%% of the common grid", 100*ts.OutsideFraction)
	}
	return emptyCell
}

// levelLine compares the model's overall level.
func levelLine(l fit.LevelShift) string {
	p := l.PAdjusted
	if p == 0 {
		p = l.PValue
	}
	return fmt.Sprintf("%s · Δ %s (from %s to %s; adjusted p %s)", verdictWord(l.Verdict), plusMinus(l.Delta, l.SE, true),
		strconv.FormatFloat(l.Reference, 'g', 4, 64), strconv.FormatFloat(l.Candidate, 'g', 4, 64), pValue(p))
}

// noiseLine compares the scale estimates.
func noiseLine(n *fit.NoiseChange) string {
	if n == nil {
		return "not compared: the family's scale is fixed at 1"
	}
	return fmt.Sprintf("%s · the candidate's scale is %s × the reference's (F test p %s)",
		n.Verdict, strconv.FormatFloat(n.Ratio, 'f', 2, 64), pValue(n.PValue))
}

// predictionLine gives the predictive check, or how to ask for it.
func predictionLine(d *fit.Degradation, tol fit.Tolerance, names compareNames) string {
	if d == nil {
		return "not checked: add --data with the candidate's rows to see how well the reference still predicts them"
	}
	g := func(x float64) string { return strconv.FormatFloat(x, 'f', 1, 64) }
	limit := strconv.FormatFloat(1+tol.DevianceIncrease, 'f', -1, 64)
	verdict := "within the limit " + limit
	if d.Breach {
		verdict = "BREACH, above " + limit
	}
	own := "candidate " + g(d.CandidateDeviance) + " + optimism " + g(d.Optimism) + " (2·scale·edf)"
	if names.heldOut {
		own = "candidate " + g(d.CandidateDeviance) + " (held-out rows: no optimism)"
	}
	line := fmt.Sprintf("ratio %s · %s · %s of %s · deviance: reference %s, %s",
		strconv.FormatFloat(d.Ratio, 'f', 3, 64), verdict, plural(d.Rows, "row", "rows"), names.data, g(d.ReferenceDeviance), own)
	if d.Extrapolated > 0 {
		line += fmt.Sprintf(" · %s outside the reference's covariate range (the reference extrapolates there, which alone raises the ratio)", plural(d.Extrapolated, "row lies", "rows lie"))
	}
	if d.Skipped > 0 {
		line += fmt.Sprintf(" · %s skipped for a missing value", plural(d.Skipped, "row", "rows"))
	}
	return line
}

// resultLine says whether anything breached, and what to do.
func resultLine(rep *fit.ShiftReport) string {
	var breached, small []string
	for _, ts := range rep.Terms {
		switch ts.Verdict {
		case fit.VerdictShifted:
			breached = append(breached, ts.Name+" shifted")
		case fit.VerdictSmall:
			small = append(small, ts.Name)
		}
	}
	switch rep.Level.Verdict {
	case fit.VerdictShifted:
		breached = append(breached, "the level shifted")
	case fit.VerdictSmall:
		small = append(small, "the level")
	}
	if d := rep.Degradation; d != nil && d.Breach {
		breached = append(breached, "the reference predicts the candidate's rows worse")
	}
	if rep.Breach {
		if len(breached) == 0 {
			breached = append(breached, "see the JSON report")
		}
		return "BREACH: " + strings.Join(breached, "; ") + ". Compare the curves of the two fits (the JSON report holds both on a common grid) before relying on the reference."
	}
	s := "within tolerance: nothing breached"
	if len(small) > 0 {
		s += "; real but small changes in " + strings.Join(small, ", ")
	}
	return s + "."
}
