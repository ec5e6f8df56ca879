package main

import (
	"cmp"
	"context"
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"net"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/curvewatch/curvewatch/daemon"
	"github.com/curvewatch/curvewatch/daemon/config"
	"github.com/curvewatch/curvewatch/internal/pgcluster"
	"github.com/curvewatch/curvewatch/jobs"
	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/curvewatch/curvewatch/migrations"
)

var demoHelp = help{
	title: "watch invented river sondes drift, end to end, in fast motion",
	usage: "curvewatch demo [--for DURATION] [flags]",
	about: `Runs the whole job on an invented scenario: a river authority's
dissolved-oxygen sondes at sites S03, S05 and S07, logging every ten minutes.
Oxygen is modelled against water temperature (a curve per site), flow (a
curve), hour of day (a cyclic curve) and site, with a gaussian response.

The demo creates the source table, back-fills a week of readings and fits
them once as the baseline; then it feeds new readings in fast motion (--speed
simulated hours per second) while the real daemon, in this process, refits
the model on its schedule (--every) and compares each fit with the baseline.
After --drift-after, S07's sonde fouls: its readings sag at warm
temperatures. Within a few refits the daemon raises a curve_shift alert; a
webhook sink started by the demo checks each alert's signature and prints it.
The daemon windows on received_at, the wall-clock time each reading was
written, since the demo squeezes hours into fractions of a second.

The database: the server DATABASE_URL names, in two schemas of the demo's
own (--schema, and the same name with _river; dropped at the end unless
--keep); without DATABASE_URL, a throwaway cluster started with the
PostgreSQL server binaries on this machine and removed on exit.

It stops on Ctrl-C, or after --for, and prints a recap.`,
	example: "curvewatch demo --for 2m",
	writes: []item{
		{"stdout", "where everything is (database, config, dashboard, webhook), one line per refit with its verdict, one line per alert the sink received, and a recap."},
		{"stderr", "warnings from the daemon; with --verbose its whole log."},
		{"database", "the source table and the daemon's tables in the demo's schemas, dropped on exit unless --keep (a throwaway cluster is always removed)."},
		{"files", "the daemon config, in a temporary folder that is removed on exit unless --keep."},
	},
	exits: []item{
		{"0", "stopped by Ctrl-C (SIGINT), SIGTERM or --for"},
		{"1", "an error: no PostgreSQL (the message says how to get one), a schema that already exists, the listen address in use"},
		{"2", "the command line was wrong"},
	},
}

// demoModel is the model's name in the config, the history and alerts.
const demoModel = "river-oxygen"

// demoWindowSpan is the simulated time each refit's window should hold at
// least: two days, so that weather and the time of day are told apart.
const demoWindowSpan = 50 * time.Hour

// demoBaselineSpan is the simulated time of back-filled readings the
// baseline is fitted on.
const demoBaselineSpan = 7 * 24 * time.Hour

// demoStopTimeout bounds stopping the daemon and the sink.
const demoStopTimeout = 10 * time.Second

// demoSimStart is the simulated time of the first back-filled reading: an
// invented summer.
var demoSimStart = time.Date(2025, 7, 1, 0, 0, 0, 0, time.UTC)

// demoDeps are what the demo takes from its surroundings; tests give
// their own.
type demoDeps struct {
	getenv     func(string) string
	findServer func(context.Context) (string, error)
}

// demoArgs are the demo's flags.
type demoArgs struct {
	runFor, every, driftAfter time.Duration
	speed, seed               int
	listen, schema            string
	keep, verbose             bool
}

func runDemo(ctx context.Context, e *env, args []string) error {
	return demo(ctx, e, args, demoDeps{getenv: os.Getenv, findServer: pgcluster.FindServer})
}

