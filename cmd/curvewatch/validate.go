package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"slices"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"github.com/curvewatch/curvewatch/daemon/config"
	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs/source"
	"github.com/curvewatch/curvewatch/migrations"
)

var validateHelp = help{
	title: "check the daemon config, its source tables and columns",
	usage: "curvewatch validate --config curvewatch.yaml [flags]",
	about: `Reads the daemon config the way 'curvewatch serve' does and reports every
problem at once: unknown or misspelt keys, unset ${VAR} environment
variables, cron expressions, time zone, windows, watch tolerances and each
model's spec.

Then it connects to the database (waiting at most --timeout) and, for each
model, checks that the source table exists and can be read, that its time
column has a time type (timestamp, timestamp with time zone or date), that
every column the spec uses exists with a type the model can read (numbers
for the response, weights, offset, curves, surfaces, linear terms and the
serial order; text, boolean, enum or integer types for factors and by),
and that PostgreSQL accepts the where predicate (planned with EXPLAIN, not
run, inside a READ ONLY transaction with a statement timeout). It also says
whether the daemon's schema has been migrated. Nothing is written.`,
	example: "curvewatch validate --config curvewatch.yaml",
	writes: []item{
		{"stdout", "what it found: the config, the database (server, user, migration version) and one line per model: its table, the columns it reads with their types, its schedule and the next run time in the configured time zone; then, when all is well, a line saying so."},
		{"stderr", "one line per problem, as FILE:LINE: KEY: what is wrong and what to do, then a count."},
	},
	exits: []item{
		{"0", "no problem found"},
		{"1", "a problem: in the config, or in the database (unreachable, a missing table or column, a column of the wrong type, a where predicate PostgreSQL rejects)"},
		{"2", "the command line was wrong"},
	},
}

// Duration defines a flag holding a Go duration, with a default.
func (f *flags) Duration(p *time.Duration, name, arg string, value time.Duration, usage string) {
	f.fs.DurationVar(p, name, value, usage)
	f.order = append(f.order, flagDoc{name: name, arg: arg})
}

// validateArgs are the validate command's flags.
type validateArgs struct {
	config  string
	offline bool
	timeout time.Duration
}

func runValidate(ctx context.Context, e *env, args []string) error {
	var a validateArgs
	fl := newFlags("validate", validateHelp)
	fl.Required(&a.config, "config", "FILE", "the daemon config (YAML) to check", "the daemon config (YAML) to check")
	fl.Bool(&a.offline, "offline", "check the config file alone, without connecting to the database")
	fl.Duration(&a.timeout, "timeout", "DURATION", 10*time.Second, "the longest to wait for the database: to connect, and for each statement")
	if done, err := fl.parse(e, args); done || err != nil {
		return err
	}
	if a.timeout <= 0 {
		return fl.usageError("--timeout must be above 0, not %s", a.timeout)
	}
	return validate(ctx, e, a)
}

// validate checks the config and, unless offline, the database; it prints
// what it found and the problems, and fails when there is one.
func validate(ctx context.Context, e *env, a validateArgs) error {
	cfg, err := config.Load(a.config)
	var problems []config.Problem
	var cerr *config.Error
	switch {
	case errors.As(err, &cerr):
		problems = append(problems, cerr.Problems...)
	case err != nil:
		return err
	}
	if cfg == nil {
		return reportProblems(e.stderr, a.config, problems)
	}
	fmt.Fprintf(e.stdout, "config %s: %s; schema %s; listen %s; time zone %s\n", a.config,
		plural(len(cfg.Models), "model", "models"), cfg.Schema, cfg.Listen, cfg.Timezone)

	var db *dbCheck
	switch {
	case a.offline:
		fmt.Fprintln(e.stdout, "database: not checked (--offline)")
	case cfg.Database.IsZero():
		fmt.Fprintln(e.stdout, "database: not checked (the config's database key has a problem)")
	default:
		var p *config.Problem
		db, p = connectCheck(ctx, cfg, a)
		if p != nil {
			problems = append(problems, *p)
		} else {
			defer db.conn.Close(context.Background())
			status, dbProblems := db.describe(ctx, cfg)
			fmt.Fprintln(e.stdout, status)
			problems = append(problems, dbProblems...)
		}
	}
	now := time.Now()
	for i := range cfg.Models {
		m := &cfg.Models[i]
		var cols []source.Column
		var mp []config.Problem
		if db != nil {
			cols, mp = db.checkModel(ctx, i, m)
			problems = append(problems, mp...)
		}
		fmt.Fprintln(e.stdout, describeModel(m, cols, cfg.Location, now))
	}
	if len(problems) == 0 {
		fmt.Fprintf(e.stdout, "no problems found in %s\n", a.config)
		return nil
	}
	return reportProblems(e.stderr, a.config, problems)
}

