package fit

import (
	"fmt"
	"math"
	"slices"
)

// CompareError is why two documents cannot be compared. Compare returns
// one instead of a verdict whenever the fits are not two fits of the same
// model on separate data.
type CompareError struct {
	// Reason is one of the Reason* constants.
	Reason string
	// Which is "reference", "candidate" or "" (both, or the pair).
	Which string
	// Term names the term concerned, if any.
	Term string
	Err  error
}

// Reasons a comparison is refused.
const (
	ReasonFormat      = "format"      // an unknown or newer document format
	ReasonConvergence = "convergence" // a fit that did not converge
	ReasonDamaged     = "damaged"     // coefficients, covariance or bases missing
	ReasonStructure   = "structure"   // different model specs
	ReasonRange       = "range"       // no covariate range in common
	ReasonOverlap     = "overlap"     // overlapping rows or windows
)

func (e *CompareError) Error() string {
	msg := e.Err.Error()
	if e.Term != "" {
		msg = fmt.Sprintf("term %q: %s", e.Term, msg)
	}
	if e.Which != "" {
		msg = fmt.Sprintf("the %s fit: %s", e.Which, msg)
	}
	return "cannot compare: " + msg
}

func (e *CompareError) Unwrap() error { return e.Err }

func refuse(reason, which, term, format string, args ...any) *CompareError {
	return &CompareError{Reason: reason, Which: which, Term: term, Err: fmt.Errorf(format, args...)}
}

// checkDocument checks that one document can take part in a comparison: a
// known format, a converged fit, a full covariance and the bases of its
// curves and surfaces.
func checkDocument(doc *Document, which string) error {
	if doc == nil {
		return refuse(ReasonDamaged, which, "", "no document")
	}
	switch {
	case doc.Format == "":
		return refuse(ReasonFormat, which, "", "the document has no format version (this curvewatch reads %q)", FormatVersion)
	case doc.Format != FormatVersion:
		return refuse(ReasonFormat, which, "", "document format %q is unknown or newer than this curvewatch reads (%q); compare with the curvewatch that wrote it, or refit", doc.Format, FormatVersion)
	}
	if !doc.Convergence.Converged {
		return refuse(ReasonConvergence, which, "", "the fit did not converge (PIRLS stopped after %d iterations, last relative change %.3g); its estimates are not a fit to compare — refit it",
			doc.Convergence.Iterations, doc.Convergence.RelativeChange)
	}
	if doc.Spec == nil {
		return refuse(ReasonDamaged, which, "", "the document lacks its model spec")
	}
	pc := len(doc.Coefficients)
	if pc == 0 {
		return refuse(ReasonDamaged, which, "", "the document lacks its coefficients")
	}
	if len(doc.Covariance) != pc {
		return refuse(ReasonDamaged, which, "", "the document lacks the covariance of its coefficients (%d rows for %d coefficients)", len(doc.Covariance), pc)
	}
	for i, row := range doc.Covariance {
		if len(row) != pc {
			return refuse(ReasonDamaged, which, "", "covariance row %d has %d entries, want %d", i, len(row), pc)
		}
		if !(row[i] >= 0) || math.IsInf(row[i], 0) {
			return refuse(ReasonDamaged, which, "", "covariance diagonal entry %d is %g", i, row[i])
		}
	}
	for i := range doc.Terms {
		tr := &doc.Terms[i]
		start, q := tr.Coefficients[0], tr.Coefficients[1]
		if start < 1 || q < 0 || start+q > pc {
			return refuse(ReasonDamaged, which, tr.Name, "coefficient range %v outside the %d coefficients", tr.Coefficients, pc)
		}
		switch tr.Kind {
		case Curve, Surface:
			if tr.Basis == nil || len(tr.Basis.Margins) != len(tr.Columns) || len(tr.Range) != len(tr.Columns) {
				return refuse(ReasonDamaged, which, tr.Name, "the document lacks the term's basis or covariate range")
			}
		case Linear:
			if q == 1 && len(tr.Range) != 1 {
				return refuse(ReasonDamaged, which, tr.Name, "the document lacks the term's covariate range")
			}
		}
	}
	return nil
}

