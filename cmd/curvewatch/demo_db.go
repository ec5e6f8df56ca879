package main

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"sync/atomic"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/curvewatch/curvewatch/internal/pgcluster"
)

// errNoPostgres says how to get a PostgreSQL for the demo.
const errNoPostgres = `no PostgreSQL to run on: DATABASE_URL is not set, and this machine has no
PostgreSQL server binaries (initdb, pg_ctl) to start a throwaway cluster with.
Either install the server, and run the demo again:
  apt-get install -y postgresql          (Debian, Ubuntu; or your system's
                                           PostgreSQL server package)
or point the demo at a server where it may create and drop two schemas:
  DATABASE_URL=postgres://user@host:5432/db curvewatch demo`

// demoDB is the database the demo runs on.
type demoDB struct {
	dsn string
	// about says what it is, for the header.
	about string
	// cluster is the throwaway cluster, nil with DATABASE_URL.
	cluster *pgcluster.Cluster
}

// openDemoDB picks the database: DATABASE_URL when set, else a throwaway
// cluster (the caller stops it).
func openDemoDB(ctx context.Context, deps demoDeps, out *demoOut) (*demoDB, error) {
	if dsn := deps.getenv("DATABASE_URL"); dsn != "" {
		cfg, err := pgx.ParseConfig(dsn)
		if err != nil {
			// pgx's message may quote the URL, password included.
			return nil, errors.New("DATABASE_URL does not parse: give a postgres://user@host:port/database URL")
		}
		return &demoDB{dsn: dsn, about: fmt.Sprintf("DATABASE_URL (%s:%d, database %s)", cfg.Host, cfg.Port, cfg.Database)}, nil
	}
	bin, err := deps.findServer(ctx)
	if errors.Is(err, pgcluster.ErrNoServer) {
		return nil, errors.New(errNoPostgres)
	} else if err != nil {
		return nil, err
	}
	out.line("starting a throwaway PostgreSQL cluster (server binaries in %s)", bin)
	c, err := pgcluster.Start(ctx, pgcluster.Options{Bin: bin, Prefix: "curvewatch-demo-"})
	if err != nil {
		return nil, fmt.Errorf("start a throwaway PostgreSQL cluster: %w", err)
	}
	return &demoDB{dsn: c.URL, cluster: c,
		about: fmt.Sprintf("a throwaway cluster on 127.0.0.1:%d (removed on exit)", c.Port)}, nil
}

// createSchemas creates the daemon's schema and the source schema,
// refusing ones that already exist: the demo drops what it creates, and
// must not drop what it did not.
func createSchemas(ctx context.Context, pool *pgxpool.Pool, names ...string) error {
	var existing []string
	if err := pool.QueryRow(ctx, `SELECT coalesce(array_agg(nspname::text ORDER BY nspname), '{}') FROM pg_namespace WHERE nspname = ANY($1)`, names).Scan(&existing); err != nil {
		return fmt.Errorf("look for the demo's schemas: %w", err)
	}
	if len(existing) > 0 {
		return fmt.Errorf("schema %s already exists (left by 'curvewatch demo --keep'?): drop it with DROP SCHEMA %s CASCADE, or give the demo another with --schema",
			existing[0], pgx.Identifier{existing[0]}.Sanitize())
	}
	for _, n := range names {
		if _, err := pool.Exec(ctx, "CREATE SCHEMA "+pgx.Identifier{n}.Sanitize()); err != nil {
			return fmt.Errorf("create schema %s (the database user needs the CREATE privilege): %w", n, err)
		}
	}
	return nil
}

// dropSchemas drops the demo's schemas with everything in them.
func dropSchemas(ctx context.Context, pool *pgxpool.Pool, names ...string) error {
	var errs []error
	for _, n := range names {
		if _, err := pool.Exec(ctx, "DROP SCHEMA IF EXISTS "+pgx.Identifier{n}.Sanitize()+" CASCADE"); err != nil {
			errs = append(errs, fmt.Errorf("drop schema %s: %w", n, err))
		}
	}
	return errors.Join(errs...)
}

// readingColumns are the source table's columns, in COPY order.
var readingColumns = []string{"observed_at", "received_at", "site", "water_temp", "flow", "hour", "dissolved_oxygen"}

