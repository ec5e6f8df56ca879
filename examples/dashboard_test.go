package examples

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/internal/pgtest"
	"github.com/curvewatch/curvewatch/internal/promtest"
	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/curvewatch/curvewatch/migrations"
)

const dashboardPath = "grafana/curvewatch-dashboard.json"

// The two datasources panels may use: template variables, so that the
// dashboard works with whatever datasources an installation has.
var (
	dsPrometheus = datasource{Type: "prometheus", UID: "${DS_PROMETHEUS}"}
	dsPostgres   = datasource{Type: "grafana-postgresql-datasource", UID: "${DS_POSTGRES}"}
)

const caution = "Statistical signals for people to review, not a compliance determination; defer to local regulations and qualified professionals."

type datasource struct {
	Type string `json:"type"`
	UID  string `json:"uid"`
}

type target struct {
	Datasource *datasource `json:"datasource"`
	RefID      string      `json:"refId"`
	Expr       string      `json:"expr"`
	RawSQL     string      `json:"rawSql"`
	Format     string      `json:"format"`
}

type panel struct {
	ID         int         `json:"id"`
	Type       string      `json:"type"`
	Title      string      `json:"title"`
	Datasource *datasource `json:"datasource"`
	Targets    []target    `json:"targets"`
	Panels     []panel     `json:"panels"` // a row's
	Options    struct {
		Content string `json:"content"`
	} `json:"options"`
}

type variable struct {
	Name       string      `json:"name"`
	Type       string      `json:"type"`
	Query      any         `json:"query"`
	Datasource *datasource `json:"datasource"`
	Multi      bool        `json:"multi"`
	IncludeAll bool        `json:"includeAll"`
}

type dashboard struct {
	SchemaVersion int     `json:"schemaVersion"`
	UID           string  `json:"uid"`
	Title         string  `json:"title"`
	Panels        []panel `json:"panels"`
	Templating    struct {
		List []variable `json:"list"`
	} `json:"templating"`
}

func loadDashboard(t *testing.T) *dashboard {
	t.Helper()
	data, err := os.ReadFile(dashboardPath)
	if err != nil {
		t.Fatal(err)
	}
	var d dashboard
	dec := json.NewDecoder(strings.NewReader(string(data)))
	if err := dec.Decode(&d); err != nil {
		t.Fatalf("%s does not parse: %v", dashboardPath, err)
	}
	if d.SchemaVersion < 36 || d.UID == "" || d.Title == "" || len(d.Panels) == 0 {
		t.Fatalf("%s: schemaVersion %d, uid %q, title %q, %d panels", dashboardPath, d.SchemaVersion, d.UID, d.Title, len(d.Panels))
	}
	return &d
}

// allPanels flattens rows.
func (d *dashboard) allPanels() []panel {
	var out []panel
	var walk func([]panel)
	walk = func(ps []panel) {
		for _, p := range ps {
			out = append(out, p)
			walk(p.Panels)
		}
	}
	walk(d.Panels)
	return out
}

func (d *dashboard) variable(name string) *variable {
	for i := range d.Templating.List {
		if d.Templating.List[i].Name == name {
			return &d.Templating.List[i]
		}
	}
	return nil
}

// Every panel that queries uses one of the two datasource variables, and
// so does each of its queries; the caution is on the dashboard.
func TestDashboardDatasources(t *testing.T) {
	t.Parallel()
	d := loadDashboard(t)
	for _, v := range []struct{ name, plugin string }{{"DS_PROMETHEUS", dsPrometheus.Type}, {"DS_POSTGRES", dsPostgres.Type}} {
		got := d.variable(v.name)
		if got == nil || got.Type != "datasource" || got.Query != v.plugin {
			t.Errorf("no datasource variable %s of type %s: %+v", v.name, v.plugin, got)
		}
	}
	ok := func(ds *datasource) bool { return ds != nil && (*ds == dsPrometheus || *ds == dsPostgres) }
	hasCaution, prom, sql := false, 0, 0
	for _, p := range d.allPanels() {
		switch p.Type {
		case "text":
			hasCaution = hasCaution || strings.Contains(p.Options.Content, caution)
			continue
		case "row":
			continue
		}
		if !ok(p.Datasource) {
			t.Errorf("panel %q: datasource %+v, want ${DS_PROMETHEUS} or ${DS_POSTGRES}", p.Title, p.Datasource)
		}
		if len(p.Targets) == 0 {
			t.Errorf("panel %q has no query", p.Title)
		}
		for _, tg := range p.Targets {
			if tg.Datasource != nil && *tg.Datasource != *p.Datasource {
				t.Errorf("panel %q query %s: datasource %+v differs from the panel's", p.Title, tg.RefID, tg.Datasource)
			}
			switch {
			case p.Datasource != nil && *p.Datasource == dsPrometheus && tg.Expr != "":
				prom++
			case p.Datasource != nil && *p.Datasource == dsPostgres && tg.RawSQL != "":
				sql++
			default:
				t.Errorf("panel %q query %s: no expression for its datasource", p.Title, tg.RefID)
			}
		}
	}
	for _, v := range d.Templating.List {
		if v.Type == "query" && !ok(v.Datasource) {
			t.Errorf("variable %s: datasource %+v", v.Name, v.Datasource)
		}
	}
	if !hasCaution {
		t.Errorf("no text panel says %q", caution)
	}
	if prom < 5 || sql < 3 {
		t.Errorf("%d PromQL and %d SQL queries; want the panels DESIGN asks for", prom, sql)
	}
}

