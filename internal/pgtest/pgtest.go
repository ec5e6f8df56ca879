// Package pgtest gives tests a real PostgreSQL: a database URL, and a fresh
// schema per test so that tests can run in parallel.
//
// The server is, in order: the one CURVEWATCH_TEST_DATABASE_URL names; the
// one DATABASE_URL names; or a throwaway cluster that pgtest starts with the
// server binaries on the machine (initdb and pg_ctl, found with
// `pg_config --bindir` or under /usr/lib/postgresql/*/bin) in a temporary
// directory, on a private loopback port, once per test binary. initdb
// refuses to run as root, so as root the binaries run as the postgres user
// (runuser), in a directory that user owns. The cluster is removed when the
// test binary ends: by Main when the package's TestMain calls it, and
// otherwise by a small watchdog process that waits for the test binary to
// exit (so a crashed or killed test leaves nothing behind either).
//
// With no server at all the tests fail, saying how to get one; they never
// skip.
//
//	func TestMain(m *testing.M) { pgtest.Main(m) }
//
//	func TestSomething(t *testing.T) {
//		t.Parallel()
//		url, schema := pgtest.Schema(t)
//		...
//	}
package pgtest

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"net/url"
	"os"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// Environment variables naming the test server.
const (
	EnvTestURL = "CURVEWATCH_TEST_DATABASE_URL"
	EnvURL     = "DATABASE_URL"
)

// howTo is appended to every "no server" failure.
const howTo = "to run the database tests, either set " + EnvTestURL +
	" (for example postgres://postgres@127.0.0.1:5432/test?sslmode=disable) to a server where the tests may create and drop schemas," +
	" or install the PostgreSQL server binaries (Debian: apt-get install postgresql) so that the tests start a throwaway cluster of their own"

var (
	startOnce sync.Once
	shared    *Cluster
	sharedErr error
)

// URL returns the URL of the test database (see the package comment),
// starting the throwaway cluster on first use when no URL is set. It fails
// the test when there is no server.
func URL(t testing.TB) string {
	t.Helper()
	if u := envURL(); u != "" {
		return u
	}
	startOnce.Do(func() {
		shared, sharedErr = StartCluster(context.Background())
	})
	if sharedErr != nil {
		noServer(t, sharedErr)
	}
	return shared.URL
}

// noServer fails the test, saying why there is no server and how to get
// one.
func noServer(t testing.TB, err error) {
	t.Helper()
	t.Fatalf("pgtest: no PostgreSQL: %v; %s", err, howTo)
}

func envURL() string {
	if u := os.Getenv(EnvTestURL); u != "" {
		return u
	}
	return os.Getenv(EnvURL)
}

// Main runs the package's tests and then removes the throwaway cluster, if
// one was started, before exiting with the tests' status. Call it from
// TestMain.
func Main(m *testing.M) {
	code := m.Run()
	if shared != nil {
		if err := shared.Stop(); err != nil {
			fmt.Fprintf(os.Stderr, "pgtest: %v\n", err)
		}
	}
	os.Exit(code)
}

// Schema creates a schema with a fresh name for the test, dropped with
// everything in it when the test ends, and returns a database URL whose
// search_path is that schema, and the schema's name.
func Schema(t testing.TB) (dbURL, schema string) {
	t.Helper()
	base := URL(t)
	schema = schemaName(t.Name())
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	conn, err := pgx.Connect(ctx, base)
	if err != nil {
		t.Fatalf("pgtest: connect to the test database: %v; %s", redactErr(err, base), howTo)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, "CREATE SCHEMA "+pgx.Identifier{schema}.Sanitize()); err != nil {
		t.Fatalf("pgtest: create schema %s (the test user needs the CREATE privilege on the database): %v", schema, err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
		defer cancel()
		conn, err := pgx.Connect(ctx, base)
		if err != nil {
			t.Errorf("pgtest: drop schema %s: %v", schema, redactErr(err, base))
			return
		}
		defer conn.Close(ctx)
		if _, err := conn.Exec(ctx, "DROP SCHEMA "+pgx.Identifier{schema}.Sanitize()+" CASCADE"); err != nil {
			t.Errorf("pgtest: drop schema %s: %v", schema, err)
		}
	})
	dbURL, err = WithSearchPath(base, schema)
	if err != nil {
		t.Fatalf("pgtest: %v", err)
	}
	return dbURL, schema
}

// WithSearchPath returns dbURL with its search_path set to schema, through
// the libpq `options` parameter, which pgx and psql both understand.
func WithSearchPath(dbURL, schema string) (string, error) {
	u, err := url.Parse(dbURL)
	if err != nil || (u.Scheme != "postgres" && u.Scheme != "postgresql") {
		return "", fmt.Errorf("the test database URL is not a postgres:// URL")
	}
	q := u.Query()
	opts := strings.TrimSpace(q.Get("options") + " -c search_path=" + schema)
	q.Set("options", opts)
	// Spaces as %20: libpq and pgx do not read '+' as a space (Encode
	// writes a literal '+' as %2B, so this replaces only spaces).
	u.RawQuery = strings.ReplaceAll(q.Encode(), "+", "%20")
	return u.String(), nil
}

var notIdent = regexp.MustCompile(`[^a-z0-9_]+`)

// schemaName makes a schema name from the test name plus random bits:
// lower case, [a-z0-9_], at most 63 bytes.
func schemaName(test string) string {
	var b [5]byte
	if _, err := rand.Read(b[:]); err != nil {
		panic(err) // crypto/rand does not fail on Linux
	}
	name := strings.Trim(notIdent.ReplaceAllString(strings.ToLower(test), "_"), "_")
	// At most 45 characters in all: River, whose tables the daemon's
	// tests put in the same schema, allows 46.
	if len(name) > 32 {
		name = name[:32]
	}
	return "t_" + name + "_" + hex.EncodeToString(b[:])
}

// redactErr strips the URL's password from a connection error.
func redactErr(err error, dbURL string) error {
	u, perr := url.Parse(dbURL)
	if perr != nil || u.User == nil {
		return err
	}
	pw, ok := u.User.Password()
	if !ok || pw == "" {
		return err
	}
	return fmt.Errorf("%s", strings.ReplaceAll(err.Error(), pw, "REDACTED"))
}
