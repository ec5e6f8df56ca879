package main

import (
	"context"
	"errors"
	"fmt"
	"strconv"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/curvewatch/curvewatch/daemon"
	"github.com/curvewatch/curvewatch/daemon/config"
	"github.com/curvewatch/curvewatch/jobs"
	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/curvewatch/curvewatch/migrations"
)

var refitHelp = help{
	title: "refit one configured model now, as the daemon would",
	usage: "curvewatch run --config curvewatch.yaml --model NAME",
	about: `Pulls the model's rolling window of rows (ending now) from its source
table inside a read-only snapshot, fits the model, compares the fit with the
model's reference (its pinned baseline, or the previous fit whose window does
not overlap, as watch.against says; the first successful fit becomes the
baseline), and records the fit, its curve points and the comparison in the
daemon's tables in one transaction. The daemon's tables are created first if
they are missing.

Bad data or a bad spec fail this refit alone: the failure is recorded with
its reason, as a scheduled refit's would be.`,
	example: "curvewatch run --config curvewatch.yaml --model sonde-07-oxygen",
	writes: []item{
		{"database", "a fit row (or a failure with its reason), its curve points, the comparison, and the baseline when there was none."},
		{"stdout", "the fit's summary, then the comparison with the reference."},
		{"stderr", "errors."},
	},
	exits: []item{
		{"0", "the refit succeeded and nothing breached"},
		{"1", "an error, or the refit failed (its reason is recorded and printed)"},
		{"2", "the command line was wrong"},
		{"3", "the refit succeeded and a shift breached the model's tolerance"},
	},
}

func runRun(ctx context.Context, e *env, args []string) error {
	var path, model string
	fl := newFlags("run", refitHelp)
	fl.Required(&path, "config", "FILE", "the daemon config (YAML)", "the daemon config (YAML) naming the database and the models")
	fl.Required(&model, "model", "NAME", "the model to refit (a name under models:)", "the name of the model to refit, as under models: in the config")
	if done, err := fl.parse(e, args); done || err != nil {
		return err
	}
	cfg, m, err := loadModel(path, model)
	if err != nil {
		return err
	}
	dsn := cfg.Database.Reveal()
	if err := migrations.Up(ctx, dsn, cfg.Schema); err != nil {
		return errors.New(scrub(err.Error(), dsn))
	}
	store, err := history.Open(ctx, dsn, cfg.Schema)
	if err != nil {
		return errors.New(scrub(err.Error(), dsn))
	}
	defer store.Close()
	pool, err := pgxpool.New(ctx, dsn)
	if err != nil {
		return errors.New(scrub(err.Error(), dsn))
	}
	defer pool.Close()
	// Alert states change as the daemon's refits change them; what is to
	// be delivered waits in the outbox for the serving daemon.
	runner := &jobs.Runner{Source: pool, Store: store, Logger: fl.logger(e), OnRecord: daemon.AlertHook(cfg, store)}
	res, err := runner.Run(ctx, daemon.JobModel(m), time.Time{})
	if err != nil {
		return errors.New(scrub(err.Error(), dsn))
	}
	if res.Status == jobs.StatusFailed {
		return fmt.Errorf("run: model %q: the refit failed (recorded as fit %d): %s", m.Name, res.FitID, res.Reason)
	}
	fmt.Fprintf(e.stdout, "refit of %s recorded as fit %d (%s)\n\n", m.Name, res.FitID, res.Status)
	if err := writeSummary(e.stdout, res.Document); err != nil {
		return err
	}
	fmt.Fprintln(e.stdout)
	if res.Report == nil {
		fmt.Fprintf(e.stdout, "no comparison: %s\n", res.CompareNote)
		return nil
	}
	names := compareNames{reference: "fit " + strconv.FormatInt(res.ReferenceID, 10), candidate: "fit " + strconv.FormatInt(res.FitID, 10), link: string(res.Document.Link)}
	if err := writeCompareReport(e.stdout, res.Report, names); err != nil {
		return err
	}
	if res.Report.Breach {
		return &exitError{code: exitBreach}
	}
	return nil
}

// loadModel loads a config that must have no problems and finds a model.
func loadModel(path, name string) (*config.Config, *config.Model, error) {
	cfg, err := config.Load(path)
	if err != nil {
		return nil, nil, fmt.Errorf("%w\n(run 'curvewatch validate --config %s' for the details)", err, path)
	}
	m, ok := cfg.Model(name)
	if !ok {
		var names []string
		for _, mm := range cfg.Models {
			names = append(names, mm.Name)
		}
		return nil, nil, fmt.Errorf("%s has no model %q; its models are %v", path, name, names)
	}
	return cfg, m, nil
}

// modelStore loads the config, finds the model and opens the history
// store. The returned dsn is for scrubbing error messages; close the store.
func modelStore(ctx context.Context, path, name string) (m *config.Model, store *history.Store, dsn string, err error) {
	cfg, m, err := loadModel(path, name)
	if err != nil {
		return nil, nil, "", err
	}
	dsn = cfg.Database.Reveal()
	store, err = history.Open(ctx, dsn, cfg.Schema)
	if err != nil {
		return nil, nil, "", errors.New(scrub(err.Error(), dsn))
	}
	return m, store, dsn, nil
}
