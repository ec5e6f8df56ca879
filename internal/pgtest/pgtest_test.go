package pgtest

import (
	"context"
	"fmt"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/internal/pgcluster"
)

func TestMain(m *testing.M) { Main(m) }

func connect(t *testing.T, url string) *pgx.Conn {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatalf("connect: %v", err)
	}
	t.Cleanup(func() { conn.Close(context.Background()) })
	return conn
}

func schemaExists(t *testing.T, conn *pgx.Conn, schema string) bool {
	t.Helper()
	var ok bool
	if err := conn.QueryRow(context.Background(), `SELECT EXISTS (SELECT 1 FROM pg_namespace WHERE nspname = $1)`, schema).Scan(&ok); err != nil {
		t.Fatal(err)
	}
	return ok
}

func TestURLConnects(t *testing.T) {
	t.Parallel()
	conn := connect(t, URL(t))
	var one int
	if err := conn.QueryRow(context.Background(), "SELECT 1").Scan(&one); err != nil || one != 1 {
		t.Fatalf("SELECT 1 = %d, %v", one, err)
	}
}

func TestSchemaIsolatesAndDrops(t *testing.T) {
	t.Parallel()
	admin := connect(t, URL(t))
	var first, second string
	t.Run("inner", func(t *testing.T) {
		url1, s1 := Schema(t)
		url2, s2 := Schema(t)
		first, second = s1, s2
		if s1 == s2 {
			t.Fatalf("two schemas with the same name %q", s1)
		}
		for _, c := range []struct{ url, schema string }{{url1, s1}, {url2, s2}} {
			conn := connect(t, c.url)
			var current string
			if err := conn.QueryRow(context.Background(), "SELECT current_schema()").Scan(&current); err != nil {
				t.Fatal(err)
			}
			if current != c.schema {
				t.Errorf("current_schema() = %q through the URL, want %q", current, c.schema)
			}
			// An unqualified table lands in the test's schema.
			if _, err := conn.Exec(context.Background(), "CREATE TABLE t (x int)"); err != nil {
				t.Fatal(err)
			}
		}
		if !schemaExists(t, admin, s1) || !schemaExists(t, admin, s2) {
			t.Fatalf("schemas %s, %s not created", s1, s2)
		}
	})
	for _, s := range []string{first, second} {
		if schemaExists(t, admin, s) {
			t.Errorf("schema %s still exists after its test ended", s)
		}
	}
}

func TestSchemaName(t *testing.T) {
	t.Parallel()
	for _, name := range []string{
		"TestX",
		"TestStore/RecordFit/duplicate_slot#01",
		strings.Repeat("TestVeryLongName", 10),
		"Test/ünïcode name",
	} {
		s := schemaName(name)
		if len(s) > 63 {
			t.Errorf("schemaName(%q) = %q: %d bytes, over PostgreSQL's 63", name, s, len(s))
		}
		for _, r := range s {
			if !(r >= 'a' && r <= 'z' || r >= '0' && r <= '9' || r == '_') {
				t.Errorf("schemaName(%q) = %q holds %q", name, s, r)
			}
		}
		if schemaName(name) == s {
			t.Errorf("schemaName(%q) gave %q twice", name, s)
		}
	}
}

func TestWithSearchPath(t *testing.T) {
	t.Parallel()
	got, err := WithSearchPath("postgres://u@h:5432/db?sslmode=disable&options=-c%20work_mem%3D8MB", "s1")
	if err != nil {
		t.Fatal(err)
	}
	cfg, err := pgx.ParseConfig(got)
	if err != nil {
		t.Fatal(err)
	}
	if want := "-c work_mem=8MB -c search_path=s1"; cfg.RuntimeParams["options"] != want {
		t.Errorf("options = %q, want %q", cfg.RuntimeParams["options"], want)
	}
	if _, err := WithSearchPath("host=h dbname=db", "s1"); err == nil {
		t.Error("a keyword/value string was accepted")
	}
}

// recorder is a testing.TB that keeps the failure message.
type recorder struct {
	testing.TB
	msg string
}

func (r *recorder) Helper()                           {}
func (r *recorder) Fatalf(format string, args ...any) { r.msg = fmt.Sprintf(format, args...) }

// TestNoServerSaysHowToGetOne: with no server the tests fail (never skip)
// with a message naming both ways to get one.
func TestNoServerSaysHowToGetOne(t *testing.T) {
	t.Parallel()
	r := &recorder{}
	noServer(r, fmt.Errorf("%w found: not in `pg_config --bindir`, nor in %s", pgcluster.ErrNoServer, pgcluster.ServerDirs))
	for _, want := range []string{"initdb", EnvTestURL, "apt-get install postgresql"} {
		if !strings.Contains(r.msg, want) {
			t.Errorf("failure %q lacks %q", r.msg, want)
		}
	}
}
