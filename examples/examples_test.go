package examples

import (
	"go/ast"
	"go/parser"
	"go/token"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"

	"github.com/curvewatch/curvewatch/internal/pgtest"
	"github.com/curvewatch/curvewatch/internal/promtest"
)

func TestMain(m *testing.M) { pgtest.Main(m) }

// promtool runs promtool with args in dir and fails the test with its
// output when it fails.
func promtool(t *testing.T, dir string, args ...string) {
	t.Helper()
	cmd := exec.Command(promtest.Promtool(t), args...)
	cmd.Dir = dir
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("promtool %s: %v\n%s", strings.Join(args, " "), err, out)
	}
}

func TestPrometheusRules(t *testing.T) {
	t.Parallel()
	promtool(t, "prometheus", "check", "rules", "curvewatch-rules.yml")
}

func TestPrometheusRulesUnitTests(t *testing.T) {
	t.Parallel()
	promtool(t, "prometheus", "test", "rules", "curvewatch-rules.test.yml")
}

func TestPrometheusConfig(t *testing.T) {
	t.Parallel()
	promtool(t, "prometheus", "check", "config", "prometheus.yml")
}

// The rules use only metrics the daemon exports (and Prometheus's own up).
func TestPrometheusRulesUseExportedMetrics(t *testing.T) {
	t.Parallel()
	data, err := os.ReadFile(filepath.Join("prometheus", "curvewatch-rules.yml"))
	if err != nil {
		t.Fatal(err)
	}
	var file struct {
		Groups []struct {
			Rules []struct {
				Alert string `yaml:"alert"`
				Expr  string `yaml:"expr"`
			} `yaml:"rules"`
		} `yaml:"groups"`
	}
	if err := yaml.Unmarshal(data, &file); err != nil {
		t.Fatal(err)
	}
	exported := exportedMetrics(t)
	n := 0
	for _, g := range file.Groups {
		for _, r := range g.Rules {
			n++
			checkMetricNames(t, r.Alert, r.Expr, exported, "up")
		}
	}
	if n == 0 {
		t.Fatal("no rules found")
	}
}

// exportedMetrics returns the series names the daemon exports: the
// curvewatch_ string constants of daemon/metrics.go, with a histogram's
// _bucket, _sum and _count.
func exportedMetrics(t *testing.T) map[string]bool {
	t.Helper()
	f, err := parser.ParseFile(token.NewFileSet(), filepath.Join("..", "daemon", "metrics.go"), nil, 0)
	if err != nil {
		t.Fatal(err)
	}
	names := map[string]bool{}
	ast.Inspect(f, func(n ast.Node) bool {
		lit, ok := n.(*ast.BasicLit)
		if !ok || lit.Kind != token.STRING {
			return true
		}
		s, err := strconv.Unquote(lit.Value)
		if err == nil && regexp.MustCompile(`^curvewatch_[a-z0-9_]+$`).MatchString(s) {
			names[s] = true
			if strings.HasSuffix(s, "_seconds") && strings.Contains(s, "duration") {
				for _, suffix := range []string{"_bucket", "_sum", "_count"} {
					names[s+suffix] = true
				}
			}
		}
		return true
	})
	if len(names) < 11 {
		t.Fatalf("found only %d metric names in daemon/metrics.go: %v", len(names), names)
	}
	return names
}

var metricToken = regexp.MustCompile(`\b(curvewatch_[a-zA-Z0-9_]*)`)

// checkMetricNames fails the test when expr names a curvewatch_ metric the
// daemon does not export, or no metric at all.
func checkMetricNames(t *testing.T, what, expr string, exported map[string]bool, others ...string) {
	t.Helper()
	found := false
	for _, m := range metricToken.FindAllString(expr, -1) {
		found = true
		if !exported[m] {
			t.Errorf("%s: %s is not a metric the daemon exports (daemon/metrics.go)", what, m)
		}
	}
	for _, o := range others {
		if regexp.MustCompile(`\b` + o + `\b`).MatchString(expr) {
			found = true
		}
	}
	if !found {
		t.Errorf("%s: %q uses none of the daemon's metrics", what, expr)
	}
}
