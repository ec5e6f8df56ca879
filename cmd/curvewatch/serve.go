package main

import (
	"cmp"
	"context"
	"errors"
	"log/slog"
	"os"
	"runtime"
	"time"

	"github.com/curvewatch/curvewatch/daemon"
	"github.com/curvewatch/curvewatch/daemon/config"
)

var serveHelp = help{
	title: "run the daemon: refit every model on its schedule",
	usage: "curvewatch serve --config curvewatch.yaml [flags]",
	about: `Refits every model of the config on its schedule (a 5-field cron expression
in the config's time zone, or @every), compares each new fit with its
reference and records it all in the config's schema. Several replicas may
serve the same config against one database: each scheduled slot of each
model is run once across all of them, a model never runs twice at once, and
a slot whose replica died mid-refit is run again by another after the lease
(twice --job-timeout).

On start it serves, on the config's listen address, the dashboard (/), the
JSON API (/api/v1/), /metrics, /healthz and /readyz; then it connects to the
database, retrying with backoff while it is down;
applies the migrations (as 'curvewatch migrate' does, plus the job queue's
own tables); and runs, once, each model's latest slot that the history has
no refit for.

SIGTERM or SIGINT stops it within 10 seconds: a refit in flight is given
half of that to finish, then cancelled, and its transaction rolls back; its
slot is run again on the next start or by another replica.

Each refit also updates the model's alerts (pending, firing, resolved) in
its own transaction and queues what the receivers in the config's alerting
section must hear; any replica sends the queue, retrying failures, and
re-sends firing alerts to Alertmanager every alerting.resend_every.

Unless the environment sets them, it runs Go with GOMAXPROCS at twice
--workers, so that a refit whose database reply has arrived need not wait
for another refit's fit to be preempted, and with GOGC=400, so that the
fits' short-lived memory is collected less often; GOMAXPROCS and GOGC in
the environment override both.`,
	example: "curvewatch serve --config curvewatch.yaml",
	writes: []item{
		{"database", "the fit history in the config's schema (fits, curve points, comparisons, baselines, watermarks, alert states and deliveries) and the job queue's tables there."},
		{"listen", "the dashboard, the API, /metrics, /healthz (200 while the process runs) and /readyz (200 when the database answers and the schema is migrated; 503 with the reason otherwise)."},
		{"alerts", "to the Alertmanagers and webhooks of the config's alerting section."},
		{"stderr", "the log: one line per refit, and warnings such as an unreachable database; with --verbose also the job queue's detail."},
	},
	exits: []item{
		{"0", "stopped by SIGTERM or SIGINT"},
		{"1", "an error: a problem in the config (one line each, above), the listen address in use, or a stop that took longer than 10 seconds"},
		{"2", "the command line was wrong"},
	},
}

// serveStopTimeout bounds a stop after SIGTERM.
const serveStopTimeout = 10 * time.Second

func runServe(ctx context.Context, e *env, args []string) error {
	var path string
	var workers int
	var jobTimeout time.Duration
	fl := newFlags("serve", serveHelp)
	fl.Required(&path, "config", "FILE", "the daemon config (YAML): database, schema, listen address and models", "the daemon config (YAML) to serve")
	fl.Int(&workers, "workers", "N", 0, "the most refits this process computes at once (0: one per CPU it may use, GOMAXPROCS's default, which follows a container's CPU limit); twice as many are under way, so that waits on the database overlap other refits' computing")
	fl.Duration(&jobTimeout, "job-timeout", "DURATION", daemon.DefaultJobTimeout, "the longest one refit may run; one that overruns is cancelled and recorded as failed")
	if done, err := fl.parse(e, args); done || err != nil {
		return err
	}
	if workers < 0 {
		return fl.usageError("--workers must be 0 or more, not %d", workers)
	}
	if jobTimeout <= 0 {
		return fl.usageError("--job-timeout must be above 0, not %s", jobTimeout)
	}
	cfg, err := config.Load(path)
	var cerr *config.Error
	if errors.As(err, &cerr) {
		return reportProblems(e.stderr, path, cerr.Problems)
	}
	if err != nil {
		return err
	}
	level := slog.LevelInfo
	if fl.verbose {
		level = slog.LevelDebug
	}
	log := slog.New(slog.NewTextHandler(e.stderr, &slog.HandlerOptions{Level: level}))
	// The cores this process may use: GOMAXPROCS before serve raises it
	// (the runtime's default follows a container's CPU limit).
	cpus := runtime.GOMAXPROCS(0)
	workers = cmp.Or(workers, cpus)
	rt := daemon.ServeRuntime(workers, os.Getenv)
	defer rt.Apply()()
	log.Info("starting", "cpus", cpus, "workers", workers, "runtime", rt.String())
	app, err := daemon.New(cfg, daemon.Options{Logger: log, CPUs: cpus, Workers: workers, JobTimeout: jobTimeout})
	if err != nil {
		return err
	}
	if err := app.Start(ctx); err != nil {
		return err
	}
	<-ctx.Done()
	log.Info("stopping", "timeout", serveStopTimeout)
	stopCtx, cancel := context.WithTimeout(context.WithoutCancel(ctx), serveStopTimeout)
	defer cancel()
	return app.Stop(stopCtx)
}
