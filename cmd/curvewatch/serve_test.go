package main

import (
	"bytes"
	"context"
	"io"
	"net"
	"net/http"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// syncBuffer is a bytes.Buffer safe for the daemon's goroutines.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// serveCLI runs serve in-process (not through the command table) and
// returns its exit code.
func serveCLI(ctx context.Context, stdout, stderr io.Writer, args ...string) int {
	return exit(runServe(ctx, &env{stdout: stdout, stderr: stderr}, args), stderr)
}

// freePort returns a loopback address nothing listens on right now.
func freePort(t *testing.T) string {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := ln.Addr().String()
	ln.Close()
	return addr
}

// serve comes up (readyz 200), runs the missed latest slot once, and stops
// promptly with exit 0 when its context is cancelled (as by SIGTERM).
func TestServeStopsOnSignal(t *testing.T) {
	t.Parallel()
	url, schema := riverDB(t)
	addr := freePort(t)
	path := writeConfig(t, url, schema, "database: "+url+"\nschema: {SCHEMA}\nlisten: "+addr+"\ntimezone: Europe/London\nmodels:\n"+goodModel)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	var stdout, stderr syncBuffer
	code := make(chan int, 1)
	go func() { code <- serveCLI(ctx, &stdout, &stderr, "--config", path) }()

	deadline := time.Now().Add(15 * time.Second)
	for {
		resp, err := http.Get("http://" + addr + "/readyz")
		if err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				break
			}
		}
		if time.Now().After(deadline) {
			t.Fatalf("/readyz not 200 within 15 s (last: %v); stderr:\n%s", err, stderr.String())
		}
		time.Sleep(50 * time.Millisecond)
	}
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(context.Background())
	var n int
	for deadline := time.Now().Add(15 * time.Second); ; {
		if err := conn.QueryRow(ctx, "SELECT count(*) FROM fits").Scan(&n); err != nil {
			t.Fatal(err)
		}
		if n > 0 || time.Now().After(deadline) {
			break
		}
		time.Sleep(50 * time.Millisecond)
	}
	if n != 1 {
		t.Errorf("%d fits recorded for the missed slot, want 1; stderr:\n%s", n, stderr.String())
	}

	stopAt := time.Now()
	cancel()
	select {
	case c := <-code:
		if c != exitOK {
			t.Errorf("exit code %d, want 0; stderr:\n%s", c, stderr.String())
		}
	case <-time.After(12 * time.Second):
		t.Fatalf("serve did not stop within 12 s of the signal")
	}
	if d := time.Since(stopAt); d > 10*time.Second {
		t.Errorf("stopping took %s", d)
	}
	for _, want := range []string{"msg=ready", "msg=stopping", "msg=stopped"} {
		if !strings.Contains(stderr.String(), want) {
			t.Errorf("stderr lacks %q:\n%s", want, stderr.String())
		}
	}
	if strings.Contains(stderr.String(), url) {
		t.Errorf("the log shows the database URL")
	}
}

func TestServeConfigAndUsageErrors(t *testing.T) {
	t.Parallel()
	path := writeConfig(t, "postgres://nobody@127.0.0.1:1/none", "curvewatch",
		"database: {DB}\nschema: {SCHEMA}\nmodels:\n"+strings.Replace(goodModel, `"0 3 * * *"`, `"0 3 * *"`, 1))
	var out, errb bytes.Buffer
	if c := serveCLI(context.Background(), &out, &errb, "--config", path); c != exitFailed {
		t.Errorf("bad schedule: exit %d, want 1; stderr:\n%s", c, errb.String())
	}
	if !strings.Contains(errb.String(), "models[0].schedule") {
		t.Errorf("the problem is not named:\n%s", errb.String())
	}
	for _, args := range [][]string{{}, {"--config", path, "--workers", "-1"}, {"--config", path, "--job-timeout", "0s"}} {
		errb.Reset()
		if c := serveCLI(context.Background(), &out, &errb, args...); c != exitUsage {
			t.Errorf("%v: exit %d, want 2; stderr:\n%s", args, c, errb.String())
		}
	}
}

// The help has every section the other commands' help has.
func TestServeHelp(t *testing.T) {
	var out, errb bytes.Buffer
	if c := serveCLI(context.Background(), &out, &errb, "--help"); c != exitOK {
		t.Fatalf("exit %d", c)
	}
	for _, part := range []string{"curvewatch serve: ", "Usage:", "Example:\n  curvewatch serve", "Writes:", "Flags:", "--verbose", "Exit codes:\n  0  ", "  2  "} {
		if !strings.Contains(out.String(), part) {
			t.Errorf("the help lacks %q:\n%s", part, out.String())
		}
	}
	for i, line := range strings.Split(out.String(), "\n") {
		if len([]rune(line)) > 80 {
			t.Errorf("help line %d is %d characters wide", i+1, len([]rune(line)))
		}
	}
}
