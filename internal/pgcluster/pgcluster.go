// Package pgcluster starts throwaway PostgreSQL clusters: a data directory
// in a temporary folder and a server on a private loopback port, started
// with the server binaries installed on the machine (initdb and pg_ctl,
// found with `pg_config --bindir` or under /usr/lib/postgresql/*/bin), and
// removed again by Stop or, should the process die first, by a watchdog.
//
// initdb refuses to run as root, so as root the binaries run as the
// postgres user (runuser), in a directory that user owns.
//
// The test helper internal/pgtest and `curvewatch demo` use it; it does not
// import package testing, so the binary can link it.
//
//	c, err := pgcluster.Start(ctx, pgcluster.Options{})
//	if errors.Is(err, pgcluster.ErrNoServer) { … tell how to install PostgreSQL … }
//	defer c.Stop()
//	pool, err := pgxpool.New(ctx, c.URL)
package pgcluster

import (
	"bytes"
	"cmp"
	"context"
	"errors"
	"fmt"
	"net"
	"os"
	"os/exec"
	"os/user"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"syscall"
	"time"
)

// ServerDirs is where Debian and most Linux distributions put the server
// binaries, one directory per major version.
const ServerDirs = "/usr/lib/postgresql/*/bin"

// DefaultPrefix starts the name of a cluster's temporary directory when
// Options.Prefix is empty.
const DefaultPrefix = "curvewatch-pg-"

// ErrNoServer is wrapped by the errors of FindServer and Start when the
// machine has no PostgreSQL server binaries.
var ErrNoServer = errors.New("no PostgreSQL server binaries (initdb, pg_ctl)")

// Cluster is a throwaway PostgreSQL cluster: a data directory in a
// temporary folder and a server listening on a private loopback port, with
// trust authentication for the postgres user.
type Cluster struct {
	// URL connects as the postgres superuser to the postgres database.
	URL string
	// Dir holds the data directory (Dir/data), the socket and the server
	// log (Dir/server.log).
	Dir string
	// Port is the server's TCP port on 127.0.0.1.
	Port int

	bin      string   // directory of initdb and pg_ctl
	asUser   []string // command prefix to run as the postgres user, or nil
	watchdog *os.Process
}

// Options tune Start. The zero value finds the binaries and names the
// directory with DefaultPrefix.
type Options struct {
	// Bin is the directory holding initdb and pg_ctl; "" means FindServer.
	Bin string
	// Prefix starts the temporary directory's name (default DefaultPrefix),
	// so that a leftover directory says who made it.
	Prefix string
}

// Start creates and starts a throwaway cluster. The caller stops it with
// Stop; a watchdog process also stops and removes it when this process
// exits, however it exits. With no server binaries on the machine the
// error wraps ErrNoServer.
func Start(ctx context.Context, opts Options) (*Cluster, error) {
	bin := opts.Bin
	if bin == "" {
		var err error
		if bin, err = FindServer(ctx); err != nil {
			return nil, err
		}
	}
	c := &Cluster{bin: bin}
	parent := ""
	var uid, gid int
	if os.Geteuid() == 0 {
		// initdb refuses root: run the server as the postgres user in a
		// directory it owns.
		u, err := user.Lookup("postgres")
		if err != nil {
			return nil, fmt.Errorf("running as root, and there is no postgres user to run the server as (initdb refuses root): %w", err)
		}
		uid, _ = strconv.Atoi(u.Uid)
		gid, _ = strconv.Atoi(u.Gid)
		runuser, err := exec.LookPath("runuser")
		if err != nil {
			return nil, fmt.Errorf("running as root needs runuser to start the server as the postgres user: %w", err)
		}
		c.asUser = []string{runuser, "-u", "postgres", "--"}
		parent = sharedTempDir()
	}
	dir, err := os.MkdirTemp(parent, cmp.Or(opts.Prefix, DefaultPrefix))
	if err != nil {
		return nil, fmt.Errorf("make a directory for the cluster: %w", err)
	}
	c.Dir = dir
	if c.asUser != nil {
		if err := os.Chown(dir, uid, gid); err != nil {
			os.RemoveAll(dir)
			return nil, fmt.Errorf("give %s to the postgres user: %w", dir, err)
		}
	}
	if err := c.start(ctx); err != nil {
		if kerr := c.kill(); kerr != nil {
			err = errors.Join(err, kerr)
		}
		return nil, err
	}
	c.startWatchdog()
	return c, nil
}

func (c *Cluster) data() string { return filepath.Join(c.Dir, "data") }

func (c *Cluster) command(ctx context.Context, name string, args ...string) *exec.Cmd {
	argv := append(slices.Clone(c.asUser), filepath.Join(c.bin, name))
	argv = append(argv, args...)
	cmd := exec.CommandContext(ctx, argv[0], argv[1:]...)
	cmd.Dir = c.Dir
	cmd.Env = append(os.Environ(), "LC_ALL=C")
	return cmd
}

func (c *Cluster) run(ctx context.Context, name string, args ...string) error {
	var out bytes.Buffer
	cmd := c.command(ctx, name, args...)
	cmd.Stdout, cmd.Stderr = &out, &out
	if err := cmd.Run(); err != nil {
		return fmt.Errorf("%s: %w: %s", strings.Join(cmd.Args, " "), err, strings.TrimSpace(out.String()))
	}
	return nil
}

