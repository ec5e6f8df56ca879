package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math"
	"path/filepath"
	"strings"

	"github.com/curvewatch/curvewatch/fit"
)

// This file is `curvewatch fit --without TERM`: the model is fitted a second
// time without the named terms, on the same rows, and the two fits are
// compared (fit.CompareNested).

// keepLevel is the p-value below which the reading says the data support
// keeping the dropped terms.
const keepLevel = 0.05

// stringList is a flag that may be given more than once.
type stringList []string

func (l *stringList) String() string { return strings.Join(*l, ",") }

func (l *stringList) Set(v string) error {
	if strings.TrimSpace(v) == "" {
		return errors.New("needs a term name")
	}
	*l = append(*l, v)
	return nil
}

// Repeated defines a flag that may be given more than once; each value is
// appended to *p.
func (f *flags) Repeated(p *[]string, name, arg, usage string) {
	f.fs.Var((*stringList)(p), name, usage)
	f.order = append(f.order, flagDoc{name: name, arg: arg})
}

// OptionalFile defines a flag naming a file that may be left out.
func (f *flags) OptionalFile(p *string, name, arg, usage string) {
	f.fs.StringVar(p, name, "", usage)
	f.order = append(f.order, flagDoc{name: name, arg: arg})
}

// checkWithout checks the --without flags that need no files read.
func checkWithout(fl *flags, a fitArgs) error {
	if a.withoutOut == "" {
		return nil
	}
	if len(a.without) == 0 {
		return fl.usageError("--without-out needs --without TERM: it writes the comparison with the model without TERM")
	}
	o1, err1 := filepath.Abs(a.out)
	o2, err2 := filepath.Abs(a.withoutOut)
	if err1 == nil && err2 == nil && o1 == o2 {
		return fl.usageError("--without-out and --out name the same file, %s; give the comparison a file of its own", a.out)
	}
	return checkOutput(a.withoutOut, a.data, a.model)
}

// reducedSpec is spec without the terms --without names. A surface may be
// named as the summary shows it (a × b) or as a,b.
func reducedSpec(spec *fit.Spec, names []string) (*fit.Spec, error) {
	clean := make([]string, len(names))
	for i, n := range names {
		clean[i] = strings.TrimSpace(strings.ReplaceAll(n, "×", ","))
	}
	reduced, err := fit.WithoutTerms(spec, clean)
	var unknown *fit.UnknownTermsError
	if errors.As(err, &unknown) {
		return nil, (&flags{cmd: "fit"}).usageError("--without: %v", err)
	}
	return reduced, err
}

// fitWithout fits the reduced model to the rows the full fit used, prints
// the comparison after the summary and writes it to --without-out if asked.
func fitWithout(ctx context.Context, e *env, a fitArgs, spec, reduced *fit.Spec, src fit.Source, full *fit.Document, log *slog.Logger) error {
	label := "without " + strings.Join(droppedNames(spec, reduced), ", ")
	log.Debug("fitting the reduced model", "model", reduced.Name)
	prog := newProgress(e.stderr, a.quiet)
	doc, err := fit.Fit(ctx, reduced, fit.SameRows(src, spec), fit.Options{
		MaxIterations: a.maxIterations,
		Logger:        log,
		Progress: func(p fit.Progress) {
			prog.show("fit "+label+": "+strings.TrimPrefix(fitProgressLine(p, prog), "fit: "), p.Pass > 2)
		},
	})
	if doc != nil {
		prog.done(fmt.Sprintf("fit %s: %s over %s in %s", label, plural(doc.Convergence.Passes, "pass", "passes"), plural(doc.Data.RowsRead, "row", "rows"), seconds(prog.elapsed())))
	}
	if err != nil {
		if ctx.Err() != nil {
			return fmt.Errorf("interrupted during the fit %s; no comparison was made", label)
		}
		return fmt.Errorf("the fit %s failed, so no comparison was made (the full fit was written to %s): %w", label, a.out, err)
	}
	c, err := fit.CompareNested(full, doc)
	if err != nil {
		return err
	}
	if err := writeComparison(e.stdout, c, full, doc); err != nil {
		return err
	}
	if a.withoutOut == "" {
		return nil
	}
	err = writeAtomic(a.withoutOut, func(w io.Writer) error {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(c)
	})
	if err != nil {
		return err
	}
	if !a.quiet {
		fmt.Fprintf(e.stderr, "fit: wrote %s\n", a.withoutOut)
	}
	return nil
}

// termNames lists the terms of spec that reduced lacks, as the summary
// names them.
func droppedNames(spec, reduced *fit.Spec) []string {
	kept := map[string]bool{}
	for _, t := range reduced.Terms {
		kept[t.Name()] = true
	}
	var out []string
	for _, t := range spec.Terms {
		if !kept[t.Name()] {
			out = append(out, summaryName(t.Name()))
		}
	}
	return out
}

