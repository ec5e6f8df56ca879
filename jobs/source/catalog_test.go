package source

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/internal/pgtest"
)

func TestMain(m *testing.M) { pgtest.Main(m) }

func TestParseTable(t *testing.T) {
	cases := []struct {
		in, schema, name, quoted, bad string
	}{
		{in: "readings", name: "readings", quoted: `"readings"`},
		{in: "river.sonde_readings", schema: "river", name: "sonde_readings", quoted: `"river"."sonde_readings"`},
		{in: "River.Sonde Readings", schema: "River", name: "Sonde Readings", quoted: `"River"."Sonde Readings"`},
		{in: "ríver.réadings", schema: "ríver", name: "réadings", quoted: `"ríver"."réadings"`},
		{in: "a.b.c", bad: "2 dots"},
		{in: ".x", bad: "the schema in .x: the name is empty"},
		{in: "x.", bad: "the table name in x.: the name is empty"},
		{in: "", bad: "empty"},
		{in: `"x"`, bad: "double quote"},
		{in: "x;drop", quoted: `"x;drop"`, name: "x;drop"},
		{in: "a\nb", bad: "control character"},
		{in: " x", bad: "space"},
		{in: strings.Repeat("x", 64), bad: "64 bytes"},
		{in: "\xff", bad: "UTF-8"},
	}
	for _, c := range cases {
		tab, err := ParseTable(c.in)
		if c.bad != "" {
			if err == nil || !strings.Contains(err.Error(), c.bad) {
				t.Errorf("ParseTable(%q) = %+v, %v; want an error saying %q", c.in, tab, err, c.bad)
			}
			continue
		}
		if err != nil || tab.Schema != c.schema || tab.Name != c.name || tab.Quoted() != c.quoted || tab.String() != c.in {
			t.Errorf("ParseTable(%q) = %+v (%s), %v; want schema %q name %q quoted %s", c.in, tab, tab.Quoted(), err, c.schema, c.name, c.quoted)
		}
	}
}

func TestUsable(t *testing.T) {
	cases := []struct {
		base              string
		enum              bool
		numeric, text, tm bool
	}{
		{"int2", false, true, true, false}, {"int4", false, true, true, false}, {"int8", false, true, true, false},
		{"float4", false, true, false, false}, {"float8", false, true, false, false}, {"numeric", false, true, false, false},
		{"text", false, false, true, false}, {"varchar", false, false, true, false}, {"bpchar", false, false, true, false},
		{"bool", false, false, true, false}, {"uuid", false, false, true, false}, {"site_kind", true, false, true, false},
		{"timestamp", false, false, false, true}, {"timestamptz", false, false, false, true}, {"date", false, false, false, true},
		{"jsonb", false, false, false, false}, {"_int4", false, false, false, false}, {"interval", false, false, false, false},
		{"time", false, false, false, false}, {"money", false, false, false, false},
	}
	for _, c := range cases {
		n, x, tm := Column{Base: c.base, Enum: c.enum}.Usable()
		if n != c.numeric || x != c.text || tm != c.tm {
			t.Errorf("%s (enum %v): Usable() = %v, %v, %v; want %v, %v, %v", c.base, c.enum, n, x, tm, c.numeric, c.text, c.tm)
		}
	}
}

// connect opens a connection to a fresh test schema (on the search_path)
// and creates the tables of setup in it.
func connect(t *testing.T, setup string) (*pgx.Conn, string) {
	t.Helper()
	url, schema := pgtest.Schema(t)
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close(context.Background()) })
	if _, err := conn.Exec(ctx, setup); err != nil {
		t.Fatalf("setup: %v", err)
	}
	return conn, schema
}

