package main

import (
	"context"
	"errors"
	"fmt"
	"slices"

	"github.com/curvewatch/curvewatch/daemon/config"
	"github.com/curvewatch/curvewatch/migrations"
)

var migrateHelp = help{
	title: "create or update the daemon's tables (--down removes them)",
	usage: "curvewatch migrate --config curvewatch.yaml [--down]",
	about: `Applies the SQL migrations built into this curvewatch to the schema the
config names (schema:, default curvewatch) in its database, creating the
schema when it is missing. Migrations already applied are skipped, so
running it again does nothing. Several processes may run it at once: one
migrates while the others wait for it. 'curvewatch serve' does the same on
start, so running migrate by hand is optional.

With --down every migration is undone, newest first: the daemon's tables are
dropped with everything in them, the whole fit history included. The source
tables are never touched.

Only the config's database and schema keys are needed; other problems in
the config are mentioned but do not stop it.`,
	example: "curvewatch migrate --config curvewatch.yaml",
	writes: []item{
		{"database", "the daemon's tables in the schema (or, with --down, removes them)."},
		{"stdout", "the schema's migration version before and after."},
		{"stderr", "errors, and a note when the config has problems elsewhere."},
	},
	exits: []item{
		{"0", "the schema is at the latest migration (or, with --down, at none)"},
		{"1", "an error: the config's database or schema, the database unreachable, or a migration failed (a failed migration is rolled back and the message says what to do)"},
		{"2", "the command line was wrong"},
	},
}

func runMigrate(ctx context.Context, e *env, args []string) error {
	var path string
	var down bool
	fl := newFlags("migrate", migrateHelp)
	fl.Required(&path, "config", "FILE", "the daemon config (YAML) naming the database and schema", "the daemon config (YAML) naming the database and schema")
	fl.Bool(&down, "down", "undo every migration instead: drop the daemon's tables and the fit history in them")
	if done, err := fl.parse(e, args); done || err != nil {
		return err
	}
	cfg, err := migrationConfig(e, path)
	if err != nil {
		return err
	}
	dsn := cfg.Database.Reveal()
	before, dirty, err := migrations.Version(ctx, dsn, cfg.Schema)
	if err != nil {
		return errors.New(scrub(err.Error(), dsn))
	}
	fmt.Fprintf(e.stdout, "schema %s: before: %s\n", cfg.Schema, describeVersion(before, dirty))
	step := migrations.Up
	if down {
		step = migrations.Down
	}
	if err := step(ctx, dsn, cfg.Schema); err != nil {
		return errors.New(scrub(err.Error(), dsn))
	}
	after, dirty, err := migrations.Version(ctx, dsn, cfg.Schema)
	if err != nil {
		return errors.New(scrub(err.Error(), dsn))
	}
	fmt.Fprintf(e.stdout, "schema %s: after:  %s\n", cfg.Schema, describeVersion(after, dirty))
	return nil
}

// migrationConfig loads the config for migrate, which needs only its
// database and schema: problems elsewhere are noted on stderr, problems
// with those two end the command.
func migrationConfig(e *env, path string) (*config.Config, error) {
	cfg, err := config.Load(path)
	var cerr *config.Error
	if err == nil {
		return cfg, nil
	}
	if !errors.As(err, &cerr) {
		return nil, err
	}
	blocking := slices.ContainsFunc(cerr.Problems, func(p config.Problem) bool {
		return p.Path == "database" || p.Path == "schema"
	})
	if cfg == nil || cfg.Database.IsZero() || blocking {
		return nil, reportProblems(e.stderr, path, cerr.Problems)
	}
	fmt.Fprintf(e.stderr, "migrate: note: %s has %s outside database and schema (run 'curvewatch validate --config %s'); migrating anyway\n",
		path, plural(len(cerr.Problems), "problem", "problems"), path)
	return cfg, nil
}

// describeVersion says what a migration version means.
func describeVersion(v uint, dirty bool) string {
	switch {
	case dirty:
		return fmt.Sprintf("version %d, failed part-way (dirty)", v)
	case v == 0:
		return "version 0 (no migration applied)"
	case v == migrations.Latest():
		return fmt.Sprintf("version %d (the latest)", v)
	}
	return fmt.Sprintf("version %d of %d", v, migrations.Latest())
}
