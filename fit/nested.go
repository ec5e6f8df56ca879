package fit

import (
	"context"
	"errors"
	"fmt"
	"maps"
	"math"
	"slices"
	"strings"

	"gonum.org/v1/gonum/mathext"
	"gonum.org/v1/gonum/stat/distuv"
)

// NestedComparison compares a fit with the fit of the same model without
// some of its terms: how much deviance the dropped terms explain, how many
// degrees of freedom they use, whether the difference is more than chance
// would give, and which fit has the lower AIC. See CompareNested.
type NestedComparison struct {
	// Dropped names the terms the reduced model lacks, in the full
	// model's order.
	Dropped []string   `json:"dropped"`
	Full    NestedSide `json:"full"`
	Reduced NestedSide `json:"reduced"`
	// DevianceChange is ΔD = D_reduced − D_full: the deviance the dropped
	// terms explain (positive unless a penalised fit moved the other way).
	DevianceChange float64 `json:"deviance_change"`
	// DFChange is Δdf = edf_full − edf_reduced: the (effective) degrees of
	// freedom the dropped terms use.
	DFChange float64 `json:"df_change"`
	// Test is "likelihood-ratio" (known scale: ΔD against χ²(Δdf)), "F"
	// (estimated scale: (ΔD/Δdf)/φ̂_full against F(Δdf, DenominatorDF)) or
	// "none" (Δdf ≤ NestedMinDF: nothing to test; Statistic and PValue are
	// then absent).
	Test string `json:"test"`
	// Statistic is ΔD for the likelihood-ratio test, the F ratio for the F
	// test.
	Statistic *float64 `json:"statistic,omitempty"`
	// PValue is the upper-tail probability of Statistic under the
	// reference distribution (1 when Statistic ≤ 0).
	PValue *float64 `json:"p_value,omitempty"`
	// DenominatorDF is the full fit's residual degrees of freedom n − edf,
	// the second F degrees of freedom (F test only).
	DenominatorDF float64 `json:"denominator_df,omitempty"`
	// Scale is φ̂_full, the full fit's Pearson scale estimate the F ratio
	// divides by (F test only).
	Scale float64 `json:"scale,omitempty"`
	// Approximate is set when the full model has a curve or surface: Δdf is
	// then a difference of effective degrees of freedom, not a count of
	// coefficients, and the reference distribution only an approximation.
	Approximate bool `json:"approximate"`
	// LowerAIC says which fit has the lower AIC: "full", "reduced" or
	// "equal".
	LowerAIC string `json:"lower_aic"`
	// Notes explain anything unusual about the comparison.
	Notes []string `json:"notes,omitempty"`
}

// NestedSide is one of the two fits of a NestedComparison.
type NestedSide struct {
	Model      string   `json:"model"`
	Terms      []string `json:"terms"`
	Deviance   float64  `json:"deviance"`
	EDF        float64  `json:"edf"`
	ResidualDF float64  `json:"residual_df"`
	AIC        float64  `json:"aic"`
}

// NestedMinDF is the smallest Δdf CompareNested tests: at or below it the
// dropped terms use no degrees of freedom (for example, every coefficient
// of theirs was aliased, or with penalised terms the remaining curves grew
// wigglier by as much as the dropped terms used), and there is no test.
const NestedMinDF = 1e-6