// checkStructure checks that two documents are fits of the same model:
// the same family, link, response, weights and offset, and the same terms
// (kind, columns, basis, size, knots rule, period, by, shrink). Knot
// positions may differ (quantile knots follow each window's data); each fit
// is evaluated through its own basis. It returns warnings for differences
// that do not prevent a comparison.
func checkStructure(ref, cand *Document) ([]string, error) {
	diff := func(what string, a, b any) error {
		return refuse(ReasonStructure, "", "", "the fits are of different models: %s %v in the reference, %v in the candidate", what, a, b)
	}
	rs, cs := ref.Spec, cand.Spec
	switch {
	case ref.Family != cand.Family:
		return nil, diff("family", ref.Family, cand.Family)
	case ref.Link != cand.Link:
		return nil, diff("link", ref.Link, cand.Link)
	case rs.Response != cs.Response:
		return nil, diff("response", quoted(rs.Response), quoted(cs.Response))
	case rs.Weights != cs.Weights:
		return nil, diff("weights", quoted(rs.Weights), quoted(cs.Weights))
	case rs.Offset != cs.Offset:
		return nil, diff("offset", quoted(rs.Offset), quoted(cs.Offset))
	case len(rs.Terms) != len(cs.Terms):
		return nil, diff("number of terms", len(rs.Terms), len(cs.Terms))
	}
	for i := range rs.Terms {
		a, b := rs.Terms[i], cs.Terms[i]
		if d := termSpecDiff(a, b); d != "" {
			return nil, refuse(ReasonStructure, "", a.Name(), "the fits are of different models: term %d differs in %s", i+1, d)
		}
	}
	var warn []string
	if (rs.Serial == nil) != (cs.Serial == nil) {
		warn = append(warn, "one fit models AR(1) serial correlation and the other does not: their standard errors are not alike")
	}
	byName := map[string]*TermResult{}
	for i := range cand.Terms {
		byName[cand.Terms[i].Name] = &cand.Terms[i]
	}
	seen := map[string]bool{}
	for i := range ref.Terms {
		a := &ref.Terms[i]
		b := byName[a.Name]
		seen[a.Name] = true
		if b == nil {
			if a.By != "" {
				continue // a by-level curve of a level the candidate lacks: a warning later
			}
			return nil, refuse(ReasonStructure, "", a.Name, "the term is in the reference fit but not in the candidate")
		}
		if d := termResultDiff(a, b); d != "" {
			return nil, refuse(ReasonStructure, "", a.Name, "the fits are of different models: %s", d)
		}
	}
	for i := range cand.Terms {
		if b := &cand.Terms[i]; !seen[b.Name] && b.By == "" {
			return nil, refuse(ReasonStructure, "", b.Name, "the term is in the candidate fit but not in the reference")
		}
	}
	return warn, nil
}

func quoted(s string) string {
	if s == "" {
		return "(none)"
	}
	return fmt.Sprintf("%q", s)
}

// termSpecDiff names the first difference between two term specs.
func termSpecDiff(a, b TermSpec) string {
	switch {
	case a.Kind != b.Kind:
		return fmt.Sprintf("kind (%s, %s)", a.Kind, b.Kind)
	case !slices.Equal(a.Columns, b.Columns):
		return fmt.Sprintf("columns (%v, %v)", a.Columns, b.Columns)
	case a.Basis != b.Basis || !slices.Equal(a.Bases, b.Bases):
		return fmt.Sprintf("basis (%s%v, %s%v)", a.Basis, a.Bases, b.Basis, b.Bases)
	case !slices.Equal(a.Size, b.Size):
		return fmt.Sprintf("size (%v, %v)", a.Size, b.Size)
	case a.Knots != b.Knots:
		return fmt.Sprintf("knots (%s, %s)", a.Knots, b.Knots)
	case !slices.Equal(a.Period, b.Period) || !slices.EqualFunc(a.Periods, b.Periods, slices.Equal):
		return fmt.Sprintf("period (%v%v, %v%v)", a.Period, a.Periods, b.Period, b.Periods)
	case a.By != b.By:
		return fmt.Sprintf("by (%s, %s)", quoted(a.By), quoted(b.By))
	case a.Shrink != b.Shrink:
		return fmt.Sprintf("shrink (%v, %v)", a.Shrink, b.Shrink)
	}
	return ""
}

