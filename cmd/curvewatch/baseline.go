package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"strings"
	"time"

	"github.com/curvewatch/curvewatch/jobs/history"
)

var baselineHelp = help{
	title: "pin a model's baseline fit, or show which fit it is",
	usage: "curvewatch baseline pin --config curvewatch.yaml --model NAME --fit ID\n" +
		"  curvewatch baseline show --config curvewatch.yaml --model NAME",
	about: `A model watched against its baseline (watch.against: baseline) compares
every new fit with one pinned fit. The daemon pins the model's first
successful fit by itself; 'baseline pin' replaces it with the fit you name,
which must be a succeeded fit of that model (take its id from 'curvewatch
history'). A fit that failed or did not converge cannot be a baseline. A
baseline pinned by hand is never replaced by the daemon.

'baseline show' prints the model's current baseline fit.`,
	example: "curvewatch baseline pin --config curvewatch.yaml --model sonde-07 --fit 42",
	writes: []item{
		{"database", "pin: the model's row in the baselines table (pinned by operator)."},
		{"stdout", "the fit pinned and the one it replaced (pin), or the baseline (show)."},
		{"stderr", "errors."},
	},
	exits: []item{
		{"0", "the fit was pinned, or the baseline was shown"},
		{"1", "an error: no such fit, a fit of another model, a fit that did not succeed, the config or the database"},
		{"2", "the command line was wrong"},
	},
}

// baselineFlags defines the flags of baseline (all of them for the help;
// --fit only for pin).
func baselineFlags(sub string, path, model *string, fitID *int) *flags {
	fl := newFlags("baseline", baselineHelp)
	fl.Required(path, "config", "FILE", "the daemon config (YAML)", "the daemon config (YAML) naming the database")
	fl.Required(model, "model", "NAME", "the model (a name under models:)", "the name of the model, as under models: in the config")
	if sub != "show" {
		fl.Int(fitID, "fit", "ID", 0, "pin only: the id of the fit to pin (see curvewatch history)")
	}
	return fl
}

func runBaseline(ctx context.Context, e *env, args []string) error {
	var path, model string
	var fitID int
	if len(args) == 0 || strings.HasPrefix(args[0], "-") {
		fl := baselineFlags("", &path, &model, &fitID)
		for _, a := range args {
			if a == "-h" || a == "-help" || a == "--help" {
				done, err := fl.parse(e, []string{a})
				if done || err != nil {
					return err
				}
			}
		}
		return fl.usageError("say what to do first: baseline pin or baseline show")
	}
	sub, rest := args[0], args[1:]
	if sub != "pin" && sub != "show" {
		fl := baselineFlags("", &path, &model, &fitID)
		return fl.usageError("unknown baseline action %q: want pin or show", sub)
	}
	fl := baselineFlags(sub, &path, &model, &fitID)
	if done, err := fl.parse(e, rest); done || err != nil {
		return err
	}
	if sub == "pin" && fitID <= 0 {
		return fl.usageError("--fit is required: the id of the fit to pin, a positive number (see curvewatch history)")
	}
	m, store, dsn, err := modelStore(ctx, path, model)
	if err != nil {
		return err
	}
	defer store.Close()
	if sub == "show" {
		err = showBaseline(ctx, e.stdout, store, m.Name)
	} else {
		err = pinBaseline(ctx, e.stdout, store, m.Name, int64(fitID))
	}
	if err != nil {
		return errors.New(scrub(err.Error(), dsn))
	}
	return nil
}

// pinBaseline checks that fitID is a succeeded fit of model, pins it and
// says what it replaced.
func pinBaseline(ctx context.Context, w io.Writer, store *history.Store, model string, fitID int64) error {
	f, err := store.Fit(ctx, fitID)
	switch {
	case errors.Is(err, history.ErrNoFit):
		return fmt.Errorf("model %q: there is no fit %d (run 'curvewatch history --model %s' for its fits)", model, fitID, model)
	case err != nil:
		return err
	case f.Model != model:
		return fmt.Errorf("model %q: fit %d is a fit of model %q, not of %q; a baseline must be a fit of its own model", model, fitID, f.Model, model)
	case f.Status == history.StatusFailed:
		return fmt.Errorf("model %q: fit %d failed (%s); only a succeeded fit can be a baseline", model, fitID, f.Reason)
	case f.Status != history.StatusSucceeded:
		return fmt.Errorf("model %q: fit %d is %s; only a succeeded fit can be a baseline", model, fitID, f.Status)
	}
	oldID, hadOld, err := store.Baseline(ctx, model)
	if err != nil {
		return err
	}
	if err := store.PinBaseline(ctx, model, fitID, history.PinnedOperator); err != nil {
		return err
	}
	fmt.Fprintf(w, "model %s: pinned %s as its baseline\n", model, describeFit(f))
	switch {
	case !hadOld:
		fmt.Fprintln(w, "it had no baseline before")
	case oldID == fitID:
		fmt.Fprintf(w, "fit %d was already its baseline; it is now pinned by operator\n", fitID)
	default:
		old, err := store.Fit(ctx, oldID)
		if err != nil {
			return err
		}
		fmt.Fprintf(w, "it replaces %s\n", describeFit(old))
	}
	return nil
}

// showBaseline prints the model's baseline fit.
func showBaseline(ctx context.Context, w io.Writer, store *history.Store, model string) error {
	id, ok, err := store.Baseline(ctx, model)
	if err != nil {
		return err
	}
	if !ok {
		fmt.Fprintf(w, "model %s has no baseline yet (its first successful fit is pinned automatically)\n", model)
		return nil
	}
	f, err := store.Fit(ctx, id)
	if err != nil {
		return err
	}
	fmt.Fprintf(w, "model %s: baseline is %s\n", model, describeFit(f))
	return nil
}

// describeFit is one line about a fit: id, when, slot, rows and fit.
func describeFit(f *history.StoredFit) string {
	slot := "manual run"
	if !f.Slot.IsZero() {
		slot = "slot " + f.Slot.UTC().Format(time.DateTime)
	}
	return fmt.Sprintf("fit %d (%s, finished %s UTC, %s, %s rows, %.1f%% deviance explained)",
		f.ID, f.Status, f.Finished.UTC().Format(time.DateTime), slot, count(int(f.RowsUsed)), 100*f.DevianceExplained)
}