// CompareNested compares full with reduced, the fit of the same model
// without one or more of its terms, by the change in deviance (McCullagh &
// Nelder 1989, "Generalized Linear Models", 2nd ed., §4.5, analysis of
// deviance):
//
//	ΔD = D_reduced − D_full,  Δdf = edf_full − edf_reduced.
//
// With a known scale (poisson, binomial: φ = 1) the likelihood-ratio
// statistic ΔD is referred to χ²(Δdf). With an estimated scale (gaussian,
// gamma) the statistic is
//
//	F = (ΔD / Δdf) / φ̂_full,
//
// φ̂_full the full fit's Pearson scale, referred to F(Δdf, n − edf_full).
// For a gaussian model with identity link and no curves or surfaces this
// is the classical nested-model F test of linear regression, and exact; for
// the other families both tests rest on large-sample theory.
//
// With curves or surfaces the degrees of freedom are effective ones (the
// trace of the influence matrix, not a count of coefficients), Δdf is not
// an integer, and the χ² and F distributions are used with that real Δdf.
// The test is then approximate (it also ignores that the smoothing
// strengths were chosen from the same data); Approximate says so.
//
// When Δdf ≤ NestedMinDF there is nothing to test: Test is "none",
// Statistic and PValue are absent and Notes say why; LowerAIC still
// compares the fits. (A p-value of 1 would wrongly suggest the dropped
// terms are useless when the full model may fit better with no more
// degrees of freedom.)
//
// The two fits must model the same response with the same family, link,
// prior weights and offset, over the same rows (same n and null deviance;
// fit the reduced model to SameRows(src, fullSpec)), both must have
// converged, and every term of reduced must be a term of full of the same
// kind, with at least one term of full missing from reduced. Otherwise
// CompareNested returns an error saying what differs.
func CompareNested(full, reduced *Document) (*NestedComparison, error) {
	dropped, err := checkNested(full, reduced)
	if err != nil {
		return nil, err
	}
	c := &NestedComparison{
		Dropped:        dropped,
		Full:           nestedSide(full),
		Reduced:        nestedSide(reduced),
		DevianceChange: reduced.Deviance - full.Deviance,
		DFChange:       full.EDFTotal - reduced.EDFTotal,
		LowerAIC:       "equal",
	}
	switch {
	case full.AIC < reduced.AIC:
		c.LowerAIC = "full"
	case reduced.AIC < full.AIC:
		c.LowerAIC = "reduced"
	}
	for _, t := range full.Terms {
		if t.Kind == Curve || t.Kind == Surface {
			c.Approximate = true
		}
	}
	if c.DFChange <= NestedMinDF {
		c.Test = "none"
		c.Notes = append(c.Notes, fmt.Sprintf("the dropped terms use no degrees of freedom (Δdf = %.3g), so there is no test; compare the AICs", c.DFChange))
		return c, nil
	}
	if c.DevianceChange < 0 {
		c.Notes = append(c.Notes, "the fit without the terms has the lower deviance (possible when smoothing strengths are chosen anew for each fit); the p-value is 1")
	}
	var stat, p float64
	if full.ScaleEstimated {
		c.Test = "F"
		c.Scale, c.DenominatorDF = full.Scale, full.ResidualDF
		stat = c.DevianceChange / c.DFChange / full.Scale
		p = fSurvival(stat, c.DFChange, full.ResidualDF)
	} else {
		c.Test = "likelihood-ratio"
		stat = c.DevianceChange
		p = distuv.ChiSquared{K: c.DFChange}.Survival(stat)
	}
	c.Statistic, c.PValue = &stat, &p
	return c, nil
}

// fSurvival is P(F > x) for F ~ F(d1, d2): the regularised incomplete beta
// function I_{d2/(d2+d1·x)}(d2/2, d1/2) (Abramowitz & Stegun 1964,
// 26.6.2), evaluated directly rather than as 1 − CDF so that small
// p-values keep their relative accuracy.
func fSurvival(x, d1, d2 float64) float64 {
	if x <= 0 {
		return 1
	}
	return mathext.RegIncBeta(d2/2, d1/2, d2/(d2+d1*x))
}

func nestedSide(d *Document) NestedSide {
	s := NestedSide{Model: d.Model, Terms: []string{}, Deviance: d.Deviance, EDF: d.EDFTotal, ResidualDF: d.ResidualDF, AIC: d.AIC}
	for _, t := range d.Terms {
		s.Terms = append(s.Terms, t.Name)
	}
	return s
}