// promDurations stands in for Grafana's interval variables in PromQL.
var promDurations = map[string]string{"__rate_interval": "5m", "__interval": "1m", "__range": "1d"}

var grafanaVar = regexp.MustCompile(`\$\{(\w+)(?::\w+)?\}|\$(\w+)`)

// Every PromQL expression parses (promtool checks it as a recording rule)
// and names only metrics the daemon exports.
func TestDashboardPromQL(t *testing.T) {
	t.Parallel()
	d := loadDashboard(t)
	exported := exportedMetrics(t)
	var rules strings.Builder
	rules.WriteString("groups:\n  - name: dashboard\n    rules:\n")
	n := 0
	for _, p := range d.allPanels() {
		for _, tg := range p.Targets {
			if tg.Expr == "" {
				continue
			}
			what := fmt.Sprintf("panel %q query %s", p.Title, tg.RefID)
			expr := grafanaVar.ReplaceAllStringFunc(tg.Expr, func(s string) string {
				m := grafanaVar.FindStringSubmatch(s)
				name := m[1] + m[2]
				if dur, ok := promDurations[name]; ok {
					return dur
				}
				if d.variable(name) == nil {
					t.Errorf("%s: unknown variable $%s", what, name)
				}
				return "x"
			})
			checkMetricNames(t, what, expr, exported)
			n++
			fmt.Fprintf(&rules, "      - record: dashboard:check_%d\n        expr: %s\n", n, jsonString(expr))
		}
	}
	file := filepath.Join(t.TempDir(), "dashboard-exprs.yml")
	if err := os.WriteFile(file, []byte(rules.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(promtest.Promtool(t), "check", "rules", file).CombinedOutput()
	if err != nil {
		t.Fatalf("promtool check rules on the dashboard's expressions: %v\n%s\n%s", err, out, rules.String())
	}
}

// jsonString quotes s for YAML (a JSON string is a YAML string).
func jsonString(s string) string {
	b, _ := json.Marshal(s)
	return string(b)
}

// Every SQL query of the dashboard (panels and variables) runs against a
// freshly migrated schema holding a fit, a failure and an alert event, with
// Grafana's macros and variables replaced as Grafana would, and returns
// rows.
func TestDashboardSQL(t *testing.T) {
	t.Parallel()
	d := loadDashboard(t)
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	url, schema := pgtest.Schema(t)
	const model = "sonde-oxygen"
	seedHistory(t, ctx, url, schema, model)
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(context.Background())

	// The variables first, in order, each taking its query's first value,
	// as Grafana does on load.
	values := map[string]string{}
	vars := map[string]*variable{}
	for i := range d.Templating.List {
		v := &d.Templating.List[i]
		vars[v.Name] = v
		if v.Type != "query" {
			continue
		}
		q, _ := v.Query.(string)
		if q == "" {
			t.Errorf("variable %s: no SQL query", v.Name)
			continue
		}
		rows := runSQL(t, ctx, conn, "variable "+v.Name, expandSQL(t, q, schema, values, vars))
		if len(rows) == 0 {
			t.Fatalf("variable %s: no values", v.Name)
		}
		values[v.Name] = fmt.Sprint(rows[0][0])
	}
	if values["model"] != model {
		t.Errorf("$model = %q, want %q", values["model"], model)
	}
	n := 0
	for _, p := range d.allPanels() {
		for _, tg := range p.Targets {
			if tg.RawSQL == "" {
				continue
			}
			n++
			what := fmt.Sprintf("panel %q query %s", p.Title, tg.RefID)
			if rows := runSQL(t, ctx, conn, what, expandSQL(t, tg.RawSQL, schema, values, vars)); len(rows) == 0 {
				t.Errorf("%s returned no rows", what)
			}
		}
	}
	if n == 0 {
		t.Fatal("no SQL panels")
	}
}

// grafanaTime is the time range the macros are given: wide enough for the
// rows seedHistory writes now.
var grafanaFrom, grafanaTo = "'2000-01-01T00:00:00Z'", "'2100-01-01T00:00:00Z'"

var (
	timeFilter = regexp.MustCompile(`\$__timeFilter\(([^)]+)\)`)
	timeMacro  = regexp.MustCompile(`\$__time\(([^)]+)\)`)
)

// expandSQL replaces Grafana's macros and variables in q the way the
// PostgreSQL datasource does (a multi-value variable is quoted; a
// single-value one is not), and the schema curvewatch with the test's.
func expandSQL(t *testing.T, q, schema string, values map[string]string, vars map[string]*variable) string {
	t.Helper()
	q = timeFilter.ReplaceAllString(q, "$1 BETWEEN "+grafanaFrom+" AND "+grafanaTo)
	q = timeMacro.ReplaceAllString(q, `$1 AS "time"`)
	q = strings.NewReplacer("$__timeFrom()", grafanaFrom, "$__timeTo()", grafanaTo).Replace(q)
	if strings.Contains(q, "$__") {
		t.Errorf("a Grafana macro this test does not expand (add it): %s", q)
	}
	q = grafanaVar.ReplaceAllStringFunc(q, func(s string) string {
		m := grafanaVar.FindStringSubmatch(s)
		name := m[1] + m[2]
		v, ok := vars[name]
		val, set := values[name]
		if !ok || !set {
			t.Errorf("variable $%s is not defined before its use in %s", name, q)
			return s
		}
		if v.Multi || v.IncludeAll {
			return "'" + strings.ReplaceAll(val, "'", "''") + "'"
		}
		return val
	})
	replaced := regexp.MustCompile(`\bcurvewatch\.`).ReplaceAllString(q, schema+".")
	if replaced == q {
		t.Errorf("the query names no table in schema curvewatch: %s", q)
	}
	return replaced
}

// runSQL runs q and returns its rows, failing the test on an error.
func runSQL(t *testing.T, ctx context.Context, conn *pgx.Conn, what, q string) [][]any {
	t.Helper()
	rows, err := conn.Query(ctx, q)
	if err != nil {
		t.Errorf("%s: %v\n%s", what, err, q)
		return nil
	}
	var out [][]any
	for rows.Next() {
		v, err := rows.Values()
		if err != nil {
			t.Errorf("%s: %v", what, err)
			break
		}
		out = append(out, v)
	}
	if err := rows.Err(); err != nil {
		t.Errorf("%s: %v\n%s", what, err, q)
	}
	return out
}

// seedHistory migrates the schema and records, for model, a fit (with its
// curve points), a failed refit and an alert event. The fit is of invented
// rows; nothing numerical is checked.
func seedHistory(t *testing.T, ctx context.Context, url, schema, model string) {
	t.Helper()
	if err := migrations.Up(ctx, url, schema); err != nil {
		t.Fatal(err)
	}
	store, err := history.Open(ctx, url, schema)
	if err != nil {
		t.Fatal(err)
	}
	defer store.Close()
	spec, err := fit.ParseSpec([]byte("name: " + model + "\nresponse: dissolved_oxygen\nterms:\n  - curve: water_temp\n    size: 6\n  - factor: site\n"))
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(3, 9))
	n := 200
	temp, do, site := make([]float64, n), make([]float64, n), make([]string, n)
	for i := range n {
		temp[i] = 4 + 20*rng.Float64()
		do[i] = 12 - 0.25*temp[i] + 0.8*math.Sin(temp[i]/3) + 0.3*rng.NormFloat64()
		site[i] = []string{"S05", "S07"}[i%2]
	}
	doc, err := fit.Fit(ctx, spec, &fit.Table{Numeric: map[string][]float64{"water_temp": temp, "dissolved_oxygen": do},
		Text: map[string][]string{"site": site}}, fit.Options{})
	if err != nil {
		t.Fatal(err)
	}
	now := time.Now().UTC().Truncate(time.Second)
	id, err := store.RecordFit(ctx, history.FitRecord{Model: model, Slot: now.Add(-time.Hour), Started: now.Add(-time.Hour),
		Finished: now.Add(-time.Hour + time.Second), Document: doc})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := store.RecordFailure(ctx, model, now, "no rows in the window", now, now.Add(time.Second)); err != nil {
		t.Fatal(err)
	}
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(context.Background())
	if _, err := conn.Exec(ctx, `INSERT INTO `+pgx.Identifier{schema, "alert_events"}.Sanitize()+
		` (model, term, kind, state, summary, fit_id) VALUES ($1, 'water_temp', 'shift', 'firing', 'water_temp shifted', $2)`, model, id); err != nil {
		t.Fatal(err)
	}
}
