// Package promtest gives tests a real Prometheus and a real Alertmanager:
// the binaries of the Debian packages prometheus and prometheus-alertmanager,
// started on a free loopback port with a temporary configuration and storage
// directory, and stopped and removed when the test ends.
//
//	base := promtest.StartPrometheus(t, []string{appAddr}, []string{"rules.yml"})
//	resp, err := http.Get(base + "/api/v1/query?query=up")
//
// A missing binary fails the test with the command that installs it; the
// tests never skip.
package promtest

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"
)

// InstallHint is the command that installs the binaries this package runs.
const InstallHint = "apt-get install -y prometheus prometheus-alertmanager"

// Binary names, looked up on PATH and then in /usr/bin.
const (
	prometheusBin   = "prometheus"
	alertmanagerBin = "prometheus-alertmanager"
	promtoolBin     = "promtool"
)

const (
	// readyTimeout bounds the wait for /-/ready after a start.
	readyTimeout = 60 * time.Second
	// stopTimeout is how long a stopped process has to exit after SIGTERM
	// before it is killed.
	stopTimeout = 10 * time.Second
	// startAttempts is how often a start is tried when the chosen port was
	// taken between choosing and binding it.
	startAttempts = 3
)

// Promtool returns the path of the promtool binary, failing the test when it
// is not installed.
func Promtool(t testing.TB) string {
	t.Helper()
	return lookBinary(t, promtoolBin)
}

// StartPrometheus starts a Prometheus that scrapes scrapeTargets
// (host:port, job "curvewatch", path /metrics) every second and evaluates
// ruleFiles every second, and returns its base URL (http://127.0.0.1:port)
// once it reports ready. The process is stopped and its storage removed when
// the test ends.
func StartPrometheus(t testing.TB, scrapeTargets []string, ruleFiles []string) (baseURL string) {
	t.Helper()
	bin := lookBinary(t, prometheusBin)
	dir := t.TempDir()
	config := filepath.Join(dir, "prometheus.yml")
	if err := os.WriteFile(config, []byte(prometheusConfig(t, scrapeTargets, ruleFiles)), 0o644); err != nil {
		t.Fatalf("promtest: write prometheus config: %v", err)
	}
	storage := filepath.Join(dir, "data")
	return start(t, bin, dir, func(addr string) []string {
		return []string{
			"--config.file=" + config,
			"--storage.tsdb.path=" + storage,
			"--web.listen-address=" + addr,
			"--log.level=warn",
		}
	})
}

// StartAlertmanager starts an Alertmanager whose only receiver discards
// every notification, with clustering off, and returns its base URL once it
// reports ready. The process is stopped and its storage removed when the
// test ends.
func StartAlertmanager(t testing.TB) (baseURL string) {
	t.Helper()
	bin := lookBinary(t, alertmanagerBin)
	dir := t.TempDir()
	config := filepath.Join(dir, "alertmanager.yml")
	const body = "route:\n  receiver: \"null\"\nreceivers:\n  - name: \"null\"\n"
	if err := os.WriteFile(config, []byte(body), 0o644); err != nil {
		t.Fatalf("promtest: write alertmanager config: %v", err)
	}
	storage := filepath.Join(dir, "data")
	return start(t, bin, dir, func(addr string) []string {
		return []string{
			"--config.file=" + config,
			"--storage.path=" + storage,
			"--web.listen-address=" + addr,
			"--cluster.listen-address=",
			"--log.level=warn",
		}
	})
}

// prometheusConfig renders the configuration file. Rule files are made
// absolute, since Prometheus resolves them against the config's directory.
func prometheusConfig(t testing.TB, targets, ruleFiles []string) string {
	t.Helper()
	var b strings.Builder
	b.WriteString("global:\n  scrape_interval: 1s\n  scrape_timeout: 1s\n  evaluation_interval: 1s\n")
	if len(ruleFiles) > 0 {
		b.WriteString("rule_files:\n")
		for _, f := range ruleFiles {
			abs, err := filepath.Abs(f)
			if err != nil {
				t.Fatalf("promtest: rule file %s: %v", f, err)
			}
			fmt.Fprintf(&b, "  - %s\n", strconv.Quote(abs))
		}
	}
	b.WriteString("scrape_configs:\n  - job_name: curvewatch\n    metrics_path: /metrics\n    static_configs:\n      - targets: [")
	for i, target := range targets {
		if i > 0 {
			b.WriteString(", ")
		}
		b.WriteString(strconv.Quote(target))
	}
	b.WriteString("]\n")
	return b.String()
}