func demo(ctx context.Context, e *env, args []string, deps demoDeps) error {
	var a demoArgs
	fl := newFlags("demo", demoHelp)
	fl.Duration(&a.runFor, "for", "DURATION", 0, "how long the live feed runs before the demo stops by itself; 0s runs until Ctrl-C")
	fl.Int(&a.speed, "speed", "N", 5, "simulated hours per second of wall time; 5 is one simulated hour every 0.2 s")
	fl.Duration(&a.every, "every", "DURATION", 5*time.Second, "the refit schedule (@every, whole seconds)")
	fl.Duration(&a.driftAfter, "drift-after", "DURATION", 20*time.Second, "how long into the live feed S07's sonde starts to foul; 0s never")
	fl.Choice(&a.listen, "listen", "ADDR", "the daemon's address: dashboard, API, /metrics (default 127.0.0.1:0; port 0 picks a free port)")
	fl.Choice(&a.schema, "schema", "NAME", "the daemon's schema; the source table goes in NAME_river (default curvewatch_demo)")
	fl.Int(&a.seed, "seed", "N", 1, "the seed of the simulated readings' noise")
	fl.Bool(&a.keep, "keep", "keep the demo's schemas and config folder (a throwaway cluster is removed anyway)")
	if done, err := fl.parse(e, args); done || err != nil {
		return err
	}
	a.verbose = fl.verbose
	a.listen = cmp.Or(a.listen, "127.0.0.1:0")
	a.schema = cmp.Or(a.schema, "curvewatch_demo")
	switch {
	case a.runFor < 0:
		return fl.usageError("--for must be 0 (until Ctrl-C) or more, not %s", a.runFor)
	case a.speed < 1 || a.speed > 3600:
		return fl.usageError("--speed must be from 1 to 3600 simulated hours per second, not %d", a.speed)
	case a.every < time.Second || a.every%time.Second != 0:
		return fl.usageError("--every must be whole seconds, at least 1s, not %s", a.every)
	case a.driftAfter < 0:
		return fl.usageError("--drift-after must be 0 (never) or more, not %s", a.driftAfter)
	case migrations.CheckSchema(a.schema) != nil || migrations.CheckSchema(a.schema+"_river") != nil:
		return fl.usageError("--schema %q is not a usable schema name: use lower-case letters, digits and underscores", a.schema)
	}
	if _, _, err := net.SplitHostPort(a.listen); err != nil {
		return fl.usageError("--listen %q is not host:port, e.g. 127.0.0.1:0", a.listen)
	}
	level := slog.LevelWarn
	if a.verbose {
		level = slog.LevelDebug
	}
	log := slog.New(slog.NewTextHandler(e.stderr, &slog.HandlerOptions{Level: level}))
	d := &demoRun{args: a, deps: deps, out: &demoOut{w: e.stdout, now: time.Now}, log: log}
	err := d.run(ctx)
	if err != nil && ctx.Err() != nil {
		// Ctrl-C before the demo got going (the step it was in failed for
		// that reason): a stop, not a failure.
		d.log.Debug("interrupted", "error", err)
		d.out.line("stopping: interrupted before the daemon was ready")
		err = nil
	}
	if cerr := d.cleanup(context.WithoutCancel(ctx)); cerr != nil {
		err = errors.Join(err, cerr)
	}
	if err != nil && d.db != nil {
		err = errors.New(scrub(err.Error(), dsnSecrets(d.db.dsn)...))
	}
	return err
}

// demoRun is one run of the demo; cleanups undo its steps last-first.
type demoRun struct {
	args     demoArgs
	deps     demoDeps
	out      *demoOut
	log      *slog.Logger
	cleanups []func(context.Context) error

	db      *demoDB
	pool    *pgxpool.Pool
	store   *history.Store
	feed    *feeder
	sink    *hookSink
	started time.Time
	// backfilled counts the rows written before the live feed.
	backfilled int64
	// baseline is the baseline fit's id.
	baseline int64
	// recapWanted is set when the demo ran to its end: the cleanups print
	// the recap once the daemon and the feed have stopped.
	recapWanted bool
}

func (d *demoRun) onExit(fn func(context.Context) error) { d.cleanups = append(d.cleanups, fn) }