// checkNested checks that reduced is full without some terms, fitted to
// the same rows, and returns the names of the dropped terms.
func checkNested(full, reduced *Document) ([]string, error) {
	if full == nil || reduced == nil {
		return nil, errors.New("compare nested fits: a fit document is missing (nil)")
	}
	what := fmt.Sprintf("compare %q with %q", full.Model, reduced.Model)
	for _, d := range []struct {
		role string
		doc  *Document
	}{{"full", full}, {"reduced", reduced}} {
		if d.doc.Spec == nil {
			return nil, fmt.Errorf("%s: the %s fit's document carries no model spec, so its response, weights and offset are unknown", what, d.role)
		}
		if !d.doc.Convergence.Converged {
			return nil, fmt.Errorf("%s: the %s fit did not converge; its deviance cannot be trusted", what, d.role)
		}
	}
	fs, rs := full.Spec, reduced.Spec
	for _, f := range []struct{ name, full, reduced string }{
		{"family", string(full.Family), string(reduced.Family)},
		{"link", string(full.Link), string(reduced.Link)},
		{"response", fs.Response, rs.Response},
		{"weights column", fs.Weights, rs.Weights},
		{"offset column", fs.Offset, rs.Offset},
	} {
		if f.full != f.reduced {
			return nil, fmt.Errorf("%s: the %s differs (%s in the full fit, %s in the reduced one); only fits of the same model with fewer terms can be compared", what, f.name, orNone(f.full), orNone(f.reduced))
		}
	}
	if full.N != reduced.N {
		return nil, fmt.Errorf("%s: the fits used different rows (n = %d in the full fit, %d in the reduced one); fit the reduced model to the rows the full one used (SameRows)", what, full.N, reduced.N)
	}
	if d0, d1 := full.NullDeviance, reduced.NullDeviance; math.Abs(d0-d1) > 1e-7*math.Max(math.Abs(d0), math.Abs(d1))+1e-300 {
		return nil, fmt.Errorf("%s: the fits used different rows (null deviance %.10g in the full fit, %.10g in the reduced one, with n = %d in both); fit the reduced model to the rows the full one used (SameRows)", what, d0, d1, full.N)
	}
	kinds := map[string]TermKind{}
	for _, t := range full.Terms {
		kinds[t.Name] = t.Kind
	}
	kept := map[string]bool{}
	for _, t := range reduced.Terms {
		k, ok := kinds[t.Name]
		if !ok {
			return nil, fmt.Errorf("%s: the reduced fit has a term the full one lacks: %s %s (the full fit's terms: %s)", what, t.Kind, t.Name, strings.Join(slices.Sorted(maps.Keys(kinds)), ", "))
		}
		if k != t.Kind {
			return nil, fmt.Errorf("%s: term %s is a %s in the full fit but a %s in the reduced one; the reduced model must keep its terms as they are", what, t.Name, k, t.Kind)
		}
		kept[t.Name] = true
	}
	var dropped []string
	for _, t := range full.Terms {
		if !kept[t.Name] {
			dropped = append(dropped, t.Name)
		}
	}
	if len(dropped) == 0 {
		return nil, fmt.Errorf("%s: the reduced fit has every term of the full one; nothing was dropped", what)
	}
	return dropped, nil
}

func orNone(s string) string {
	if s == "" {
		return "none"
	}
	return s
}

// UnknownTermsError reports term names WithoutTerms could not find.
type UnknownTermsError struct {
	Model   string
	Unknown []string
	// Terms lists the model's term names, as TermSpec.Name gives them.
	Terms []string
}

func (e *UnknownTermsError) Error() string {
	word := "term"
	if len(e.Unknown) > 1 {
		word = "terms"
	}
	q := make([]string, len(e.Unknown))
	for i, u := range e.Unknown {
		q[i] = fmt.Sprintf("%q", u)
	}
	have := "it has no terms"
	if len(e.Terms) > 0 {
		have = "its terms are " + strings.Join(e.Terms, ", ")
	}
	return fmt.Sprintf("model %q has no %s %s; %s", e.Model, word, strings.Join(q, ", "), have)
}