// displayName shows a surface "a,b" as the summary does, "a × b".
func summaryName(name string) string {
	return strings.Replace(name, ",", " × ", 1)
}

// writeComparison prints the comparison of full with reduced, one labelled
// row per figure, ending with a reading in plain words. Like the summary it
// holds no timings or paths.
func writeComparison(w io.Writer, c *fit.NestedComparison, full, reduced *fit.Document) error {
	names := make([]string, len(c.Dropped))
	for i, n := range c.Dropped {
		names[i] = summaryName(n)
	}
	what := andJoin(names)
	var b strings.Builder
	row := func(label, format string, args ...any) {
		fmt.Fprintf(&b, "  %-11s %s\n", label, fmt.Sprintf(format, args...))
	}
	fmt.Fprintf(&b, "\nwithout %s (fitted again to the same %s)\n", what, plural(full.N, "row", "rows"))
	row("deviance", "%.6g with · %.6g without · %s", c.Full.Deviance, c.Reduced.Deviance, withoutChange("%.4g", c.DevianceChange, "more", "less"))
	row("edf", "%.2f with · %.2f without · %s", c.Full.EDF, c.Reduced.EDF, withoutChange("%.2f", c.DFChange, "fewer", "more"))
	row("test", "%s", withoutTestText(c, what))
	lower := "equal"
	switch c.LowerAIC {
	case "full":
		lower = "lower with " + what
	case "reduced":
		lower = "lower without " + what
	}
	row("aic", "%.1f with · %.1f without · %s", c.Full.AIC, c.Reduced.AIC, lower)
	if c.Approximate {
		row("note", "the model has curves or surfaces: their degrees of freedom are effective ones, so the test is approximate")
	}
	for _, n := range c.Notes {
		row("note", "%s", n)
	}
	for _, msg := range reduced.Warnings {
		row("warning", "(the fit without %s) %s", what, msg)
	}
	row("reading", "%s", withoutReading(c, what, itOrThem(names)))
	_, err := io.WriteString(w, b.String())
	return err
}

// change describes a difference d (full minus reduced, or reduced minus
// full) with the word for its sign, seen from the reduced model.
func withoutChange(format string, d float64, up, down string) string {
	word := up
	if d < 0 {
		word = down
	}
	return fmt.Sprintf(format+" %s without", math.Abs(d), word)
}

func withoutTestText(c *fit.NestedComparison, what string) string {
	if c.Statistic == nil || c.PValue == nil {
		return "none: dropping " + what + " frees no degrees of freedom, so there is nothing to test"
	}
	switch c.Test {
	case "F":
		return fmt.Sprintf("F = %.4g on %.2f and %.2f df, scale %.4g from the full fit · %s",
			*c.Statistic, c.DFChange, c.DenominatorDF, c.Scale, pValueWords(*c.PValue))
	default:
		return fmt.Sprintf("likelihood ratio: deviance change %.4g against chi-square on %.2f df · %s",
			*c.Statistic, c.DFChange, pValueWords(*c.PValue))
	}
}

func pValueWords(p float64) string {
	switch {
	case p == 0:
		return "p < 1e-300"
	case p < 0.001:
		return fmt.Sprintf("p = %.1e", p)
	default:
		return fmt.Sprintf("p = %.3f", p)
	}
}

// reading says in a line what the comparison suggests.
func withoutReading(c *fit.NestedComparison, what, pronoun string) string {
	if c.PValue == nil {
		if c.DevianceChange > 0 {
			return fmt.Sprintf("the model with %s fits better for no more degrees of freedom: keep %s", what, pronoun)
		}
		return fmt.Sprintf("dropping %s costs nothing: consider the simpler model", what)
	}
	if *c.PValue < keepLevel {
		s := fmt.Sprintf("the data support keeping %s", what)
		if c.LowerAIC == "reduced" {
			s += fmt.Sprintf(" (p < %g), though the AIC prefers the model without %s", keepLevel, pronoun)
		}
		return s
	}
	s := fmt.Sprintf("dropping %s costs little: consider a simpler model", what)
	if c.LowerAIC == "full" {
		s += fmt.Sprintf(" (p ≥ %g), though the AIC prefers keeping %s", keepLevel, pronoun)
	}
	return s
}

// them is "it" for one term, "them" for more.
func itOrThem(names []string) string {
	if len(names) == 1 {
		return "it"
	}
	return "them"
}

// andList joins names as "a", "a and b", "a, b and c".
func andJoin(names []string) string {
	switch len(names) {
	case 0:
		return ""
	case 1:
		return names[0]
	}
	return strings.Join(names[:len(names)-1], ", ") + " and " + names[len(names)-1]
}