// cleanup runs the cleanups last-first.
func (d *demoRun) cleanup(ctx context.Context) error {
	var errs []error
	for i := len(d.cleanups) - 1; i >= 0; i-- {
		if err := d.cleanups[i](ctx); err != nil {
			errs = append(errs, err)
		}
	}
	d.cleanups = nil
	return errors.Join(errs...)
}

func (d *demoRun) run(ctx context.Context) error {
	a := d.args
	d.out.text("curvewatch demo: a river authority's dissolved-oxygen sondes, in fast motion\n\n")
	db, err := openDemoDB(ctx, d.deps, d.out)
	if err != nil {
		return err
	}
	d.db = db
	if db.cluster != nil {
		d.onExit(func(context.Context) error { return db.cluster.Stop() })
	}
	if d.pool, err = pgxpool.New(ctx, db.dsn); err != nil {
		return fmt.Errorf("connect to the database: %w", err)
	}
	d.onExit(func(context.Context) error { d.pool.Close(); return nil })
	pctx, cancel := context.WithTimeout(ctx, 15*time.Second)
	err = d.pool.Ping(pctx)
	cancel()
	if err != nil {
		return fmt.Errorf("cannot reach the database: %w", err)
	}

	// The schemas and the source table.
	srcSchema := a.schema + "_river"
	if err := createSchemas(ctx, d.pool, a.schema, srcSchema); err != nil {
		return err
	}
	d.onExit(func(ctx context.Context) error {
		if a.keep && db.cluster == nil {
			d.out.text("  kept         schemas %s and %s (--keep); remove them with\n               DROP SCHEMA %s, %s CASCADE\n",
				a.schema, srcSchema, a.schema, srcSchema)
			return nil
		}
		ctx, cancel := context.WithTimeout(ctx, demoStopTimeout)
		defer cancel()
		return dropSchemas(ctx, d.pool, a.schema, srcSchema)
	})
	table := pgx.Identifier{srcSchema, "sonde_readings"}
	if err := createReadings(ctx, d.pool, table); err != nil {
		return err
	}

	// The config, with the listen address and the sink's URL filled in.
	secret, err := randomHex(24)
	if err != nil {
		return err
	}
	if d.sink, err = startSink(secret, d.out, d.log); err != nil {
		return err
	}
	d.onExit(func(ctx context.Context) error {
		ctx, cancel := context.WithTimeout(ctx, demoStopTimeout)
		defer cancel()
		return d.sink.stop(ctx)
	})
	listen, err := resolveListen(a.listen)
	if err != nil {
		return err
	}
	window := demoWindow(a.every, a.speed)
	dir, err := os.MkdirTemp("", "curvewatch-demo-config-")
	if err != nil {
		return fmt.Errorf("make a folder for the config: %w", err)
	}
	d.onExit(func(context.Context) error {
		if a.keep {
			d.out.text("  kept         the config folder %s (--keep)\n", dir)
			return nil
		}
		return os.RemoveAll(dir)
	})
	cfgPath := filepath.Join(dir, "curvewatch.yaml")
	text := demoConfig(demoConfigValues{schema: a.schema, table: srcSchema + ".sonde_readings", listen: listen,
		hook: d.sink.url(), every: a.every, window: window})
	if err := os.WriteFile(cfgPath, []byte(text), 0o600); err != nil {
		return fmt.Errorf("write the config: %w", err)
	}
	cfg, err := config.Parse(strings.NewReader(text), config.ParseOptions{Dir: dir, Getenv: func(name string) string {
		switch name {
		case "DATABASE_URL":
			return db.dsn
		case "DEMO_HOOK_SECRET":
			return secret
		}
		return ""
	}})
	if err != nil {
		return fmt.Errorf("the demo's own config %s: %w", cfgPath, err)
	}
	m, _ := cfg.Model(demoModel)

	// The simulated clock: the live feed starts now, after a back-filled
	// week plus the time the daemon's first windows reach back, so that
	// the baseline (the week) and every window the daemon fits are
	// disjoint.
	lead := a.every + window + time.Second
	clock := simClock{wallAt0: time.Now(), speed: a.speed}
	backHours := int(demoBaselineSpan/time.Hour) + int(math.Ceil(clock.simSpan(lead).Hours()))
	clock.simAt0 = demoSimStart.Add(time.Duration(backHours) * time.Hour)
	rv := newRiver(uint64(a.seed), demoSimStart)
	if a.driftAfter > 0 {
		rv.foulAt = clock.simAt0.Add(clock.simSpan(a.driftAfter))
	}
	d.header(db, cfgPath, listen, window)
	n, err := writeHours(ctx, d.pool, table, rv, clock, demoSimStart, backHours)
	if err != nil {
		return fmt.Errorf("back-fill the readings: %w", err)
	}
	d.backfilled = n
	d.out.line("back-filled %s readings, simulated %s to %s", count(int(n)),
		demoSimStart.Format(simFormat), clock.simAt0.Format(simFormat))
	// The baseline: the back-filled week, ending a second before any
	// window the daemon will fit (the first reaches back a schedule
	// interval and a window from now).
	if err := migrations.Up(ctx, db.dsn, a.schema); err != nil {
		return err
	}
	if d.store, err = history.Open(ctx, db.dsn, a.schema); err != nil {
		return err
	}
	d.onExit(func(context.Context) error { d.store.Close(); return nil })
	if err := d.fitBaseline(ctx, m, clock.wallAt0.Add(-lead), clock.wall(demoSimStart)); err != nil {
		return err
	}
	d.onExit(d.recap)

	// The live feed: it catches up on the hours simulated while the
	// baseline was fitted, before the daemon reads any of them.
	d.feed = &feeder{pool: d.pool, table: table, river: rv, clock: clock, out: d.out}
	d.feed.start(ctx)
	d.onExit(func(context.Context) error { d.feed.stop(); return nil })
	d.started = clock.wallAt0

	// The daemon.
	app, err := daemon.New(cfg, daemon.Options{Logger: d.log, Workers: 2, JobTimeout: time.Minute, SoftStop: 2 * time.Second})
	if err != nil {
		return err
	}
	if err := app.Start(ctx); err != nil {
		return err
	}
	d.onExit(func(ctx context.Context) error {
		ctx, cancel := context.WithTimeout(ctx, demoStopTimeout)
		defer cancel()
		return app.Stop(ctx)
	})
	select {
	case <-app.Ready():
	case <-ctx.Done():
		d.recapWanted = true
		return nil
	}
	d.out.line("daemon ready: %s refits %s every %s", dashboardURL(app.Addr().String()), demoModel, a.every)
	return d.watch(ctx)
}