func (c *Cluster) start(ctx context.Context) error {
	if err := c.run(ctx, "initdb", "-D", c.data(), "-U", "postgres", "-A", "trust", "-E", "UTF8", "--no-locale", "--no-sync"); err != nil {
		return err
	}
	// The port is free when chosen; another process may take it before the
	// server binds it, so try a few.
	var err error
	for range 3 {
		c.Port, err = freePort()
		if err != nil {
			return err
		}
		opts := fmt.Sprintf("-p %d -c listen_addresses=127.0.0.1 -c unix_socket_directories=%s -c fsync=off -c synchronous_commit=off -c full_page_writes=off -c max_connections=200", c.Port, c.Dir)
		err = c.run(ctx, "pg_ctl", "-D", c.data(), "-o", opts, "-l", filepath.Join(c.Dir, "server.log"), "-w", "-t", "60", "start")
		if err == nil {
			c.URL = fmt.Sprintf("postgres://postgres@127.0.0.1:%d/postgres?sslmode=disable", c.Port)
			return nil
		}
	}
	if log, rerr := os.ReadFile(filepath.Join(c.Dir, "server.log")); rerr == nil {
		err = fmt.Errorf("%w\nserver log:\n%s", err, log)
	}
	return err
}

// Stop stops the server at once (no checkpoint: the data is thrown away)
// and removes its directory.
func (c *Cluster) Stop() error {
	if c.watchdog != nil {
		c.watchdog.Kill() // it only waits for us to exit
		c.watchdog.Wait()
		c.watchdog = nil
	}
	return c.kill()
}

func (c *Cluster) kill() error {
	var err error
	if _, serr := os.Stat(filepath.Join(c.data(), "postmaster.pid")); serr == nil {
		ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
		defer cancel()
		err = c.run(ctx, "pg_ctl", "-D", c.data(), "-m", "immediate", "-w", "stop")
	}
	if rerr := os.RemoveAll(c.Dir); rerr != nil {
		err = errors.Join(err, rerr)
	}
	if err != nil {
		return fmt.Errorf("remove the throwaway cluster in %s: %w", c.Dir, err)
	}
	return nil
}

// startWatchdog starts a shell, in its own session so that a Ctrl-C to
// this process does not reach it, that waits for this process to exit and
// then stops the server and removes the directory. Stop kills it first.
func (c *Cluster) startWatchdog() {
	stop := strings.Join(append(slices.Clone(c.asUser), filepath.Join(c.bin, "pg_ctl")), " ")
	script := `while kill -0 "$1" 2>/dev/null; do sleep 1; done; ` + stop + ` -D "$2/data" -m immediate -w stop >/dev/null 2>&1; rm -rf "$2"`
	cmd := exec.Command("sh", "-c", script, "pgcluster-watchdog", strconv.Itoa(os.Getpid()), c.Dir)
	cmd.SysProcAttr = &syscall.SysProcAttr{Setsid: true}
	if err := cmd.Start(); err == nil {
		c.watchdog = cmd.Process
	}
}

// FindServer returns the directory holding initdb and pg_ctl: `pg_config
// --bindir` when it has them, else the newest version under ServerDirs. The
// error wraps ErrNoServer.
func FindServer(ctx context.Context) (string, error) {
	return findServer(pgConfigBindir(ctx), ServerDirs)
}

// findServer returns the directory holding initdb and pg_ctl: pgConfigBin
// when it has them, else the newest match of pattern.
func findServer(pgConfigBin, pattern string) (string, error) {
	has := func(dir string) bool {
		for _, b := range []string{"initdb", "pg_ctl"} {
			if st, err := os.Stat(filepath.Join(dir, b)); err != nil || st.IsDir() {
				return false
			}
		}
		return true
	}
	if pgConfigBin != "" && has(pgConfigBin) {
		return pgConfigBin, nil
	}
	dirs, _ := filepath.Glob(pattern)
	// Newest version first: compare the version directory numerically.
	slices.SortFunc(dirs, func(a, b string) int {
		va, _ := strconv.Atoi(filepath.Base(filepath.Dir(a)))
		vb, _ := strconv.Atoi(filepath.Base(filepath.Dir(b)))
		return vb - va
	})
	for _, d := range dirs {
		if has(d) {
			return d, nil
		}
	}
	return "", fmt.Errorf("%w found: not in `pg_config --bindir`, nor in %s", ErrNoServer, pattern)
}

// pgConfigBindir returns `pg_config --bindir`, or "" without pg_config.
func pgConfigBindir(ctx context.Context) string {
	out, err := exec.CommandContext(ctx, "pg_config", "--bindir").Output()
	if err != nil {
		return ""
	}
	return strings.TrimSpace(string(out))
}

// sharedTempDir returns the temporary directory when another user can reach
// into it (the postgres user must, to use a directory in it), else /tmp.
func sharedTempDir() string {
	d := os.TempDir()
	if st, err := os.Stat(d); err == nil && st.Mode().Perm()&0o001 != 0 {
		return d
	}
	return "/tmp"
}

// freePort asks the kernel for a free loopback TCP port.
func freePort() (int, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return 0, fmt.Errorf("find a free port: %w", err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port, nil
}
