// Package migrations holds curvewatch's database schema as embedded SQL
// files and applies them with golang-migrate.
//
// The files are NNN_name.up.sql and NNN_name.down.sql; each is run as one
// simple-query message, which PostgreSQL executes as one implicit
// transaction, so a file applies completely or not at all. Every table and
// column is documented in the SQL with COMMENT ON (psql's \d+ shows them).
//
// All curvewatch tables, and golang-migrate's own schema_migrations table,
// live in one schema named by the daemon config (`schema:`), created by Up
// when missing. The schema name is validated (letters, digits and
// underscores, not starting with a digit) and quoted as an identifier.
//
// Several replicas may call Up at once: golang-migrate holds a PostgreSQL
// advisory lock (keyed on the database, schema and migrations table) while
// it reads the version and applies files, so one replica migrates and the
// others wait for it and then find nothing to do. Creating the schema is
// serialised the same way.
package migrations

import (
	"context"
	"database/sql"
	"embed"
	"errors"
	"fmt"
	"io/fs"
	"regexp"
	"time"

	"github.com/golang-migrate/migrate/v4"
	migratepgx "github.com/golang-migrate/migrate/v4/database/pgx/v5"
	"github.com/golang-migrate/migrate/v4/source/iofs"
	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/stdlib"
)

//go:embed *.sql
var files embed.FS

// migrationsTable is golang-migrate's version table, inside the schema.
const migrationsTable = "schema_migrations"

// lockTimeout is how long Up or Down waits for another process that is
// migrating the same schema (golang-migrate's default is 15 s).
const lockTimeout = time.Minute

var schemaName = regexp.MustCompile(`^[A-Za-z_][A-Za-z0-9_]*$`)

// CheckSchema reports whether name can be used as curvewatch's schema:
// letters, digits and underscores, not starting with a digit, at most 63
// bytes (PostgreSQL's identifier limit).
func CheckSchema(name string) error {
	switch {
	case name == "":
		return errors.New("schema name is empty: set `schema:` in the config (for example curvewatch)")
	case len(name) > 63:
		return fmt.Errorf("schema name %q is longer than PostgreSQL's 63-byte identifier limit: choose a shorter one", name)
	case !schemaName.MatchString(name):
		return fmt.Errorf("schema name %q may hold only letters, digits and underscores, and must not start with a digit", name)
	}
	return nil
}

// Up creates the schema if it is missing and applies every migration not
// yet applied to it. It is safe to call from several processes at once
// (see the package comment). A cancelled ctx stops it between migration
// files.
func Up(ctx context.Context, databaseURL, schema string) error {
	if err := CheckSchema(schema); err != nil {
		return fmt.Errorf("migrate up: %w", err)
	}
	db, err := open(ctx, databaseURL, schema)
	if err != nil {
		return err
	}
	if err := createSchema(ctx, db, schema); err != nil {
		db.Close()
		return err
	}
	m, err := newMigrate(db, schema)
	if err != nil {
		return err
	}
	defer m.Close()
	if err := run(ctx, m, m.Up); err != nil {
		return explain("migrate up", schema, err)
	}
	return nil
}

// Down reverts every applied migration of the schema, dropping curvewatch's
// tables and their data (the schema and its schema_migrations table stay).
// A schema that does not exist is left alone.
func Down(ctx context.Context, databaseURL, schema string) error {
	if err := CheckSchema(schema); err != nil {
		return fmt.Errorf("migrate down: %w", err)
	}
	db, err := open(ctx, databaseURL, schema)
	if err != nil {
		return err
	}
	if ok, err := schemaExists(ctx, db, schema); err != nil || !ok {
		db.Close()
		return err
	}
	m, err := newMigrate(db, schema)
	if err != nil {
		return err
	}
	defer m.Close()
	if err := run(ctx, m, m.Down); err != nil {
		return explain("migrate down", schema, err)
	}
	return nil
}

// Version returns the last migration applied to the schema (0 when none
// is, or the schema does not exist) and whether it failed part-way (dirty).
func Version(ctx context.Context, databaseURL, schema string) (version uint, dirty bool, err error) {
	if err := CheckSchema(schema); err != nil {
		return 0, false, fmt.Errorf("migration version: %w", err)
	}
	db, err := open(ctx, databaseURL, schema)
	if err != nil {
		return 0, false, err
	}
	if ok, err := schemaExists(ctx, db, schema); err != nil || !ok {
		db.Close()
		return 0, false, err
	}
	m, err := newMigrate(db, schema)
	if err != nil {
		return 0, false, err
	}
	defer m.Close()
	version, dirty, err = m.Version()
	if errors.Is(err, migrate.ErrNilVersion) {
		return 0, false, nil
	}
	if err != nil {
		return 0, false, explain("migration version", schema, err)
	}
	return version, dirty, nil
}

// Latest is the version of the newest embedded migration: the version Up
// leaves the schema at.
func Latest() uint {
	src, err := iofs.New(files, ".")
	if err != nil {
		panic(err) // the embedded files are checked by the tests
	}
	defer src.Close()
	v, err := src.First()
	for err == nil {
		var next uint
		if next, err = src.Next(v); err == nil {
			v = next
		}
	}
	return v
}

