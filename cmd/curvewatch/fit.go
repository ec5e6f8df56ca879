package main

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"os"
	"strings"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/fit/csvsource"
)

var fitHelp = help{
	title: "fit a model spec to the rows of a CSV file",
	usage: "curvewatch fit --data rows.csv --model model.yaml --out fit.json [flags]",
	about: `Reads the model spec (YAML: the response, its family and link, and the
terms: curves, surfaces, linear and factor terms), then fits it to every row
of the CSV file, choosing how smooth each curve is unless the spec fixes it.
Rows with a missing value in a column the model uses are left out and
counted. The fit document records the fit and everything 'curvewatch
predict' and 'curvewatch compare' need later.

With --without TERM the model is fitted a second time without that term (or
without several, with the flag repeated), on exactly the rows the full fit
used, and the two fits are compared: how much deviance the term explains,
how many degrees of freedom it uses, a test of whether the difference is
more than chance (an F test when the family's scale is estimated, gaussian
and gamma; a likelihood-ratio chi-square test for poisson and binomial), and
both AICs. With curves or surfaces in the model the degrees of freedom are
effective ones and the test is approximate.`,
	example: "curvewatch fit --data sonde07.csv --model sonde07.yaml --out sonde07-fit.json",
	writes: []item{
		{"--out", "the fit document, as indented JSON. It is written to a temporary file beside it and then renamed, so the file is never left half written."},
		{"stdout", "a summary: the rows used, how much deviance the model explains, and each term, with a small drawing of every curve's shape. With --without, then the comparison with the model without those terms and a reading in plain words (keep the terms when p < 0.05)."},
		{"--without-out", "the comparison as JSON, written the same safe way (only with --without)."},
		{"stderr", "progress while a long fit runs, a note naming the file written, and errors."},
	},
	exits: []item{
		{"0", "the fit converged and the document was written"},
		{"1", "an error: the spec or the data could not be read or do not match, or the fit failed. A fit that did not converge still writes its document, marked \"converged\": false, and exits 1."},
		{"2", "the command line was wrong (a missing or unknown flag, or a --without term the model does not have: the message lists its terms)"},
	},
}

// fitArgs are the fit command's flags.
type fitArgs struct {
	data, model, out string
	maxIterations    int
	quiet            bool
	// without names terms to drop for a comparison; withoutOut is where
	// to write it (optional).
	without    []string
	withoutOut string
}

func runFit(ctx context.Context, e *env, args []string) error {
	var a fitArgs
	fl := newFlags("fit", fitHelp)
	fl.Required(&a.data, "data", "FILE", "the CSV file of rows to fit; its first line names the columns",
		"the CSV file of rows to fit (first line: column names)")
	fl.Required(&a.model, "model", "FILE", "the model spec (YAML) naming the response, family and terms",
		"the model spec (YAML) saying what to fit")
	fl.Required(&a.out, "out", "FILE", "where to write the fit document (JSON); an existing file is replaced",
		"the file to write the fit document (JSON) to")
	fl.Int(&a.maxIterations, "max-iterations", "N", 100, "stop after this many fitting iterations and mark the document unconverged (only gaussian models with identity link are fitted in one step; the others iterate)")
	fl.Repeated(&a.without, "without", "TERM", "also fit the model without this term, on the same rows, and test whether the data need it; name the term as the summary does (its column, or a,b for a surface); repeat the flag to drop several terms together")
	fl.OptionalFile(&a.withoutOut, "without-out", "FILE", "with --without: also write the comparison (JSON) to this file")
	fl.Bool(&a.quiet, "quiet", "write no progress or notices to stderr (the summary still goes to stdout; errors are still reported)")
	if done, err := fl.parse(e, args); done || err != nil {
		return err
	}
	if a.maxIterations < 1 {
		return fl.usageError("--max-iterations must be at least 1, not %d", a.maxIterations)
	}
	if err := checkOutput(a.out, a.data, a.model); err != nil {
		return err
	}
	if err := checkWithout(fl, a); err != nil {
		return err
	}
	return fitFile(ctx, e, a, fl.logger(e))
}

// fitFile reads the spec and the rows, fits, writes the document and
// prints the summary.
func fitFile(ctx context.Context, e *env, a fitArgs, log *slog.Logger) error {
	text, err := os.ReadFile(a.model)
	if err != nil {
		return fmt.Errorf("cannot read the model spec: %w", err)
	}
	spec, err := fit.ParseSpec(text)
	if err != nil {
		return specProblems(err, a.model, fmt.Sprintf("the model spec %s has problems; fix them and run again:", a.model))
	}
	var reduced *fit.Spec
	if len(a.without) > 0 {
		if reduced, err = reducedSpec(spec, a.without); err != nil {
			return err
		}
	}
	src, err := csvsource.Open(a.data)
	if err != nil {
		return fmt.Errorf("cannot read the data: %w", err)
	}
	if err := spec.CheckColumns(src.Columns()); err != nil {
		return specProblems(err, a.model, fmt.Sprintf("the model spec %s uses columns that %s lacks:", a.model, a.data))
	}
	log.Debug("fitting", "model", spec.Name, "data", a.data, "spec", a.model, "columns", len(src.Columns()))

	prog := newProgress(e.stderr, a.quiet)
	doc, err := fit.Fit(ctx, spec, src, fit.Options{
		MaxIterations: a.maxIterations,
		Logger:        log,
		Progress: func(p fit.Progress) {
			prog.show(fitProgressLine(p, prog), p.Pass > 2)
		},
	})
	if doc != nil {
		prog.done(fmt.Sprintf("fit: %s over %s in %s", plural(doc.Convergence.Passes, "pass", "passes"), plural(doc.Data.RowsRead, "row", "rows"), seconds(prog.elapsed())))
	} else {
		prog.done("fit: stopped after " + seconds(prog.elapsed()))
	}
	notConverged := errors.Is(err, fit.ErrNotConverged) && doc != nil
	if err != nil && !notConverged {
		if ctx.Err() != nil {
			return fmt.Errorf("interrupted; %s was not written", a.out)
		}
		return inFile(err, a.data)
	}
	if err := writeDocument(a.out, doc); err != nil {
		return err
	}
	log.Debug("fit written", "out", a.out, "seconds", prog.elapsed().Seconds())
	if !a.quiet {
		fmt.Fprintf(e.stderr, "fit: wrote %s\n", a.out)
	}
	if err := writeSummary(e.stdout, doc); err != nil {
		return err
	}
	if notConverged {
		no := ""
		if reduced != nil {
			no = " No comparison was made without " + strings.Join(a.without, ", ") + "."
		}
		return fmt.Errorf("%w. It was written to %s all the same, but predict and compare refuse it: allow more iterations (--max-iterations), or check that the family and link suit the response.%s", err, a.out, no)
	}
	if reduced != nil {
		return fitWithout(ctx, e, a, spec, reduced, src, doc, log)
	}
	return nil
}

// fitProgressLine describes one finished pass over the rows.
func fitProgressLine(p fit.Progress, prog *progress) string {
	s := fmt.Sprintf("fit: pass %d (%s) over %s", p.Pass, p.Stage, plural(p.Rows, "row", "rows"))
	if !math.IsNaN(p.Deviance) {
		s += fmt.Sprintf(", deviance %.6g", p.Deviance)
	}
	return s + ", " + seconds(prog.elapsed())
}