// reportProblems prints the problems, one line each in line order, and
// returns the error that ends the command, or nil when there are none.
func reportProblems(w io.Writer, file string, problems []config.Problem) error {
	if len(problems) == 0 {
		return nil
	}
	slices.SortStableFunc(problems, func(a, b config.Problem) int { return a.Line - b.Line })
	for _, p := range problems {
		at := file
		if p.Line > 0 {
			at = fmt.Sprintf("%s:%d", file, p.Line)
		}
		if p.Path != "" {
			at += ": " + p.Path
		}
		fmt.Fprintf(w, "%s: %s\n", at, p.Message)
	}
	return fmt.Errorf("%s: %s (listed above); fix them and run again", file, plural(len(problems), "problem", "problems"))
}

// describeModel is a model's line of the report: its table, the columns it
// reads (with their types when the database was checked), its schedule and
// its next run.
func describeModel(m *config.Model, cols []source.Column, loc *time.Location, now time.Time) string {
	var b strings.Builder
	name := m.Name
	if name == "" {
		name = fmt.Sprintf("(line %d)", m.Line)
	}
	fmt.Fprintf(&b, "model %s: table %s", name, orDash(m.Source.Table.String()))
	types := map[string]string{}
	for _, c := range cols {
		types[c.Name] = c.Type
	}
	typed := func(col string) string {
		if t, ok := types[col]; ok {
			return col + " " + t
		}
		return col
	}
	src := []string{"time " + typed(orDash(m.Source.Time))}
	if m.Source.Where != "" {
		src = append(src, "where "+strings.Join(strings.Fields(m.Source.Where), " "))
	}
	if m.Source.Window > 0 {
		src = append(src, "window "+fmtWindow(m.Source.Window)+", overlap "+fmtWindow(m.Source.Overlap))
	}
	fmt.Fprintf(&b, " (%s)", strings.Join(src, "; "))
	if m.Spec != nil {
		numeric, text := m.Spec.Columns()
		var list []string
		for _, c := range append(numeric, text...) {
			list = append(list, typed(c))
		}
		fmt.Fprintf(&b, "; columns %s", strings.Join(list, ", "))
	}
	fmt.Fprintf(&b, "; schedule %q", m.Schedule)
	if m.Cron != nil {
		fmt.Fprintf(&b, ", next run %s", m.Cron.Next(now).In(loc).Format("2006-01-02 15:04 MST"))
		if loc != time.UTC {
			fmt.Fprintf(&b, " (%s)", loc)
		}
	}
	return b.String()
}

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

// fmtWindow writes a window or overlap the way it is usually configured.
func fmtWindow(d time.Duration) string {
	const day = 24 * time.Hour
	switch {
	case d >= day && d%day == 0:
		return fmt.Sprintf("%dd", d/day)
	case d%time.Hour == 0:
		return fmt.Sprintf("%dh", d/time.Hour)
	case d%time.Minute == 0:
		return fmt.Sprintf("%dm", d/time.Minute)
	}
	return d.String()
}

// dbCheck is an open connection for checking a config's models.
type dbCheck struct {
	conn    *pgx.Conn
	cfg     *pgx.ConnConfig
	timeout time.Duration
	secrets []string // never to be printed
}