// open connects with the schema as the only search_path entry, so that the
// unqualified names in the SQL files resolve inside it.
func open(ctx context.Context, databaseURL, schema string) (*sql.DB, error) {
	cfg, err := pgx.ParseConfig(databaseURL)
	if err != nil {
		// pgx's message may quote the URL, password included.
		return nil, fmt.Errorf("migrations for schema %q: the database URL does not parse: give a postgres://user@host:port/database URL", schema)
	}
	cfg.RuntimeParams["search_path"] = schema
	db := stdlib.OpenDB(*cfg)
	if err := db.PingContext(ctx); err != nil {
		db.Close()
		return nil, fmt.Errorf("migrations for schema %q: cannot reach the database at %s:%d (is PostgreSQL running, and the URL right?): %w", schema, cfg.Host, cfg.Port, err)
	}
	return db, nil
}

func schemaExists(ctx context.Context, db *sql.DB, schema string) (bool, error) {
	var ok bool
	err := db.QueryRowContext(ctx, `SELECT EXISTS (SELECT 1 FROM pg_namespace WHERE nspname = $1)`, schema).Scan(&ok)
	if err != nil {
		return false, fmt.Errorf("migrations: look for schema %q: %w", schema, err)
	}
	return ok, nil
}

// createSchema creates the schema when it is missing. Two processes
// creating the same schema at once would race in CREATE SCHEMA IF NOT
// EXISTS (one fails on a unique violation), so the statement runs under a
// transaction-scoped advisory lock keyed on the schema name.
func createSchema(ctx context.Context, db *sql.DB, schema string) error {
	if ok, err := schemaExists(ctx, db, schema); err != nil || ok {
		return err
	}
	tx, err := db.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("migrations: create schema %q: %w", schema, err)
	}
	defer tx.Rollback()
	if _, err := tx.ExecContext(ctx, `SELECT pg_advisory_xact_lock(hashtext('curvewatch.migrations'), hashtext($1))`, schema); err != nil {
		return fmt.Errorf("migrations: create schema %q: %w", schema, err)
	}
	if _, err := tx.ExecContext(ctx, `CREATE SCHEMA IF NOT EXISTS `+pgx.Identifier{schema}.Sanitize()); err != nil {
		return fmt.Errorf("migrations: create schema %q (does the database user have the CREATE privilege on the database, or can an administrator create the schema for it?): %w", schema, err)
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("migrations: create schema %q: %w", schema, err)
	}
	return nil
}

// newMigrate wraps db for golang-migrate; on success the returned Migrate
// owns db and closes it.
func newMigrate(db *sql.DB, schema string) (*migrate.Migrate, error) {
	driver, err := migratepgx.WithInstance(db, &migratepgx.Config{SchemaName: schema, MigrationsTable: migrationsTable})
	if err != nil {
		db.Close()
		return nil, explain("migrations", schema, err)
	}
	src, err := iofs.New(files, ".")
	if err != nil {
		driver.Close()
		return nil, fmt.Errorf("migrations: read the embedded files: %w", err)
	}
	m, err := migrate.NewWithInstance("iofs", src, "pgx5", driver)
	if err != nil {
		src.Close()
		driver.Close()
		return nil, fmt.Errorf("migrations for schema %q: %w", schema, err)
	}
	m.LockTimeout = lockTimeout
	return m, nil
}

// run calls step (m.Up or m.Down), asking golang-migrate to stop after the
// current file when ctx is cancelled. ErrNoChange is success.
func run(ctx context.Context, m *migrate.Migrate, step func() error) error {
	done := make(chan struct{})
	defer close(done)
	go func() {
		select {
		case <-ctx.Done():
			select {
			case m.GracefulStop <- true:
			default:
			}
		case <-done:
		}
	}()
	err := step()
	if errors.Is(err, migrate.ErrNoChange) {
		err = nil
	}
	if err == nil {
		err = ctx.Err()
	}
	return err
}

// explain turns golang-migrate's errors into ones that name the schema and
// say what to do.
func explain(op, schema string, err error) error {
	var dirty migrate.ErrDirty
	switch {
	case errors.As(err, &dirty):
		return fmt.Errorf("%s: schema %q is dirty: migration %d failed part-way; finish or undo it by hand (see migrations/%03d_*.up.sql), then set version %d (finished) or the one before (undone), dirty false, in %s.%s, and run migrate again: %w",
			op, schema, dirty.Version, dirty.Version, dirty.Version, schema, migrationsTable, err)
	case errors.Is(err, migrate.ErrLockTimeout):
		return fmt.Errorf("%s: schema %q: another process held the migration lock for over %s; wait for it to finish (or find the session holding the advisory lock in pg_locks) and run migrate again: %w", op, schema, lockTimeout, err)
	case errors.Is(err, fs.ErrNotExist):
		// golang-migrate's "no migration found for version N": a newer
		// binary migrated the schema.
		return fmt.Errorf("%s: schema %q is at a migration this curvewatch does not know (newest it knows: %d): upgrade curvewatch, or use the version that migrated it: %w", op, schema, Latest(), err)
	case errors.Is(err, context.Canceled), errors.Is(err, context.DeadlineExceeded):
		return fmt.Errorf("%s: schema %q: stopped before finishing (run migrate again to continue): %w", op, schema, err)
	}
	return fmt.Errorf("%s: schema %q: %w", op, schema, err)
}