// fitBaseline fits the back-filled week (the rows received from first to
// end) as the model's first fit, which becomes its baseline.
func (d *demoRun) fitBaseline(ctx context.Context, m *config.Model, end, first time.Time) error {
	jm := daemon.JobModel(m)
	jm.Window = end.Sub(first) + time.Second
	runner := &jobs.Runner{Source: d.pool, Store: d.store, Logger: d.log}
	res, err := runner.Run(ctx, jm, end)
	if err != nil {
		return fmt.Errorf("fit the baseline: %w", err)
	}
	if res.Status != jobs.StatusSucceeded {
		return fmt.Errorf("fit the baseline: %s %s", res.Status, res.Reason)
	}
	d.baseline = res.FitID
	d.out.line("baseline: fit %d of the back-filled week, %s rows, %.1f%% of the deviance explained",
		res.FitID, count(res.Document.N), 100*res.Document.DevianceExplained)
	return nil
}

// simFormat is how simulated times are shown.
const simFormat = "2006-01-02 15:04"

// header says where everything is, and what will happen.
func (d *demoRun) header(db *demoDB, cfgPath, listen string, window time.Duration) {
	a := d.args
	drift := "never (--drift-after 0)"
	if a.driftAfter > 0 {
		drift = a.driftAfter.String() + " into the feed"
	}
	if db.cluster != nil {
		d.out.text("\n") // after the line saying that the cluster starts
	}
	d.out.text(`  database     %s
  config       %s
  dashboard    %s
  webhook      %s (signed; the demo's sink checks each alert)
  time         one simulated hour every %s; S07's sonde fouls %s
  refits       %s every %s, on the readings of the latest %s,
               compared with a baseline fitted on a back-filled week

Caution: what follows are statistical signals for people to review, not a
compliance determination.

`, db.about, cfgPath, dashboardURL(listen), d.sink.url(), time.Second/time.Duration(a.speed), drift,
		demoModel, a.every, window)
}

