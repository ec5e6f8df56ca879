package pgcluster

import (
	"context"
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// installHint is how the cluster tests say to get the server binaries.
const installHint = "install the PostgreSQL server binaries (Debian: apt-get install -y postgresql)"

// needServer returns the server binaries' directory. Without them the test
// fails, unless the environment names a server for the other database
// tests: then starting a cluster is not what those machines rely on, and
// the test is skipped, saying so.
func needServer(t *testing.T) string {
	t.Helper()
	bin, err := FindServer(context.Background())
	if err == nil {
		return bin
	}
	for _, env := range []string{"CURVEWATCH_TEST_DATABASE_URL", "DATABASE_URL"} {
		if os.Getenv(env) != "" {
			t.Skipf("the database tests use the server at $%s; no server binaries to start a cluster with: %v", env, err)
		}
	}
	t.Fatalf("%v; %s", err, installHint)
	return ""
}

func TestFindServerExplainsWhatIsMissing(t *testing.T) {
	t.Parallel()
	empty := t.TempDir()
	_, err := findServer(empty, filepath.Join(empty, "*", "bin"))
	if !errors.Is(err, ErrNoServer) || !strings.Contains(err.Error(), "initdb") || !strings.Contains(err.Error(), "pg_config") {
		t.Fatalf("findServer in an empty place: %v", err)
	}

	// The newest version directory wins, compared as numbers.
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
	// pg_config's directory comes first when it has both binaries.
	got, err = findServer(filepath.Join(root, "9", "bin"), filepath.Join(root, "*", "bin"))
	if err != nil || got != filepath.Join(root, "9", "bin") {
		t.Fatalf("findServer with pg_config's bindir = %q, %v; want version 9", got, err)
	}
}

// TestStartStop starts a cluster, queries it, stops it, and checks that
// nothing is left: no directory, no server on the port.
func TestStartStop(t *testing.T) {
	t.Parallel()
	bin := needServer(t)
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	c, err := Start(ctx, Options{Bin: bin, Prefix: "curvewatch-pgcluster-test-"})
	if err != nil {
		t.Fatal(err)
	}
	if !strings.HasPrefix(filepath.Base(c.Dir), "curvewatch-pgcluster-test-") {
		t.Errorf("directory %s does not start with the prefix", c.Dir)
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
	if conn, err := pgx.Connect(ctx, c.URL); err == nil {
		conn.Close(ctx)
		t.Errorf("server still answers on port %d after Stop", c.Port)
	}
}

// TestStartWithBadBin: a Bin directory without the binaries fails, naming
// initdb, and leaves no directory behind.
func TestStartWithBadBin(t *testing.T) {
	t.Parallel()
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	prefix := "curvewatch-pgcluster-bad-" + filepath.Base(t.TempDir()) + "-"
	c, err := Start(ctx, Options{Bin: t.TempDir(), Prefix: prefix})
	if err == nil {
		c.Stop()
		t.Fatal("Start with a directory holding no initdb succeeded")
	}
	if !strings.Contains(err.Error(), "initdb") {
		t.Errorf("error %q does not name initdb", err)
	}
	left, _ := filepath.Glob(filepath.Join(os.TempDir(), prefix+"*"))
	left2, _ := filepath.Glob(filepath.Join("/tmp", prefix+"*"))
	if len(left)+len(left2) > 0 {
		t.Errorf("a failed start left %v %v behind", left, left2)
	}
}

// TestWatchdogRemovesClusterAfterExit starts a cluster from a child test
// binary that exits without stopping it, and checks that the watchdog
// stops the server and removes the directory.
func TestWatchdogRemovesClusterAfterExit(t *testing.T) {
	t.Parallel()
	if os.Getenv("PGCLUSTER_WATCHDOG_CHILD") == "1" {
		c, err := Start(context.Background(), Options{})
		if err != nil {
			t.Fatal(err)
		}
		os.Stdout.WriteString("DIR=" + c.Dir + "\n")
		os.Exit(0) // no Stop: the watchdog must clean up
	}
	needServer(t)
	cmd := exec.Command(os.Args[0], "-test.run=^TestWatchdogRemovesClusterAfterExit$")
	cmd.Env = append(os.Environ(), "PGCLUSTER_WATCHDOG_CHILD=1")
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
