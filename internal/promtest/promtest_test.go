package promtest

import (
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

func getJSON(t *testing.T, url string, v any) {
	t.Helper()
	resp, err := http.Get(url)
	if err != nil {
		t.Fatalf("GET %s: %v", url, err)
	}
	defer resp.Body.Close()
	body, _ := io.ReadAll(resp.Body)
	if resp.StatusCode != http.StatusOK {
		t.Fatalf("GET %s: %s: %s", url, resp.Status, body)
	}
	if err := json.Unmarshal(body, v); err != nil {
		t.Fatalf("GET %s: %v: %s", url, err, body)
	}
}

func TestStartPrometheusScrapesAndLoadsRules(t *testing.T) {
	t.Parallel()
	target := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		fmt.Fprintln(w, "# TYPE promtest_answer gauge\npromtest_answer 42")
	}))
	defer target.Close()

	rules := filepath.Join(t.TempDir(), "rules.yml")
	const body = "groups:\n  - name: promtest\n    rules:\n      - record: promtest_answer_doubled\n        expr: promtest_answer * 2\n"
	if err := os.WriteFile(rules, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	base := StartPrometheus(t, []string{strings.TrimPrefix(target.URL, "http://")}, []string{rules})

	// Scraped every second and evaluated every second: the recorded series
	// needs both.
	got := WaitForQuery(t, base, "promtest_answer_doubled", 30*time.Second)
	if len(got) != 1 || got[0].Value != "84" {
		t.Fatalf("promtest_answer_doubled = %+v, want one sample of 84", got)
	}
}

func TestStartAlertmanager(t *testing.T) {
	t.Parallel()
	base := StartAlertmanager(t)
	var status struct {
		Cluster struct {
			Status string `json:"status"`
		} `json:"cluster"`
	}
	getJSON(t, base+"/api/v2/status", &status)
	if status.Cluster.Status != "disabled" {
		t.Errorf("cluster status %q, want disabled", status.Cluster.Status)
	}
}

func TestPromtool(t *testing.T) {
	t.Parallel()
	out, err := exec.Command(Promtool(t), "--version").CombinedOutput()
	if err != nil {
		t.Fatalf("promtool --version: %v: %s", err, out)
	}
}

// recorder captures Fatalf instead of stopping the test.
type recorder struct {
	testing.TB
	msg string
}

func (r *recorder) Helper()                           {}
func (r *recorder) Fatalf(format string, args ...any) { r.msg = fmt.Sprintf(format, args...) }

func TestMissingBinarySaysHowToInstall(t *testing.T) {
	t.Parallel()
	r := &recorder{TB: t}
	lookBinary(r, "curvewatch-no-such-binary")
	if !strings.Contains(r.msg, InstallHint) {
		t.Errorf("message %q does not say %q", r.msg, InstallHint)
	}
}
