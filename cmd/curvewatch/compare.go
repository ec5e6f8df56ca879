package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"path/filepath"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/fit/csvsource"
)

var compareHelp = help{
	title: "say whether a model's fitted curves changed between two fits",
	usage: "curvewatch compare --reference a.json --candidate b.json --out r.json [flags]",
	about: `Reads two fit documents of the same model spec, written by 'curvewatch fit'
on different windows of data (the reference: how things were; the
candidate: how they are now), and compares them term by term. Each curve is
evaluated by both fits where both had data, re-centred, and their difference
set against a simultaneous band at --level: a term has shifted when its
difference leaves the band (score above 1) and is larger than
--practical-shift on the link scale. Surfaces, straight lines, factor levels
and the model's overall level are compared the same way; Holm's adjustment
across the terms keeps the false-alarm rate of the whole comparison at
1 − level. The report also gives each curve's change in effective degrees of
freedom and shape, and the change in the noise (scale).

With --data (the CSV file the candidate was fitted on) it also asks whether
the reference still predicts those rows as well as the candidate does: the
reference's deviance there divided by the candidate's own plus its in-sample
optimism 2·scale·edf. A ratio above 1 + --deviance-increase breaches. Pass
--held-out when neither fit saw the rows; then no optimism is added.

The tolerance comes from the watch section of the reference's model spec
(practical_shift, level, deviance_increase), and a flag given on the
command line overrides it. Without either: practical shift 0.5, level 0.99,
deviance increase 0.15, Holm's adjustment. Fits whose rows or time windows
overlap are refused unless --allow-overlap is given.`,
	example: "curvewatch compare --reference may.json --candidate june.json --out diff.json",
	writes: []item{
		{"--out", "the report as indented JSON: every number behind the verdicts, including both curves and their difference on the common grid, for plotting. It is written to a temporary file beside it and renamed, so it is never left half written."},
		{"stdout", "the report in words: the two fits, the tolerance, whether their rows overlap, a table of the terms (verdict, score, size, where a curve left its band, the change in edf and shape), the level, the noise, the predictive check, and what breached."},
		{"stderr", "a note naming the file written, and errors."},
	},
	exits: []item{
		{"0", "the comparison was made and nothing breached its tolerance"},
		{"1", "an error: a document could not be read, the two fits cannot be compared (different specs, a fit that did not converge, overlapping rows, no covariate range in common), or the data do not match. Nothing is written."},
		{"2", "the command line was wrong (a missing or unknown flag, a value out of range)"},
		{"3", "the comparison was made, written and printed, and something breached: a term or the level shifted beyond the tolerance, or the predictions degraded"},
	},
}

// compareArgs are the compare command's flags.
type compareArgs struct {
	reference, candidate, data, out string
	heldOut, allowOverlap, quiet    bool
	practicalShift, level, devInc   float64
	multiplicity                    string
	// set records the tolerance flags given on the command line.
	set map[string]bool
}

func runCompare(ctx context.Context, e *env, args []string) error {
	var a compareArgs
	fl := newFlags("compare", compareHelp)
	fl.Required(&a.reference, "reference", "FILE", "the reference fit document (JSON): how the relationships were",
		"the reference fit document (JSON) written by 'curvewatch fit'")
	fl.Required(&a.candidate, "candidate", "FILE", "the candidate fit document (JSON) of the same model spec on later data",
		"the candidate fit document (JSON) written by 'curvewatch fit'")
	fl.Required(&a.out, "out", "FILE", "where to write the report (JSON); an existing file is replaced",
		"the file to write the report (JSON) to")
	fl.OptionalFile(&a.data, "data", "FILE", "the CSV file the candidate was fitted on (with the response): also check how well the reference predicts it")
	fl.Bool(&a.heldOut, "held-out", "with --data: the rows are new to both fits, so the candidate's deviance needs no optimism correction")
	fl.Float(&a.practicalShift, "practical-shift", "X", "the smallest shift worth a breach, in link-scale units (default: the reference spec's watch.practical_shift, else 0.5); 0 tests the statistics alone")
	fl.Float(&a.level, "level", "L", "the simultaneous band level for calling a shift real, between 0 and 1 (default: watch.level, else 0.99)")
	fl.Float(&a.devInc, "deviance-increase", "D", "with --data: the relative increase of predictive deviance that breaches, above 0 (default: watch.deviance_increase, else 0.15)")
	fl.Choice(&a.multiplicity, "multiplicity", "holm|none", "how the terms' p-values are adjusted for being tested together: holm (the default) or none")
	fl.Bool(&a.allowOverlap, "allow-overlap", "compare fits whose rows or time windows overlap, with the variance correction the JSON report describes, instead of refusing")
	fl.Bool(&a.quiet, "quiet", "write no notices to stderr (the report still goes to stdout; errors are still reported)")
	if done, err := fl.parse(e, args); done || err != nil {
		return err
	}
	a.set = map[string]bool{}
	fl.fs.Visit(func(f *flag.Flag) { a.set[f.Name] = true })
	if err := checkCompareArgs(fl, a); err != nil {
		return err
	}
	if err := checkOutput(a.out, a.reference, a.candidate, a.data); err != nil {
		return err
	}
	return compareFiles(ctx, e, a, fl.logger(e))
}

