package main

import (
	"fmt"
	"io"
	"strconv"
	"strings"

	"github.com/curvewatch/curvewatch/fit"
)

// maxLinesListed is how many line numbers the report lists per kind of row.
const maxLinesListed = 5

// predictTally counts what happened to the rows.
type predictTally struct {
	rows, predicted, missing, outside int
	missingLines, outsideLines        []int64
}

func (t *predictTally) add(line int64, missing, outside bool) {
	t.rows++
	switch {
	case missing:
		t.missing++
		if len(t.missingLines) < maxLinesListed {
			t.missingLines = append(t.missingLines, line)
		}
	default:
		t.predicted++
		if outside {
			t.outside++
			if len(t.outsideLines) < maxLinesListed {
				t.outsideLines = append(t.outsideLines, line)
			}
		}
	}
}

// report writes what predict did, in the layout of the fit summary.
func (t *predictTally) report(w io.Writer, doc *fit.Document, allowedUnconverged bool) error {
	var b strings.Builder
	fmt.Fprintf(&b, "model %s · %s read\n", doc.Model, plural(t.rows, "row", "rows"))
	row := func(label, format string, args ...any) {
		fmt.Fprintf(&b, "  %-12s %s\n", label, fmt.Sprintf(format, args...))
	}
	if !doc.Convergence.Converged && allowedUnconverged {
		row("CAUTION", "the fit did not converge; these predictions come from it because of --allow-unconverged")
	}
	row("predicted", "%s", count(t.predicted))
	if t.missing > 0 {
		row("left empty", "%s with a missing covariate (%s)", count(t.missing), lineList(t.missingLines, t.missing))
	} else {
		row("left empty", "0")
	}
	if t.outside > 0 {
		row("extrapolated", "%s outside the fitted covariate range (%s):", count(t.outside), lineList(t.outsideLines, t.outside))
		row("", "the curves continue there as straight lines; treat these with care")
	} else {
		row("extrapolated", "0: every covariate is within the fitted range")
	}
	_, err := io.WriteString(w, b.String())
	return err
}

// lineList names the first few lines of n.
func lineList(lines []int64, n int) string {
	parts := make([]string, len(lines))
	for i, l := range lines {
		parts[i] = strconv.FormatInt(l, 10)
	}
	s := "line"
	if n > 1 {
		s = "lines"
	}
	s += " " + strings.Join(parts, ", ")
	if n > len(lines) {
		s += " and " + count(n-len(lines)) + " more"
	}
	return s
}