// connectCheck connects to the config's database, or returns the problem
// saying why it cannot, with what to check and no secret in it.
func connectCheck(ctx context.Context, cfg *config.Config, a validateArgs) (*dbCheck, *config.Problem) {
	dsn := cfg.Database.Reveal()
	line := cfg.Lines["database"]
	pcfg, err := pgx.ParseConfig(dsn)
	if err != nil {
		msg := err.Error()
		var pe *pgconn.ParseConfigError
		if errors.As(err, &pe) {
			if _, after, ok := strings.Cut(msg, "`: "); ok {
				msg = after
			}
		}
		return nil, &config.Problem{Line: line, Path: "database", Message: "cannot read the connection string: " + scrub(msg, dsn) + " (the value is not shown: it may hold a password)"}
	}
	d := &dbCheck{cfg: pcfg, timeout: a.timeout, secrets: []string{dsn, pcfg.Password}}
	if pcfg.ConnectTimeout == 0 || pcfg.ConnectTimeout > a.timeout {
		pcfg.ConnectTimeout = a.timeout
	}
	cctx, cancel := context.WithTimeout(ctx, a.timeout)
	defer cancel()
	conn, err := pgx.ConnectConfig(cctx, pcfg)
	if err != nil {
		return nil, &config.Problem{Line: line, Path: "database", Message: fmt.Sprintf(
			"cannot reach the database at %s: %s; check that PostgreSQL is running there and accepts this user, and that the database setting (or the environment variable it names) is right",
			d.where(), d.scrub(connectCause(err)))}
	}
	d.conn = conn
	return d, nil
}

// where says which server, database and user a connection is for.
func (d *dbCheck) where() string {
	host := d.cfg.Host
	if strings.HasPrefix(host, "/") {
		host = "socket " + host
	}
	return fmt.Sprintf("%s port %d (database %s, user %s)", host, d.cfg.Port, d.cfg.Database, d.cfg.User)
}

// connectCause is the reason a connection failed, on one line, without
// pgx's prefix (which repeats the user and database) and without repeats
// (pgx joins the errors of each attempt, such as with and without TLS).
func connectCause(err error) string {
	msg := err.Error()
	var ce *pgconn.ConnectError
	if errors.As(err, &ce) {
		if inner := errors.Unwrap(ce); inner != nil {
			msg = inner.Error()
		}
	}
	var parts []string
	for _, line := range strings.Split(msg, "\n") {
		if line = strings.TrimSpace(line); line != "" && !slices.Contains(parts, line) {
			parts = append(parts, line)
		}
	}
	return strings.Join(parts, "; ")
}

// scrub removes the secrets from msg.
func (d *dbCheck) scrub(msg string) string { return scrub(msg, d.secrets...) }

func scrub(msg string, secrets ...string) string {
	for _, s := range secrets {
		if len(s) >= 3 {
			msg = strings.ReplaceAll(msg, s, "[redacted]")
		}
	}
	return msg
}

// describe reports the server and the daemon schema's migration version.
func (d *dbCheck) describe(ctx context.Context, cfg *config.Config) (string, []config.Problem) {
	cctx, cancel := context.WithTimeout(ctx, d.timeout)
	defer cancel()
	var version string
	if err := d.conn.QueryRow(cctx, "SHOW server_version").Scan(&version); err != nil {
		version = "version unknown"
	}
	status := fmt.Sprintf("database: connected to %s, PostgreSQL %s", d.where(), strings.Fields(version + " ?")[0])
	// migrations.Version creates golang-migrate's version table when the
	// schema exists without it; validate writes nothing, so it asks only
	// when the table is there.
	var migrated bool
	err := d.conn.QueryRow(cctx, "SELECT pg_catalog.to_regclass($1) IS NOT NULL",
		pgx.Identifier{cfg.Schema, "schema_migrations"}.Sanitize()).Scan(&migrated)
	var v uint
	var dirty bool
	if err == nil && migrated {
		v, dirty, err = migrations.Version(cctx, cfg.Database.Reveal(), cfg.Schema)
	}
	switch {
	case err != nil:
		status += fmt.Sprintf("; schema %s: migration version unknown (%s)", cfg.Schema, d.scrub(err.Error()))
	case dirty:
		return status, []config.Problem{{Line: cfg.Lines["schema"], Path: "schema", Message: fmt.Sprintf("schema %s: migration %d failed part-way (dirty): repair the schema by hand, or drop it and run curvewatch migrate", cfg.Schema, v)}}
	case v == 0:
		status += fmt.Sprintf("; schema %s not migrated yet (curvewatch migrate, or serve, creates it)", cfg.Schema)
	case v < migrations.Latest():
		status += fmt.Sprintf("; schema %s at migration %d of %d (curvewatch migrate, or serve, brings it up to date)", cfg.Schema, v, migrations.Latest())
	default:
		status += fmt.Sprintf("; schema %s at migration %d (up to date)", cfg.Schema, v)
	}
	return status, nil
}

