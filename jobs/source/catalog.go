// Package source reads a model's rows from its PostgreSQL source table.
//
// This file holds the catalogue side: naming a table safely (Table,
// ParseTable, CheckName) and describing its columns (Describe, Column).
// Names are always quoted as identifiers when they reach SQL, never pasted.
package source

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"sync"
	"time"
	"unicode"
	"unicode/utf8"

	"github.com/jackc/pgx/v5"
)

// maxNameBytes is PostgreSQL's identifier length limit (NAMEDATALEN − 1);
// a longer name would be truncated silently by the server.
const maxNameBytes = 63

// CheckName checks a schema, table or column name as curvewatch uses it:
// taken exactly as written (case included: PostgreSQL folds unquoted names
// to lower case, but curvewatch always quotes, so Readings and readings are
// different tables) and quoted when it reaches SQL. A name is 1 to 63
// bytes of UTF-8 without control characters, double quotes or surrounding
// spaces.
func CheckName(name string) error {
	switch {
	case name == "":
		return errors.New("the name is empty")
	case !utf8.ValidString(name):
		return errors.New("the name is not valid UTF-8")
	case len(name) > maxNameBytes:
		return fmt.Errorf("the name is %d bytes long; PostgreSQL names have at most %d", len(name), maxNameBytes)
	case strings.ContainsFunc(name, unicode.IsControl):
		return errors.New("the name holds a control character")
	case strings.ContainsRune(name, '"'):
		return errors.New(`the name holds a double quote: write names without quotes; curvewatch quotes them itself`)
	case strings.TrimSpace(name) != name:
		return errors.New("the name starts or ends with a space")
	}
	return nil
}

// Table names a source table, view or materialised view, optionally in a
// schema.
type Table struct {
	// Schema is the table's schema, or "" to find the table on the
	// connection's search_path.
	Schema string
	// Name is the table's name.
	Name string
}

// ParseTable reads "schema.table" or "table" (see CheckName for what a
// name may hold; a name may not hold a dot).
func ParseTable(s string) (Table, error) {
	parts := strings.Split(s, ".")
	var t Table
	switch len(parts) {
	case 1:
		t.Name = parts[0]
	case 2:
		t.Schema, t.Name = parts[0], parts[1]
	default:
		return Table{}, fmt.Errorf("%s has %d dots: write schema.table or table", s, len(parts)-1)
	}
	if t.Schema != "" || len(parts) == 2 {
		if err := CheckName(t.Schema); err != nil {
			return Table{}, fmt.Errorf("the schema in %s: %w", s, err)
		}
	}
	if err := CheckName(t.Name); err != nil {
		return Table{}, fmt.Errorf("the table name in %s: %w", s, err)
	}
	return t, nil
}

// String writes the table as it is configured: schema.table or table.
func (t Table) String() string {
	if t.Schema == "" {
		return t.Name
	}
	return t.Schema + "." + t.Name
}

// Identifier returns the name as a pgx identifier, for Sanitize.
func (t Table) Identifier() pgx.Identifier {
	if t.Schema == "" {
		return pgx.Identifier{t.Name}
	}
	return pgx.Identifier{t.Schema, t.Name}
}

// Quoted returns the table as SQL: each part a quoted identifier.
func (t Table) Quoted() string { return t.Identifier().Sanitize() }

// Column is one column of a source table, as the catalogue describes it.
type Column struct {
	// Name is the column's name, exactly.
	Name string
	// Type is the type as PostgreSQL prints it (format_type), such as
	// "timestamp with time zone", "numeric(6,2)" or a domain's name.
	Type string
	// Base is the built-in type under any domains, by its catalogue name
	// (pg_type.typname): "int4", "float8", "timestamptz", "varchar", or
	// the enum type's own name.
	Base string
	// Enum says the base type is an enum.
	Enum bool
	// NotNull says the column has a NOT NULL constraint.
	NotNull bool
	// Readable says the connected role may SELECT the column.
	Readable bool
}

// Base types by how curvewatch can read them (catalogue names).
var (
	numericTypes = []string{"int2", "int4", "int8", "float4", "float8", "numeric"}
	integerTypes = []string{"int2", "int4", "int8"}
	textTypes    = []string{"text", "varchar", "bpchar", "char", "name", "citext", "uuid", "bool"}
	timeTypes    = []string{"timestamp", "timestamptz", "date"}
)

