package main

import (
	"context"
	"errors"
	"fmt"
	"text/tabwriter"
	"time"

	"github.com/curvewatch/curvewatch/jobs/history"
)

var historyHelp = help{
	title: "list a model's fits: when, rows, fit, verdicts",
	usage: "curvewatch history --config curvewatch.yaml --model NAME [--limit N]",
	about: `Reads the daemon's tables and prints one line per fit of the model, newest
first: the fit's id, when it finished, the slot it ran for (or "manual"),
its status, the rows used, the deviance explained, and the verdict of its
comparison with the reference (the terms that shifted, if any). A failed
refit shows its reason.`,
	example: "curvewatch history --config curvewatch.yaml --model sonde-07-oxygen --limit 20",
	writes: []item{
		{"stdout", "the table of fits."},
		{"stderr", "errors."},
	},
	exits: []item{
		{"0", "the table was printed"},
		{"1", "an error (config, database)"},
		{"2", "the command line was wrong"},
	},
}

func runHistory(ctx context.Context, e *env, args []string) error {
	var path, model string
	limit := 20
	fl := newFlags("history", historyHelp)
	fl.Required(&path, "config", "FILE", "the daemon config (YAML)", "the daemon config (YAML) naming the database")
	fl.Required(&model, "model", "NAME", "the model (a name under models:)", "the name of the model, as under models: in the config")
	fl.Int(&limit, "limit", "N", limit, "how many fits to list, newest first")
	if done, err := fl.parse(e, args); done || err != nil {
		return err
	}
	m, store, dsn, err := modelStore(ctx, path, model)
	if err != nil {
		return err
	}
	defer store.Close()
	fits, err := store.Fits(ctx, m.Name, limit, 0)
	if err != nil {
		return errors.New(scrub(err.Error(), dsn))
	}
	if len(fits) == 0 {
		fmt.Fprintf(e.stdout, "model %s has no recorded fits yet (run 'curvewatch run' or 'curvewatch serve')\n", m.Name)
		return nil
	}
	verdicts, err := store.Verdicts(ctx, m.Name, fitIDs(fits))
	if err != nil {
		return errors.New(scrub(err.Error(), dsn))
	}
	tw := tabwriter.NewWriter(e.stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "fit\tfinished (UTC)\tslot\tstatus\trows\texplained\tverdict")
	for _, f := range fits {
		slot := "manual"
		if !f.Slot.IsZero() {
			slot = f.Slot.UTC().Format(time.DateTime)
		}
		rows, explained, verdict := "—", "—", "—"
		if f.Status != history.StatusFailed {
			rows = count(int(f.RowsUsed))
			explained = fmt.Sprintf("%.1f%%", 100*f.DevianceExplained)
		}
		if v, ok := verdicts[f.ID]; ok {
			verdict = v.Text()
		}
		if f.Status == history.StatusFailed {
			verdict = "failed: " + f.Reason
		}
		fmt.Fprintf(tw, "%d\t%s\t%s\t%s\t%s\t%s\t%s\n", f.ID, f.Finished.UTC().Format(time.DateTime), slot, f.Status, rows, explained, verdict)
	}
	return tw.Flush()
}

func fitIDs(fits []history.StoredFit) []int64 {
	ids := make([]int64, len(fits))
	for i, f := range fits {
		ids[i] = f.ID
	}
	return ids
}