// WithoutTerms returns a copy of spec without the terms named in names
// (each as TermSpec.Name gives it: the column, or "a,b" for a surface, in
// either order), named "<name> without <names>". Removing every term
// leaves an intercept-only model. A name that matches no term gives an
// *UnknownTermsError listing the model's terms.
func WithoutTerms(spec *Spec, names []string) (*Spec, error) {
	if spec == nil {
		return nil, errors.New("fit: nil spec")
	}
	if len(names) == 0 {
		return nil, fmt.Errorf("model %q: no terms named to drop", spec.Name)
	}
	drop := make([]bool, len(spec.Terms))
	var unknown, all []string
	for _, t := range spec.Terms {
		all = append(all, t.Name())
	}
	for _, name := range names {
		found := false
		for i, t := range spec.Terms {
			if termNamed(t, name) {
				drop[i], found = true, true
			}
		}
		if !found && !slices.Contains(unknown, name) {
			unknown = append(unknown, name)
		}
	}
	if len(unknown) > 0 {
		return nil, &UnknownTermsError{Model: spec.Name, Unknown: unknown, Terms: all}
	}
	out := *spec
	out.Terms = nil
	var gone []string
	for i, t := range spec.Terms {
		if drop[i] {
			gone = append(gone, t.Name())
			continue
		}
		out.Terms = append(out.Terms, t)
	}
	out.Watch = maps.Clone(spec.Watch)
	out.Lines = maps.Clone(spec.Lines)
	out.Name = spec.Name + " without " + strings.Join(gone, ", ")
	return &out, nil
}

// termNamed reports whether name names t: its column, or its two columns
// joined by a comma in either order (spaces around the comma allowed).
func termNamed(t TermSpec, name string) bool {
	if t.Name() == name {
		return true
	}
	a, b, ok := strings.Cut(name, ",")
	if !ok || len(t.Columns) != 2 {
		return false
	}
	a, b = strings.TrimSpace(a), strings.TrimSpace(b)
	return (a == t.Columns[0] && b == t.Columns[1]) || (a == t.Columns[1] && b == t.Columns[0])
}

// SameRows wraps src so that it delivers only the rows a fit of full would
// use: those with every column full needs present (numeric cells finite,
// factor cells non-empty), by the same rule as Fit. A model with fewer terms
// fitted to it sees exactly the rows the full model saw, as CompareNested
// requires, even where a dropped term's column has missing values. The
// reduced fit's document then counts only those rows as read.
func SameRows(src Source, full *Spec) Source {
	numeric, text := full.Columns()
	return &sameRows{src: src, filter: rowFilter{numeric: numeric, text: text}}
}

type sameRows struct {
	src    Source
	filter rowFilter
}

func (s *sameRows) Columns() []string { return s.src.Columns() }

func (s *sameRows) Scan(ctx context.Context, need Need, fn func(*Block) error) error {
	wide := Need{Numeric: unionNames(need.Numeric, s.filter.numeric), Text: unionNames(need.Text, s.filter.text)}
	var keep []int
	var lines []int64
	out := &Block{Numeric: map[string][]float64{}, Text: map[string][]string{}}
	return s.src.Scan(ctx, wide, func(b *Block) error {
		var err error
		keep, err = s.filter.keep(b, keep, nil)
		if err != nil {
			return err
		}
		if len(keep) == b.Rows {
			return fn(b)
		}
		out.Rows = len(keep)
		for _, name := range need.Numeric {
			if col, ok := b.Numeric[name]; ok {
				out.Numeric[name] = gatherKept(out.Numeric[name][:0], col, keep)
			}
		}
		for _, name := range need.Text {
			if col, ok := b.Text[name]; ok {
				out.Text[name] = gatherKept(out.Text[name][:0], col, keep)
			}
		}
		out.Line = nil
		if b.Line != nil {
			lines = gatherKept(lines[:0], b.Line, keep)
			out.Line = lines
		}
		return fn(out)
	})
}

func gatherKept[T any](dst, col []T, rows []int) []T {
	for _, r := range rows {
		dst = append(dst, col[r])
	}
	return dst
}

func unionNames(a, b []string) []string {
	out := slices.Clone(a)
	for _, s := range b {
		if !slices.Contains(out, s) {
			out = append(out, s)
		}
	}
	return out
}
