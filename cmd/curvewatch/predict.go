package main

import (
	"context"
	"fmt"
	"io"
	"log/slog"
	"strings"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/fit/csvsource"
)

var predictHelp = help{
	title: "evaluate a fit document on new CSV rows",
	usage: "curvewatch predict --fit fit.json --data new.csv --out pred.csv [flags]",
	about: `Reads a fit document written by 'curvewatch fit' and evaluates the fitted
model on each row of a CSV file, which needs the model's covariate columns
(not its response). The file is streamed, so it may be larger than memory.

A row with a missing covariate gets empty prediction cells. A row whose
covariates lie outside the range the model was fitted on is predicted, but
counted as an extrapolation in the report. A factor level the fit never saw
is an error naming the line and column.`,
	example: "curvewatch predict --fit s07-fit.json --data june.csv --out june-pred.csv",
	writes: []item{
		{"--out", "a CSV file: every column of --data as read, then link (the linear predictor η), link_se (its standard error) and response (the mean μ = g⁻¹(η)). It is written to a temporary file beside it and renamed, so it is never left half written."},
		{"stdout", "a report: rows predicted, rows left empty for a missing covariate, and rows outside the fitted range."},
		{"stderr", "a note naming the file written, and errors."},
	},
	exits: []item{
		{"0", "every row was processed and the file was written"},
		{"1", "an error: the document or the data could not be read or do not match (a missing column, an unseen factor level), or the fit did not converge and --allow-unconverged was not given. Nothing is written."},
		{"2", "the command line was wrong (a missing or unknown flag)"},
	},
}

// predictColumns are the columns predict adds to the input's.
var predictColumns = []string{"link", "link_se", "response"}

// predictArgs are the predict command's flags.
type predictArgs struct {
	fit, data, out          string
	quiet, allowUnconverged bool
}

func runPredict(ctx context.Context, e *env, args []string) error {
	var a predictArgs
	fl := newFlags("predict", predictHelp)
	fl.Required(&a.fit, "fit", "FILE", "the fit document (JSON) written by 'curvewatch fit'",
		"the fit document (JSON) written by 'curvewatch fit'")
	fl.Required(&a.data, "data", "FILE", "the CSV file of rows to predict; its first line names the columns",
		"the CSV file of rows to predict (first line: column names)")
	fl.Required(&a.out, "out", "FILE", "where to write the rows with their predictions (CSV); an existing file is replaced",
		"the CSV file to write the rows and their predictions to")
	fl.Bool(&a.allowUnconverged, "allow-unconverged", "predict from a fit that did not converge (its coefficients are not a solution of the fitting problem, so treat the numbers with suspicion)")
	fl.Bool(&a.quiet, "quiet", "write no progress or notices to stderr (the report still goes to stdout; errors are still reported)")
	if done, err := fl.parse(e, args); done || err != nil {
		return err
	}
	if err := checkOutput(a.out, a.data, a.fit); err != nil {
		return err
	}
	return predictFile(ctx, e, a, fl.logger(e))
}

// predictFile loads the document, streams the rows through it into the
// output file and prints the report.
func predictFile(ctx context.Context, e *env, a predictArgs, log *slog.Logger) error {
	doc, err := readDocument(a.fit)
	if err != nil {
		return err
	}
	if c := doc.Convergence; !c.Converged {
		if !a.allowUnconverged {
			return fmt.Errorf("%s holds a fit of model %q that did not converge (it stopped after %s, relative change %.3g): its coefficients are not a solution, so its predictions could be far off. Refit with more --max-iterations, or pass --allow-unconverged to predict from it anyway", a.fit, doc.Model, plural(c.Iterations, "iteration", "iterations"), c.RelativeChange)
		}
		log.Warn("predicting from a fit that did not converge", "fit", a.fit, "model", doc.Model)
	}
	pred, err := fit.NewPredictor(doc)
	if err != nil {
		return fmt.Errorf("%s cannot be used to predict: %w", a.fit, err)
	}
	src, err := csvsource.Open(a.data)
	if err != nil {
		return fmt.Errorf("cannot read the data: %w", err)
	}
	if err := checkPredictColumns(src.Columns(), pred.Need(), doc.Model, a.data); err != nil {
		return err
	}
	log.Debug("predicting", "model", doc.Model, "fit", a.fit, "data", a.data)

	prog := newProgress(e.stderr, a.quiet)
	var tally predictTally
	err = writeAtomic(a.out, func(w io.Writer) error {
		pw, err := newPredictWriter(a.data, w)
		if err != nil {
			return err
		}
		defer pw.close()
		err = pred.Predict(ctx, src, func(p fit.Prediction) error {
			if err := pw.write(p, &tally); err != nil {
				return err
			}
			prog.show("predict: "+plural(tally.rows, "row", "rows")+", "+seconds(prog.elapsed()), false)
			return nil
		})
		if err != nil {
			return err
		}
		return pw.flush()
	})
	prog.done("predict: " + plural(tally.rows, "row", "rows") + " in " + seconds(prog.elapsed()))
	if err != nil {
		if ctx.Err() != nil {
			return fmt.Errorf("interrupted; %s was not written", a.out)
		}
		return inFile(err, a.data)
	}
	log.Debug("predictions written", "out", a.out, "rows", tally.rows, "seconds", prog.elapsed().Seconds())
	if !a.quiet {
		fmt.Fprintf(e.stderr, "predict: wrote %s\n", a.out)
	}
	return tally.report(e.stdout, doc, a.allowUnconverged)
}

// checkPredictColumns checks the input has what the model needs and no
// column that would clash with the ones predict adds.
func checkPredictColumns(have []string, need fit.Need, model, data string) error {
	has := map[string]bool{}
	for _, c := range have {
		has[c] = true
	}
	var missing []string
	for _, c := range append(append([]string(nil), need.Numeric...), need.Text...) {
		if !has[c] {
			missing = append(missing, fmt.Sprintf("%q", c))
		}
	}
	if len(missing) > 0 {
		return fmt.Errorf("%s lacks the column(s) %s that model %q needs; its header has %s",
			data, strings.Join(missing, ", "), model, strings.Join(have, ","))
	}
	for _, c := range predictColumns {
		if has[c] {
			return fmt.Errorf("%s already has a column named %q, which predict adds; rename that column", data, c)
		}
	}
	return nil
}