// termResultDiff names a structural difference between two fitted terms of
// the same name.
func termResultDiff(a, b *TermResult) string {
	switch {
	case a.Kind != b.Kind:
		return fmt.Sprintf("kind %s in the reference, %s in the candidate", a.Kind, b.Kind)
	case !slices.Equal(a.Columns, b.Columns):
		return fmt.Sprintf("columns %v in the reference, %v in the candidate", a.Columns, b.Columns)
	case a.Interaction != b.Interaction:
		return fmt.Sprintf("interaction-only %v in the reference, %v in the candidate", a.Interaction, b.Interaction)
	case a.Shrunk != b.Shrunk:
		return fmt.Sprintf("shrunk %v in the reference, %v in the candidate", a.Shrunk, b.Shrunk)
	}
	if a.Basis != nil && b.Basis != nil {
		if len(a.Basis.Margins) != len(b.Basis.Margins) {
			return fmt.Sprintf("%d basis margins in the reference, %d in the candidate", len(a.Basis.Margins), len(b.Basis.Margins))
		}
		for k := range a.Basis.Margins {
			ma, mb := a.Basis.Margins[k], b.Basis.Margins[k]
			if ma.Basis != mb.Basis || ma.Periodic != mb.Periodic {
				return fmt.Sprintf("basis %s (periodic %v) in the reference, %s (periodic %v) in the candidate", ma.Basis, ma.Periodic, mb.Basis, mb.Periodic)
			}
		}
	}
	return ""
}

// checkOverlap compares the two fits' row sets and time windows. Disjoint
// fits pass with a zero note. Overlapping ones are refused unless
// allow is set; then the note carries the correction. Fits of the same
// rows are always refused.
//
// The correction: two samples of sizes n_a and n_b sharing k rows give
// estimates with Cov(β̂_a, β̂_b) ≈ (k/(n_a n_b))·nV for V the covariance of
// an estimate from n rows (exact for means and least-squares fits with a
// common design), so Var(β̂_a − β̂_b) ≈ V_a + V_b − 2k/(n_a n_b)·nV =
// (1 − s)(V_a + V_b) with s = 2k/(n_a + n_b). The bottom-k sketches
// estimate the resemblance J = k/(n_a + n_b − k) (Broder 1997), whence
// s = 2J/(1 + J), whatever the sizes.
func checkOverlap(ref, cand *Document, allow bool) (OverlapNote, []string, error) {
	var note OverlapNote
	var warn []string
	j, identical, err := RowOverlap(&ref.Data, &cand.Data)
	if err != nil {
		return note, nil, refuse(ReasonOverlap, "", "", "%v: cannot tell whether the fits share rows", err)
	}
	note.Resemblance, note.Identical = j, identical
	rw, cw := ref.Data.Window, cand.Data.Window
	if rw != nil && cw != nil {
		if rw.Column != cw.Column {
			warn = append(warn, fmt.Sprintf("the fits' time windows are on different columns (%q, %q), so their overlap in time cannot be checked", rw.Column, cw.Column))
		} else {
			note.WindowsOverlap = rw.First <= cw.Last && cw.First <= rw.Last
		}
	}
	if identical || j >= 1 {
		return note, nil, refuse(ReasonOverlap, "", "", "the two fits used the same rows (fingerprint %s, %d rows): there is nothing to compare", ref.Data.Fingerprint, ref.Data.RowsUsed)
	}
	if j == 0 && !note.WindowsOverlap {
		return note, warn, nil
	}
	what := ""
	switch {
	case j > 0 && note.WindowsOverlap:
		what = fmt.Sprintf("the fits share rows (estimated resemblance %.3f) and their time windows overlap", j)
	case j > 0:
		what = fmt.Sprintf("the fits share rows (estimated resemblance %.3f)", j)
	default:
		what = fmt.Sprintf("the fits' time windows on %q overlap ([%g, %g] and [%g, %g])", rw.Column, rw.First, rw.Last, cw.First, cw.Last)
	}
	if !allow {
		return note, nil, refuse(ReasonOverlap, "", "", "%s: their estimates are not independent, so a comparison treating them as independent would understate shifts' uncertainty; compare disjoint windows, or allow overlap to apply the documented correction", what)
	}
	note.Shared = 2 * j / (1 + j)
	if note.Shared > 0.95 {
		return note, nil, refuse(ReasonOverlap, "", "", "%s: about %.0f%% of the rows are shared, too many for a meaningful comparison", what, 100*note.Shared)
	}
	if j > 0 {
		note.Correction = fmt.Sprintf("%s; shared fraction s = 2J/(1+J) = %.3f, so every difference's variance is taken as (1 − s)(V_ref + V_cand)", what, note.Shared)
	} else {
		note.Correction = fmt.Sprintf("%s, but the row sketches found no shared rows; compared as independent samples", what)
	}
	return note, warn, nil
}