// createReadings creates the source table.
func createReadings(ctx context.Context, pool *pgxpool.Pool, table pgx.Identifier) error {
	_, err := pool.Exec(ctx, `CREATE TABLE `+table.Sanitize()+` (
		observed_at      timestamptz NOT NULL,   -- simulated time of the reading
		received_at      timestamptz NOT NULL,   -- wall-clock time it was written
		site             text NOT NULL,
		water_temp       double precision,       -- °C
		flow             double precision,       -- m³/s
		hour             double precision,       -- hour of day, simulated
		dissolved_oxygen double precision        -- mg/L
	);
	CREATE INDEX ON `+table.Sanitize()+` (received_at)`)
	if err != nil {
		return fmt.Errorf("create the source table: %w", err)
	}
	return nil
}

// simClock maps simulated time onto the wall clock: simulated instant
// simAt0 is wall instant wallAt0, and speed simulated hours pass per wall
// second (a simulated hour takes 1/speed s). The daemon windows on
// received_at, the wall-clock side.
type simClock struct {
	simAt0, wallAt0 time.Time
	speed           int
}

// wall returns the wall-clock instant of simulated instant sim.
func (c simClock) wall(sim time.Time) time.Time {
	return c.wallAt0.Add(sim.Sub(c.simAt0) / time.Duration(3600*c.speed))
}

// simSpan is the simulated time that passes in wall time d.
func (c simClock) simSpan(d time.Duration) time.Duration { return d * time.Duration(3600*c.speed) }

// writeHours writes the readings of simulated hours [from, from+n) to the
// table with COPY and returns how many rows it wrote.
func writeHours(ctx context.Context, pool *pgxpool.Pool, table pgx.Identifier, rv *river, clock simClock, from time.Time, n int) (int64, error) {
	var rows [][]any
	for i := range n {
		for _, r := range rv.hour(from.Add(time.Duration(i) * time.Hour)) {
			rows = append(rows, []any{r.observed, clock.wall(r.observed), r.site, r.temp, r.flow, r.hour, r.oxygen})
		}
	}
	return pool.CopyFrom(ctx, table, readingColumns, pgx.CopyFromRows(rows))
}

// feeder writes one simulated hour of readings per tick of the simulated
// clock, from the clock's start, until stopped.
type feeder struct {
	pool  *pgxpool.Pool
	table pgx.Identifier
	river *river
	clock simClock
	out   *demoOut

	rows   atomic.Int64
	simNow atomic.Int64 // unix seconds of the next simulated hour to write

	cancel context.CancelFunc
	done   chan struct{}
	mu     sync.Mutex
	err    error
}

// start runs the feed in the background. Writing a simulated hour's rows
// when it starts, with received_at at each reading's mapped wall time
// (never before the write), means that a refit never misses a row that is
// written late.
func (f *feeder) start(ctx context.Context) {
	ctx, f.cancel = context.WithCancel(ctx)
	f.done = make(chan struct{})
	f.simNow.Store(f.clock.simAt0.Unix())
	go func() {
		defer close(f.done)
		fouled := false
		for hour := 0; ; hour++ {
			sim := f.clock.simAt0.Add(time.Duration(hour) * time.Hour)
			if wait := time.Until(f.clock.wall(sim)); wait > 0 {
				select {
				case <-ctx.Done():
					return
				case <-time.After(wait):
				}
			}
			if ctx.Err() != nil {
				return
			}
			if !fouled && !f.river.foulAt.IsZero() && !sim.Before(f.river.foulAt) {
				fouled = true
				f.out.line("%s's sonde starts to foul (simulated): its readings sag at warm water temperatures", foulingSite)
			}
			n, err := writeHours(ctx, f.pool, f.table, f.river, f.clock, sim, 1)
			if err != nil {
				if ctx.Err() == nil {
					f.mu.Lock()
					f.err = fmt.Errorf("feed the readings of %s: %w", sim.Format(time.DateTime), err)
					f.mu.Unlock()
				}
				return
			}
			f.rows.Add(n)
			f.simNow.Store(sim.Add(time.Hour).Unix())
		}
	}()
}

// stop stops the feed and waits for it.
func (f *feeder) stop() {
	if f.cancel == nil {
		return
	}
	f.cancel()
	<-f.done
}

// failed returns the error that stopped the feed, or nil.
func (f *feeder) failed() error {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.err
}

// stopped is closed when the feed ends.
func (f *feeder) stopped() <-chan struct{} { return f.done }