// lookBinary finds name on PATH or in /usr/bin.
func lookBinary(t testing.TB, name string) string {
	t.Helper()
	if path, err := exec.LookPath(name); err == nil {
		return path
	}
	path := filepath.Join("/usr/bin", name)
	if info, err := os.Stat(path); err == nil && !info.IsDir() {
		return path
	}
	t.Fatalf("promtest: %s is not installed; install it with: %s", name, InstallHint)
	return ""
}

// start runs bin with the arguments args gives for a free loopback address
// and waits until it answers /-/ready. It retries with another port when the
// process dies before it is ready (the port may have been taken in between);
// on a final failure the test fails with the process's log.
func start(t testing.TB, bin, dir string, args func(addr string) []string) string {
	t.Helper()
	var lastErr error
	for attempt := 1; attempt <= startAttempts; attempt++ {
		addr, err := freeAddr()
		if err != nil {
			t.Fatalf("promtest: find a free port: %v", err)
		}
		logPath := filepath.Join(dir, fmt.Sprintf("%s.%d.log", filepath.Base(bin), attempt))
		p, err := startProcess(bin, args(addr), logPath)
		if err != nil {
			t.Fatalf("promtest: start %s: %v", bin, err)
		}
		base := "http://" + addr
		err = p.waitReady(base+"/-/ready", readyTimeout)
		if err == nil {
			t.Cleanup(func() {
				p.stop()
				if t.Failed() {
					t.Logf("promtest: %s log:\n%s", filepath.Base(bin), tail(logPath))
				}
			})
			return base
		}
		p.stop()
		lastErr = fmt.Errorf("%w\n%s", err, tail(logPath))
		if !errors.Is(err, errExited) {
			break
		}
	}
	t.Fatalf("promtest: %s did not become ready: %v", bin, lastErr)
	return ""
}

var errExited = errors.New("process exited before it was ready")

type process struct {
	cmd    *exec.Cmd
	log    *os.File
	exited chan struct{} // closed when the process has exited
}

func startProcess(bin string, args []string, logPath string) (*process, error) {
	log, err := os.Create(logPath)
	if err != nil {
		return nil, err
	}
	cmd := exec.Command(bin, args...)
	cmd.Stdout = log
	cmd.Stderr = log
	cmd.SysProcAttr = sysProcAttr()
	if err := cmd.Start(); err != nil {
		log.Close()
		return nil, err
	}
	p := &process{cmd: cmd, log: log, exited: make(chan struct{})}
	go func() {
		_ = cmd.Wait()
		log.Close()
		close(p.exited)
	}()
	return p, nil
}

// waitReady polls url until it answers 200, the process exits, or timeout
// passes.
func (p *process) waitReady(url string, timeout time.Duration) error {
	ctx, cancel := context.WithTimeout(context.Background(), timeout)
	defer cancel()
	client := &http.Client{Timeout: 2 * time.Second}
	tick := time.NewTicker(50 * time.Millisecond)
	defer tick.Stop()
	for {
		req, err := http.NewRequestWithContext(ctx, http.MethodGet, url, nil)
		if err != nil {
			return err
		}
		if resp, err := client.Do(req); err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				return nil
			}
		}
		select {
		case <-p.exited:
			return fmt.Errorf("%w (%s)", errExited, p.cmd.ProcessState)
		case <-ctx.Done():
			return fmt.Errorf("no 200 from %s within %s", url, timeout)
		case <-tick.C:
		}
	}
}

// stop asks the process to terminate and kills it if it has not exited
// within stopTimeout. It returns once the process has exited.
func (p *process) stop() {
	select {
	case <-p.exited:
		return
	default:
	}
	_ = p.cmd.Process.Signal(terminate)
	select {
	case <-p.exited:
	case <-time.After(stopTimeout):
		_ = p.cmd.Process.Kill()
		<-p.exited
	}
}

// freeAddr returns a loopback address with a port that was free a moment
// ago.
func freeAddr() (string, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return "", err
	}
	defer l.Close()
	return l.Addr().String(), nil
}

// tail returns the last lines of the file at path, for failure messages.
func tail(path string) string {
	data, err := os.ReadFile(path)
	if err != nil {
		return "(no log: " + err.Error() + ")"
	}
	const max = 4000
	if len(data) > max {
		data = data[len(data)-max:]
		if i := bytes.IndexByte(data, '\n'); i >= 0 {
			data = data[i+1:]
		}
	}
	return string(data)
}