func TestDescribe(t *testing.T) {
	t.Parallel()
	conn, schema := connect(t, `
		CREATE TYPE site_kind AS ENUM ('river', 'weir');
		CREATE DOMAIN mg_per_l AS numeric(6,2) CHECK (VALUE >= 0);
		CREATE DOMAIN oxygen AS mg_per_l;
		CREATE TABLE sonde (
			observed_at timestamptz NOT NULL,
			logged_at   timestamp,
			day         date,
			site        text,
			site_code   varchar(8),
			grade       char(1),
			kind        site_kind,
			ok          boolean,
			sensor      uuid,
			counter     smallint,
			station     integer,
			reading_id  bigint,
			water_temp  real,
			flow        double precision,
			dissolved_oxygen oxygen,
			conductivity numeric(7,1),
			gone        int,
			extra       jsonb,
			tags        int[]
		);
		ALTER TABLE sonde DROP COLUMN gone;
		CREATE VIEW sonde_s07 AS SELECT observed_at, flow FROM sonde WHERE site = 'S07';
		CREATE MATERIALIZED VIEW sonde_daily AS SELECT day, avg(flow) AS flow FROM sonde GROUP BY day;
		CREATE SEQUENCE reading_seq;
		CREATE TABLE "Readings" (x int);`)
	ctx := context.Background()

	cols, err := Describe(ctx, conn, schema+".sonde")
	if err != nil {
		t.Fatal(err)
	}
	type want struct {
		typ, base         string
		numeric, text, tm bool
	}
	wants := map[string]want{
		"observed_at":      {"timestamp with time zone", "timestamptz", false, false, true},
		"logged_at":        {"timestamp without time zone", "timestamp", false, false, true},
		"day":              {"date", "date", false, false, true},
		"site":             {"text", "text", false, true, false},
		"site_code":        {"character varying(8)", "varchar", false, true, false},
		"grade":            {"character(1)", "bpchar", false, true, false},
		"kind":             {"site_kind", "site_kind", false, true, false},
		"ok":               {"boolean", "bool", false, true, false},
		"sensor":           {"uuid", "uuid", false, true, false},
		"counter":          {"smallint", "int2", true, true, false},
		"station":          {"integer", "int4", true, true, false},
		"reading_id":       {"bigint", "int8", true, true, false},
		"water_temp":       {"real", "float4", true, false, false},
		"flow":             {"double precision", "float8", true, false, false},
		"dissolved_oxygen": {"oxygen", "numeric", true, false, false},
		"conductivity":     {"numeric(7,1)", "numeric", true, false, false},
		"extra":            {"jsonb", "jsonb", false, false, false},
		"tags":             {"integer[]", "_int4", false, false, false},
	}
	order := []string{"observed_at", "logged_at", "day", "site", "site_code", "grade", "kind", "ok", "sensor", "counter",
		"station", "reading_id", "water_temp", "flow", "dissolved_oxygen", "conductivity", "extra", "tags"}
	if len(cols) != len(order) {
		t.Fatalf("%d columns, want %d (the dropped one left out): %+v", len(cols), len(order), cols)
	}
	for i, c := range cols {
		if c.Name != order[i] {
			t.Errorf("column %d is %s, want %s", i, c.Name, order[i])
		}
		w := wants[c.Name]
		n, x, tm := c.Usable()
		if c.Type != w.typ || c.Base != w.base || n != w.numeric || x != w.text || tm != w.tm || !c.Readable {
			t.Errorf("%s: %+v usable %v %v %v; want type %q base %q usable %v %v %v, readable", c.Name, c, n, x, tm, w.typ, w.base, w.numeric, w.text, w.tm)
		}
		if c.NotNull != (c.Name == "observed_at") {
			t.Errorf("%s: NotNull %v", c.Name, c.NotNull)
		}
	}

	// Views, materialised views and the search_path work alike.
	for table, n := range map[string]int{"sonde_s07": 2, schema + ".sonde_daily": 2, "sonde": len(order)} {
		cols, err := Describe(ctx, conn, table)
		if err != nil || len(cols) != n {
			t.Errorf("Describe(%s) = %d columns, %v; want %d", table, len(cols), err, n)
		}
	}

	missing := []struct{ table, says string }{
		{"readings", `table readings does not exist on the search_path (` + schema + `): did you mean ` + schema + `.Readings?`},
		{schema + ".READINGS", `table ` + schema + `.READINGS does not exist in schema "` + schema + `": did you mean ` + schema + `.Readings?`},
		{"nowhere.sonde", `schema "nowhere" does not exist`},
		{schema + ".nothing", `table ` + schema + `.nothing does not exist in schema "` + schema + `"`},
		{schema + ".reading_seq", `is a sequence, not a table or view`},
	}
	for _, m := range missing {
		_, err := Describe(ctx, conn, m.table)
		if !errors.Is(err, ErrNoTable) || !strings.Contains(err.Error(), m.says) {
			t.Errorf("Describe(%s) = %v; want ErrNoTable saying %q", m.table, err, m.says)
		}
	}
	if _, err := Describe(ctx, conn, "a.b.c"); err == nil || errors.Is(err, ErrNoTable) {
		t.Errorf("Describe(a.b.c) = %v; want a name error", err)
	}
}

// A role that may read only some columns sees the others as not Readable.
func TestDescribePrivileges(t *testing.T) {
	t.Parallel()
	conn, schema := connect(t, `CREATE TABLE r (t timestamptz, secret_note text, flow float8)`)
	ctx := context.Background()
	role := schema + "_reader"
	q := pgx.Identifier{role}.Sanitize()
	setup := []string{
		"CREATE ROLE " + q,
		"GRANT USAGE ON SCHEMA " + pgx.Identifier{schema}.Sanitize() + " TO " + q,
		"GRANT SELECT (t, flow) ON r TO " + q,
	}
	for _, s := range setup {
		if _, err := conn.Exec(ctx, s); err != nil {
			t.Fatalf("%s: %v", s, err)
		}
	}
	t.Cleanup(func() {
		conn.Exec(context.Background(), "DROP OWNED BY "+q)
		conn.Exec(context.Background(), "DROP ROLE "+q)
	})
	tx, err := conn.Begin(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer tx.Rollback(ctx)
	if _, err := tx.Exec(ctx, "SET LOCAL ROLE "+q); err != nil {
		t.Fatal(err)
	}
	cols, err := Describe(ctx, tx, schema+".r")
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range cols {
		if c.Readable != (c.Name != "secret_note") {
			t.Errorf("%s: Readable %v", c.Name, c.Readable)
		}
	}
}