// Float defines a number flag. Its default is not shown in the help, whose
// text says where the value comes from when the flag is left out.
func (f *flags) Float(p *float64, name, arg, usage string) {
	f.fs.Float64Var(p, name, 0, usage)
	f.order = append(f.order, flagDoc{name: name, arg: arg})
}

// Choice defines a flag taking one of a few words; the caller checks the
// word, and the usage names the choices and the default.
func (f *flags) Choice(p *string, name, arg, usage string) {
	f.fs.StringVar(p, name, "", usage)
	f.order = append(f.order, flagDoc{name: name, arg: arg})
}

// checkCompareArgs checks the flags that need no file read.
func checkCompareArgs(fl *flags, a compareArgs) error {
	switch {
	case a.set["practical-shift"] && !(a.practicalShift >= 0 && !math.IsInf(a.practicalShift, 1)):
		return fl.usageError("--practical-shift must be 0 or more, not %g", a.practicalShift)
	case a.set["level"] && !(a.level > 0 && a.level < 1):
		return fl.usageError("--level must be between 0 and 1 (as in 0.99), not %g", a.level)
	case a.set["deviance-increase"] && !(a.devInc > 0 && !math.IsInf(a.devInc, 1)):
		return fl.usageError("--deviance-increase must be above 0 (0.15 breaches when the deviance grows by 15%%), not %g", a.devInc)
	case a.set["multiplicity"] && a.multiplicity != "holm" && a.multiplicity != "none":
		return fl.usageError("--multiplicity must be holm or none, not %q", a.multiplicity)
	case a.heldOut && a.data == "":
		return fl.usageError("--held-out says how to read the rows of --data; give --data FILE too")
	case a.set["deviance-increase"] && a.data == "":
		return fl.usageError("--deviance-increase applies to the predictive check; give --data FILE too")
	}
	return nil
}

// tolerance is the reference spec's watch section with the flags given on
// the command line laid over it.
func (a compareArgs) tolerance(ref *fit.Document) fit.Tolerance {
	tol := fit.ToleranceFromSpec(ref.Spec)
	if a.set["practical-shift"] {
		tol.PracticalShift = a.practicalShift
	}
	if a.set["level"] {
		tol.Level = a.level
	}
	if a.set["deviance-increase"] {
		tol.DevianceIncrease = a.devInc
	}
	if a.set["multiplicity"] {
		tol.Multiplicity = a.multiplicity
	}
	tol.AllowOverlap = a.allowOverlap
	return tol
}