// checkModel checks model i's source table, time column, spec columns and
// where predicate in one READ ONLY transaction with a statement timeout,
// and returns the table's columns.
func (d *dbCheck) checkModel(ctx context.Context, i int, m *config.Model) ([]source.Column, []config.Problem) {
	path := fmt.Sprintf("models[%d]", i)
	var problems []config.Problem
	add := func(key, format string, args ...any) {
		problems = append(problems, config.Problem{Line: m.Lines[key], Path: path + "." + key, Message: d.scrub(fmt.Sprintf(format, args...))})
	}
	if m.Source.Table.Name == "" {
		return nil, nil // the config check has reported it
	}
	cctx, cancel := context.WithTimeout(ctx, 2*d.timeout)
	defer cancel()
	tx, err := d.conn.BeginTx(cctx, pgx.TxOptions{AccessMode: pgx.ReadOnly})
	if err != nil {
		add("source.table", "cannot start a read-only transaction: %v", err)
		return nil, problems
	}
	defer tx.Rollback(context.Background())
	if _, err := tx.Exec(cctx, fmt.Sprintf("SET LOCAL statement_timeout = %d", d.timeout.Milliseconds())); err != nil {
		add("source.table", "cannot set a statement timeout: %v", err)
		return nil, problems
	}
	table := m.Source.Table.String()
	cols, err := source.Describe(cctx, tx, table)
	if err != nil {
		add("source.table", "%v", err)
		return nil, problems
	}
	byName := map[string]source.Column{}
	names := make([]string, len(cols))
	for j, c := range cols {
		byName[c.Name] = c
		names[j] = c.Name
	}
	if t := m.Source.Time; t != "" {
		c, ok := byName[t]
		_, _, isTime := c.Usable()
		switch {
		case !ok:
			add("source.time", "column %q is not in table %s%s", t, table, suggest(t, names))
		case !isTime:
			add("source.time", "column %s has type %s, not a time type: the window and the watermark need timestamp, timestamp with time zone or date", t, c.Type)
		case !c.Readable:
			add("source.time", "the database user may not read column %s of %s: GRANT SELECT on it", t, table)
		}
	}
	if m.Spec != nil {
		problems = append(problems, d.checkColumns(m, path, table, byName, names)...)
	}
	if m.Source.Where != "" {
		// The predicate is planned, not run, in parentheses as the pull
		// (jobs/source) puts it. The extended protocol refuses a second
		// statement, and the transaction is read-only.
		q := fmt.Sprintf("EXPLAIN SELECT 1 FROM %s WHERE (%s)", m.Source.Table.Quoted(), m.Source.Where)
		rows, err := tx.Query(cctx, q, pgx.QueryExecModeExec)
		if err == nil {
			for rows.Next() {
			}
			rows.Close()
			err = rows.Err()
		}
		if err != nil {
			add("source.where", "PostgreSQL rejects the where predicate: %s", pgMessage(err))
		}
	}
	return cols, problems
}

// columnUse is one use of a column by a spec.
type columnUse struct {
	col, role string
	numeric   bool   // read as a number (else as text)
	line      int    // the line in the config or the spec file
	path      string // in the spec: "", "terms[2]", "serial"
}

