package pgtest

import (
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
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
	_, err := findServer("", filepath.Join(t.TempDir(), "*", "bin"))
	noServer(r, err)
	for _, want := range []string{"initdb", EnvTestURL, "apt-get install postgresql"} {
		if !strings.Contains(r.msg, want) {
			t.Errorf("failure %q lacks %q", r.msg, want)
		}
	}
}

func TestFindServerExplainsWhatIsMissing(t *testing.T) {
	t.Parallel()
	empty := t.TempDir()
	_, err := findServer(empty, filepath.Join(empty, "*", "bin"))
	if err == nil || !strings.Contains(err.Error(), "initdb") {
		t.Fatalf("findServer in an empty place: %v", err)
	}

	// The newest version directory wins.
	root := t.TempDir()
	for _, v := range []string{"9", "15", "13"} {
		bin := filepath.Join(root, v, "bin")
		if err := os.MkdirAll(bin, 0o755); err != nil {
			t.Fatal(err)
		}
		for _, f := range []string{"initdb", "pg_ctl"} {
			if err := os.WriteFile(filepath.Join(bin, f), nil, 0o755); err != nil {
				t.Fatal(err)
			}
		}
	}
	got, err := findServer("", filepath.Join(root, "*", "bin"))
	if err != nil || got != filepath.Join(root, "15", "bin") {
		t.Fatalf("findServer = %q, %v; want version 15", got, err)
	}
}

// TestStartCluster starts and stops a throwaway cluster of its own, whatever
// URL the environment gives, so the fallback that developers without a
// server rely on is tested wherever the server binaries are installed.
func TestStartCluster(t *testing.T) {
	t.Parallel()
	if _, err := findServer(pgConfigBindir(context.Background()), serverDirs); err != nil {
		if envURL() != "" {
			// Not a missing server: the tests have one through the URL.
			t.Skipf("the tests use the server at $%s; no server binaries to test starting a cluster: %v", EnvTestURL, err)
		}
		t.Fatalf("%v; %s", err, howTo)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	c, err := StartCluster(ctx)
	if err != nil {
		t.Fatal(err)
	}
	conn, err := pgx.Connect(ctx, c.URL)
	if err != nil {
		c.Stop()
		t.Fatal(err)
	}
	var v string
	err = conn.QueryRow(ctx, "SHOW server_version").Scan(&v)
	conn.Close(ctx)
	if err != nil {
		c.Stop()
		t.Fatal(err)
	}
	t.Logf("throwaway cluster: PostgreSQL %s on port %d", v, c.Port)
	if err := c.Stop(); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(c.Dir); !os.IsNotExist(err) {
		t.Errorf("cluster directory %s left behind (%v)", c.Dir, err)
	}
	if _, err := pgx.Connect(ctx, c.URL); err == nil {
		t.Errorf("server still answers on port %d after Stop", c.Port)
	}
}

// TestWatchdogRemovesClusterAfterExit starts a cluster from a child test
// binary that exits without stopping it, and checks that the watchdog
// stops the server and removes the directory.
func TestWatchdogRemovesClusterAfterExit(t *testing.T) {
	t.Parallel()
	if os.Getenv("PGTEST_WATCHDOG_CHILD") == "1" {
		c, err := StartCluster(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		os.Stdout.WriteString("DIR=" + c.Dir + "\n")
		os.Exit(0) // no Stop: the watchdog must clean up
	}
	if _, err := findServer(pgConfigBindir(context.Background()), serverDirs); err != nil {
		if envURL() != "" {
			t.Skipf("the tests use the server at $%s; no server binaries to test the watchdog: %v", EnvTestURL, err)
		}
		t.Fatalf("%v; %s", err, howTo)
	}
	cmd := exec.Command(os.Args[0], "-test.run=^TestWatchdogRemovesClusterAfterExit$")
	cmd.Env = append(os.Environ(), "PGTEST_WATCHDOG_CHILD=1")
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("child: %v\n%s", err, out)
	}
	_, dir, ok := strings.Cut(string(out), "DIR=")
	if !ok {
		t.Fatalf("child printed no directory:\n%s", out)
	}
	dir = strings.TrimSpace(strings.SplitN(dir, "\n", 2)[0])
	deadline := time.Now().Add(time.Minute)
	for {
		if _, err := os.Stat(dir); os.IsNotExist(err) {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("the watchdog left %s behind a minute after the child exited", dir)
		}
		time.Sleep(100 * time.Millisecond) // polling the file system: there is no signal to wait on
	}
}