// compareFiles reads both documents, compares them (and checks the
// predictions on --data), writes the JSON report and prints the human one.
// It returns an exitError with exitBreach when something breached.
func compareFiles(ctx context.Context, e *env, a compareArgs, log *slog.Logger) error {
	ref, err := readDocument(a.reference)
	if err != nil {
		return err
	}
	cand, err := readDocument(a.candidate)
	if err != nil {
		return err
	}
	tol := a.tolerance(ref)
	log.Debug("comparing", "model", ref.Model, "reference", a.reference, "candidate", a.candidate, "tolerance", fmt.Sprintf("%+v", tol))
	rep, err := fit.Compare(ref, cand, tol)
	if err != nil {
		return compareProblem(err, a, ref, cand)
	}
	if a.data != "" {
		// The engine's echo of the tolerance has every default filled in.
		d, err := degradation(ctx, ref, cand, a, rep.Tolerance)
		if err != nil {
			return err
		}
		rep.Degradation = d
		rep.Breach = rep.Breach || d.Breach
	}
	if err := writeReport(a.out, rep); err != nil {
		return err
	}
	if !a.quiet {
		fmt.Fprintf(e.stderr, "compare: wrote %s\n", a.out)
	}
	if err := writeCompareReport(e.stdout, rep, compareNames{
		reference: filepath.Base(a.reference), candidate: filepath.Base(a.candidate), data: filepath.Base(a.data),
		heldOut: a.heldOut, link: string(ref.Link)}); err != nil {
		return err
	}
	if rep.Breach {
		return &exitError{code: exitBreach}
	}
	return nil
}

// degradation runs the predictive check on the rows of --data.
func degradation(ctx context.Context, ref, cand *fit.Document, a compareArgs, tol fit.Tolerance) (*fit.Degradation, error) {
	src, err := csvsource.Open(a.data)
	if err != nil {
		return nil, fmt.Errorf("cannot read the data: %w", err)
	}
	d, err := fit.PredictiveDegradation(ctx, ref, cand, src, tol, a.heldOut)
	switch {
	case err == nil:
		return d, nil
	case ctx.Err() != nil:
		return nil, fmt.Errorf("interrupted; %s was not written", a.out)
	case errors.Is(err, fit.ErrNotFittedRows) && a.heldOut:
		return nil, &wrapped{msg: fmt.Sprintf("%s: %v; drop --held-out to score them as the candidate's own rows", a.data, err), err: err}
	case errors.Is(err, fit.ErrNotFittedRows):
		return nil, &wrapped{msg: fmt.Sprintf("%s: %v; give --data the CSV file %s was fitted on, or add --held-out if neither fit saw these rows", a.data, err, a.candidate), err: err}
	}
	var re *fit.RowError
	if errors.As(err, &re) {
		return nil, inFile(err, a.data)
	}
	return nil, &wrapped{msg: fmt.Sprintf("%s: %v", a.data, err), err: err}
}

// compareProblem says why the engine refused the pair, naming the file
// concerned and what to do about it.
func compareProblem(err error, a compareArgs, ref, cand *fit.Document) error {
	var ce *fit.CompareError
	if !errors.As(err, &ce) {
		return fmt.Errorf("cannot compare candidate %s with reference %s: %w", a.candidate, a.reference, err)
	}
	msg := ce.Err.Error()
	if ce.Term != "" {
		msg = fmt.Sprintf("term %q: %s", ce.Term, msg)
	}
	if ce.Which != "" {
		msg = "the " + ce.Which + ": " + msg
	}
	hint := ""
	switch ce.Reason {
	case fit.ReasonConvergence:
		hint = "give 'curvewatch fit' more --max-iterations, or check that the family and link suit the response"
	case fit.ReasonStructure:
		hint = "refit both windows with the same model spec"
	case fit.ReasonRange:
		hint = "compare windows whose data cover some of the same covariate range"
	case fit.ReasonOverlap:
		hint = "refit on disjoint windows"
		// --allow-overlap cannot help two fits of the same rows.
		if _, same, err := fit.RowOverlap(&ref.Data, &cand.Data); !a.allowOverlap && err == nil && !same {
			hint += " or pass --allow-overlap"
		}
	case fit.ReasonDamaged, fit.ReasonFormat:
		hint = "refit with this curvewatch"
	}
	if hint != "" {
		msg += "; " + hint
	}
	return &wrapped{msg: fmt.Sprintf("cannot compare candidate %s with reference %s: %s", a.candidate, a.reference, msg), err: err}
}

// writeReport writes the shift report to path as indented JSON, atomically.
func writeReport(path string, rep *fit.ShiftReport) error {
	return writeAtomic(path, func(w io.Writer) error {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		if err := enc.Encode(rep); err != nil {
			return fmt.Errorf("cannot encode the report for %s: %w", path, err)
		}
		return nil
	})
}