// uses lists the columns a spec reads, where and how.
func uses(s *fit.Spec) []columnUse {
	var out []columnUse
	add := func(col, role string, numeric bool, line int, path string) {
		if col != "" {
			out = append(out, columnUse{col, role, numeric, line, path})
		}
	}
	add(s.Response, "response", true, s.Lines["response"], "")
	add(s.Weights, "weights", true, s.Lines["weights"], "")
	add(s.Offset, "offset", true, s.Lines["offset"], "")
	for j, t := range s.Terms {
		p := fmt.Sprintf("terms[%d]", j)
		for _, c := range t.Columns {
			add(c, string(t.Kind), t.Kind != fit.Factor, t.Line, p)
		}
		add(t.By, "by", false, t.Line, p)
	}
	if s.Serial != nil {
		add(s.Serial.Order, "serial order", true, s.Lines["serial.order"], "serial")
	}
	return out
}

// checkColumns checks that each column the spec uses is in the table with
// a type it can be read as.
func (d *dbCheck) checkColumns(m *config.Model, path, table string, byName map[string]source.Column, names []string) []config.Problem {
	var problems []config.Problem
	add := func(u columnUse, format string, args ...any) {
		msg := fmt.Sprintf(format, args...)
		if m.SpecFile == "" {
			p := path + ".spec"
			if u.path != "" {
				p += "." + u.path
			}
			problems = append(problems, config.Problem{Line: u.line, Path: p, Message: msg})
			return
		}
		at := m.SpecFile
		if u.line > 0 {
			at += fmt.Sprintf(" line %d", u.line)
		}
		if u.path != "" {
			at += ": " + u.path
		}
		problems = append(problems, config.Problem{Line: m.Lines["spec_file"], Path: path + ".spec_file", Message: at + ": " + msg})
	}
	reported := map[string]bool{}
	for _, u := range uses(m.Spec) {
		c, ok := byName[u.col]
		numeric, text, _ := c.Usable()
		switch {
		case reported[u.col]:
		case !ok:
			add(u, "%s column %q is not in table %s%s", u.role, u.col, table, suggest(u.col, names))
			reported[u.col] = true
		case !c.Readable:
			add(u, "the database user may not read column %s of %s: GRANT SELECT on it", u.col, table)
			reported[u.col] = true
		case u.numeric && !numeric:
			add(u, "%s column %s has type %s: a %s is read as a number (smallint, integer, bigint, real, double precision or numeric)", u.role, u.col, c.Type, u.role)
		case !u.numeric && !text:
			add(u, "%s column %s has type %s: a %s is read as levels (text, varchar, char, boolean, an enum or an integer type)", u.role, u.col, c.Type, u.role)
		}
	}
	return problems
}

// pgMessage is a PostgreSQL error's message with its detail and hint.
func pgMessage(err error) string {
	var pe *pgconn.PgError
	if !errors.As(err, &pe) {
		return err.Error()
	}
	msg := pe.Message
	if pe.Detail != "" {
		msg += " (" + pe.Detail + ")"
	}
	if pe.Hint != "" {
		msg += "; " + pe.Hint
	}
	return msg + " [SQLSTATE " + pe.Code + "]"
}

// suggest names the column closest to col, ignoring case, when one is
// close (one edit per three characters), or lists a few of the columns.
func suggest(col string, names []string) string {
	if len(names) == 0 {
		return " (it has no columns)"
	}
	if best, ok := fit.ClosestName(col, names); ok {
		return fmt.Sprintf(": did you mean %q?", best)
	}
	// A name that starts the other (observed, observed_at).
	best, dist := "", 1<<30
	for _, n := range names {
		a, b := strings.ToLower(col), strings.ToLower(n)
		if d := abs(len(a) - len(b)); (strings.HasPrefix(a, b) || strings.HasPrefix(b, a)) && d < dist {
			best, dist = n, d
		}
	}
	if best != "" {
		return fmt.Sprintf(": did you mean %q?", best)
	}
	const most = 8
	list := names[:min(len(names), most)]
	s := " (it has " + strings.Join(list, ", ")
	if len(names) > most {
		s += fmt.Sprintf(" and %d more", len(names)-most)
	}
	return s + ")"
}

func abs(n int) int {
	if n < 0 {
		return -n
	}
	return n
}