// Usable says how the column can be read:
//   - numeric: as a number, for a response, weights, offset, curve,
//     surface, linear term or serial order — smallint, integer, bigint,
//     real, double precision and numeric;
//   - text: as a factor level, for a factor or a curve's by — text,
//     varchar, char, name, citext, uuid, boolean and enum types, and the
//     integer types (whose values are exact, so a site number is a fine
//     level);
//   - time: as the window and watermark column — timestamp, timestamp
//     with time zone and date.
//
// Domains count as their base type; arrays and other types are not usable.
func (c Column) Usable() (numeric, text, time bool) {
	numeric = contains(numericTypes, c.Base)
	text = c.Enum || contains(textTypes, c.Base) || contains(integerTypes, c.Base)
	time = contains(timeTypes, c.Base)
	return numeric, text, time
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

// Querier runs queries: a *pgx.Conn, a *pgxpool.Pool or a pgx.Tx.
type Querier interface {
	Query(ctx context.Context, sql string, args ...any) (pgx.Rows, error)
	QueryRow(ctx context.Context, sql string, args ...any) pgx.Row
}

// ErrNoTable is wrapped by the error Describe returns when the table does
// not exist (or is not a table, view or materialised view).
var ErrNoTable = errors.New("no such table")

// tableKinds are the pg_class.relkind values rows can be read from:
// ordinary, partitioned and foreign tables, views and materialised views.
const tableKinds = "rpfvm"

// Describe returns the columns of table ("schema.table", or "table" to
// use the connection's search_path), in their order in the table. A table
// that does not exist gives an error wrapping ErrNoTable that says what
// was searched and names tables that differ only in case.
func Describe(ctx context.Context, db Querier, table string) ([]Column, error) {
	t, err := ParseTable(table)
	if err != nil {
		return nil, err
	}
	var oid *uint32
	var kind string
	err = db.QueryRow(ctx, `SELECT c.oid, c.relkind::text
		FROM pg_catalog.pg_class c WHERE c.oid = pg_catalog.to_regclass($1)`, t.Quoted()).Scan(&oid, &kind)
	if errors.Is(err, pgx.ErrNoRows) || (err == nil && oid == nil) {
		return nil, missingTable(ctx, db, t)
	}
	if err != nil {
		return nil, fmt.Errorf("cannot look up table %s: %w", t, err)
	}
	if !strings.Contains(tableKinds, kind) {
		return nil, &noTableError{msg: fmt.Sprintf("%s is %s, not a table or view", t, relkindName(kind))}
	}
	rows, err := db.Query(ctx, `SELECT a.attname, pg_catalog.format_type(a.atttypid, a.atttypmod),
			a.attnotnull, pg_catalog.has_column_privilege(a.attrelid, a.attnum, 'SELECT'),
			b.typname, b.typtype = 'e'
		FROM pg_catalog.pg_attribute a
		CROSS JOIN LATERAL (
			WITH RECURSIVE chain(oid, depth) AS (
				SELECT a.atttypid, 0
				UNION ALL
				SELECT t.typbasetype, chain.depth + 1
				FROM pg_catalog.pg_type t JOIN chain ON t.oid = chain.oid
				WHERE t.typtype = 'd' AND chain.depth < 32)
			SELECT t.typname::text AS typname, t.typtype
			FROM chain JOIN pg_catalog.pg_type t ON t.oid = chain.oid
			ORDER BY chain.depth DESC LIMIT 1) b
		WHERE a.attrelid = $1 AND a.attnum > 0 AND NOT a.attisdropped
		ORDER BY a.attnum`, *oid)
	if err != nil {
		return nil, fmt.Errorf("cannot read the columns of %s: %w", t, err)
	}
	cols, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (Column, error) {
		var c Column
		err := r.Scan(&c.Name, &c.Type, &c.NotNull, &c.Readable, &c.Base, &c.Enum)
		return c, err
	})
	if err != nil {
		return nil, fmt.Errorf("cannot read the columns of %s: %w", t, err)
	}
	return cols, nil
}