// demoWindow is each refit's window: at least demoWindowSpan of simulated
// time, in whole seconds, and at least one schedule interval.
func demoWindow(every time.Duration, speed int) time.Duration {
	wall := demoWindowSpan / time.Duration(3600*speed)
	return max((wall + time.Second - 1).Truncate(time.Second), every)
}

// resolveListen turns port 0 into a free port, so that the config and the
// dashboard URL show the real address.
func resolveListen(listen string) (string, error) {
	host, port, err := net.SplitHostPort(listen)
	if err != nil || port != "0" {
		return listen, err
	}
	ln, err := net.Listen("tcp", net.JoinHostPort(host, "0"))
	if err != nil {
		return "", fmt.Errorf("find a free port on %s: %w", host, err)
	}
	addr := ln.Addr().(*net.TCPAddr)
	ln.Close()
	return net.JoinHostPort(host, strconv.Itoa(addr.Port)), nil
}

// dashboardURL is the dashboard's address as a browser on this machine
// reaches it.
func dashboardURL(addr string) string {
	host, port, err := net.SplitHostPort(addr)
	if err != nil {
		return "http://" + addr + "/"
	}
	if ip := net.ParseIP(host); host == "" || ip != nil && ip.IsUnspecified() {
		host = "127.0.0.1"
	}
	return "http://" + net.JoinHostPort(host, port) + "/"
}

// dsnSecrets are what error messages must not show of a connection
// string: all of it, and its password.
func dsnSecrets(dsn string) []string {
	secrets := []string{dsn}
	if cfg, err := pgx.ParseConfig(dsn); err == nil && cfg.Password != "" {
		secrets = append(secrets, cfg.Password)
	}
	return secrets
}

func randomHex(n int) (string, error) {
	b := make([]byte, n)
	if _, err := rand.Read(b); err != nil {
		return "", fmt.Errorf("make a webhook secret: %w", err)
	}
	return hex.EncodeToString(b), nil
}

// demoConfigValues fill the demo's config.
type demoConfigValues struct {
	schema, table, listen, hook string
	every, window               time.Duration
}

// demoConfig is the daemon config the demo writes and runs.
func demoConfig(v demoConfigValues) string {
	return fmt.Sprintf(`# Written by 'curvewatch demo' for one run. The demo fills in
# ${DATABASE_URL} (the database it runs on) and ${DEMO_HOOK_SECRET} (a random
# secret shared with its webhook sink) itself.
database: ${DATABASE_URL}
schema: %[1]s
listen: %[2]s
public_url: %[3]s
alerting:
  webhooks:
    - url: %[4]s
      secret: ${DEMO_HOOK_SECRET}
models:
  - name: %[5]s
    schedule: "@every %[6]s"
    source:
      table: %[7]s
      # The demo squeezes simulated hours into fractions of a second, so
      # windows are taken on the wall-clock time each reading was written.
      time: received_at
      window: %[8]s
      overlap: 0s
    spec:
      response: dissolved_oxygen     # mg/L
      family: gaussian
      terms:
        - curve: water_temp          # °C, one curve per site
          by: site
          size: 8
        - curve: flow                # m³/s
          size: 6
        - curve: hour                # hour of day; midnight joins midnight
          basis: cyclic
          period: [0, 24]
          size: 8
        - factor: site
    watch:
      against: baseline              # fit 1, the back-filled week
      practical_shift: 0.5           # mg/L
      level: 0.99
      deviance_increase: 0.15
      confirm_runs: 2
`, v.schema, v.listen, strings.TrimSuffix(dashboardURL(v.listen), "/"), v.hook, demoModel,
		v.every, v.table, v.window)
}