// missingTable explains why t was not found: its schema is missing, or no
// table of that name is in the schema (or on the search_path), naming
// tables that differ only in case.
func missingTable(ctx context.Context, db Querier, t Table) error {
	if t.Schema != "" {
		var exists bool
		err := db.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM pg_catalog.pg_namespace WHERE nspname = $1)`, t.Schema).Scan(&exists)
		if err == nil && !exists {
			return &noTableError{msg: fmt.Sprintf("schema %q does not exist, so table %s cannot be read", t.Schema, t)}
		}
	}
	msg := fmt.Sprintf("table %s does not exist in schema %q", t, t.Schema)
	if t.Schema == "" {
		var path []string
		if err := db.QueryRow(ctx, `SELECT pg_catalog.current_schemas(false)::text[]`).Scan(&path); err == nil {
			msg = fmt.Sprintf("table %s does not exist on the search_path (%s)", t, strings.Join(path, ", "))
		} else {
			msg = fmt.Sprintf("table %s does not exist on the search_path", t)
		}
	}
	rows, err := db.Query(ctx, `SELECT n.nspname, c.relname
		FROM pg_catalog.pg_class c JOIN pg_catalog.pg_namespace n ON n.oid = c.relnamespace
		WHERE c.relkind = ANY (string_to_array($3, NULL)::"char"[])
		  AND lower(c.relname) = lower($1)
		  AND ($2 = '' OR lower(n.nspname) = lower($2))
		  AND n.nspname NOT IN ('pg_catalog', 'information_schema')
		ORDER BY 1, 2 LIMIT 5`, t.Name, t.Schema, tableKinds)
	var similar []string
	if err == nil {
		similar, _ = pgx.CollectRows(rows, func(r pgx.CollectableRow) (string, error) {
			var s Table
			err := r.Scan(&s.Schema, &s.Name)
			return s.String(), err
		})
	}
	switch {
	case len(similar) > 0:
		msg += fmt.Sprintf(": did you mean %s? (names are matched exactly, case included)", strings.Join(similar, " or "))
	case t.Schema == "":
		msg += "; if it is in another schema, write schema.table"
	}
	return &noTableError{msg: msg}
}

// noTableError carries the explanation of a missing table.
type noTableError struct{ msg string }

func (e *noTableError) Error() string { return e.msg }
func (e *noTableError) Unwrap() error { return ErrNoTable }

// relkindName says what a pg_class.relkind is.
func relkindName(kind string) string {
	switch kind {
	case "i", "I":
		return "an index"
	case "S":
		return "a sequence"
	case "c":
		return "a composite type"
	case "t":
		return "a TOAST table"
	}
	return "relation kind " + kind
}

// Catalog remembers table descriptions for a while, so that a daemon's
// refits do not read the catalogue on every run. A description can be
// out of date for up to TTL: a caller whose read then fails calls Forget
// and describes the table again, to say what changed. Safe for concurrent
// use.
type Catalog struct {
	ttl time.Duration
	now func() time.Time
	mu  sync.Mutex
	m   map[string]catalogEntry
}

type catalogEntry struct {
	cols []Column
	at   time.Time
}

// NewCatalog makes a catalogue that keeps each description for ttl.
func NewCatalog(ttl time.Duration) *Catalog {
	return &Catalog{ttl: ttl, now: time.Now, m: map[string]catalogEntry{}}
}

// Describe returns Describe(ctx, db, table), from memory when it was read
// less than TTL ago; cached says which. Errors are not remembered.
func (c *Catalog) Describe(ctx context.Context, db Querier, table string) (cols []Column, cached bool, err error) {
	c.mu.Lock()
	e, ok := c.m[table]
	c.mu.Unlock()
	if ok && c.now().Sub(e.at) < c.ttl {
		return e.cols, true, nil
	}
	cols, err = Describe(ctx, db, table)
	if err != nil {
		return nil, false, err
	}
	c.mu.Lock()
	c.m[table] = catalogEntry{cols: cols, at: c.now()}
	c.mu.Unlock()
	return cols, false, nil
}

// Forget drops the table's description.
func (c *Catalog) Forget(table string) {
	c.mu.Lock()
	delete(c.m, table)
	c.mu.Unlock()
}
