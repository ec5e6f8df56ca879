package daemon

import (
	"bytes"
	"context"
	"fmt"
	"log/slog"
	"math"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"slices"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/internal/pgtest"
	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/curvewatch/curvewatch/migrations"
)

// fleetMetricNames are the gauges the fleet collector exports.
var fleetMetricNames = []string{metricRowsFitted, metricLastSuccess, metricDevianceExplained, metricShiftScore,
	metricShiftSize, metricTermEDF, metricPredictiveRatio, metricAlertsFiring}

// metricsFixture is a migrated schema holding the history of four models:
//   - alpha: two succeeded fits and a comparison of them with a predictive
//     deviance ratio, two firing alerts and a pending one;
//   - beta: two succeeded fits, a comparison without a ratio, then a failed
//     refit;
//   - gamma: a succeeded fit, but not in the config (not in names);
//   - delta (in names): no history at all.
//
// The fits are of invented rows; no numerical claim rests on them: the
// figures expected are the ones stored.
type metricsFixture struct {
	url, schema string
	store       *history.Store
	names       []string
	fits        map[string]*history.StoredFit // latest success per model
	finished    map[string]time.Time
}

var metricsT0 = time.Date(2025, 6, 1, 3, 0, 0, 0, time.UTC)

var (
	metricsDocsOnce sync.Once
	metricsDocs     []*fit.Document
	metricsDocsErr  error
)

// metricsDocs returns n fits of a curve and a line on invented rows (fixed
// seeds, different rows per fit).
func metricsTestDocs(t *testing.T) []*fit.Document {
	t.Helper()
	metricsDocsOnce.Do(func() {
		spec, err := fit.ParseSpec([]byte("name: metrics-test\nresponse: y\nterms:\n  - curve: x\n    size: 6\n  - linear: z\n"))
		if err != nil {
			metricsDocsErr = err
			return
		}
		for i := range 3 {
			rng := rand.New(rand.NewPCG(uint64(21+i), 5))
			n := 200 + 10*i
			x, z, y := make([]float64, n), make([]float64, n), make([]float64, n)
			for r := range n {
				x[r], z[r] = 10*rng.Float64(), rng.Float64()
				y[r] = math.Sin(x[r]/2) + z[r] + 0.3*rng.NormFloat64()
			}
			doc, err := fit.Fit(context.Background(), spec, &fit.Table{Numeric: map[string][]float64{"x": x, "z": z, "y": y}}, fit.Options{})
			if err != nil {
				metricsDocsErr = err
				return
			}
			metricsDocs = append(metricsDocs, doc)
		}
	})
	if metricsDocsErr != nil {
		t.Fatal(metricsDocsErr)
	}
	return metricsDocs
}

func newMetricsFixture(t *testing.T) *metricsFixture {
	t.Helper()
	ctx := context.Background()
	url, schema := pgtest.Schema(t)
	if err := migrations.Up(ctx, url, schema); err != nil {
		t.Fatal(err)
	}
	f := &metricsFixture{url: url, schema: schema, names: []string{"alpha", "beta", "delta"},
		fits: map[string]*history.StoredFit{}, finished: map[string]time.Time{}}
	f.store = f.open(t)
	docs := metricsTestDocs(t)

	record := func(model string, hour int, doc *fit.Document) int64 {
		t.Helper()
		started := metricsT0.Add(time.Duration(hour) * time.Hour)
		finished := started.Add(1500 * time.Millisecond)
		id, err := f.store.RecordFit(ctx, history.FitRecord{Model: model, Slot: started, Started: started, Finished: finished, Document: doc})
		if err != nil {
			t.Fatal(err)
		}
		sf, err := f.store.Fit(ctx, id)
		if err != nil {
			t.Fatal(err)
		}
		f.fits[model], f.finished[model] = sf, finished
		return id
	}
	compare := func(model string, ref, cand int64, ratio *float64, terms ...fit.TermShift) {
		t.Helper()
		rep := &fit.ShiftReport{Format: fit.CompareFormat, Model: model, Terms: terms}
		if ratio != nil {
			rep.Degradation = &fit.Degradation{Rows: 100, Ratio: *ratio}
		}
		if _, err := f.store.RecordComparison(ctx, model, ref, cand, rep); err != nil {
			t.Fatal(err)
		}
	}
	ratio := 1.25
	a1 := record("alpha", 0, docs[0])
	a2 := record("alpha", 1, docs[1])
	compare("alpha", a1, a2, &ratio,
		fit.TermShift{Name: "x", Kind: fit.TermKind("curve"), Verdict: "shifted", Score: 1.5, Size: 0.4, PAdjusted: 0.01},
		fit.TermShift{Name: "z", Kind: fit.TermKind("linear"), Verdict: "stable", Score: 0.25, Size: 0.125, PAdjusted: 0.9})
	b1 := record("beta", 0, docs[1])
	b2 := record("beta", 1, docs[2])
	compare("beta", b1, b2, nil,
		fit.TermShift{Name: "x", Kind: fit.TermKind("curve"), Verdict: "stable", Score: 0.5, Size: 0.0625, PAdjusted: 0.7})
	if _, err := f.store.RecordFailure(ctx, "beta", metricsT0.Add(2*time.Hour), "no rows in the window",
		metricsT0.Add(2*time.Hour), metricsT0.Add(2*time.Hour+time.Second)); err != nil {
		t.Fatal(err)
	}
	record("gamma", 0, docs[2])
	f.exec(t, `INSERT INTO alert_states (model, term, kind, state, since) VALUES
		('alpha', 'x', 'shift', 'firing', now()), ('alpha', '', 'degradation', 'firing', now()),
		('alpha', 'z', 'shift', 'pending', now()), ('gamma', 'x', 'shift', 'firing', now())`)
	return f
}

// open opens another store on the fixture's schema (a second replica, or
// a restarted daemon).
func (f *metricsFixture) open(t *testing.T) *history.Store {
	t.Helper()
	s, err := history.Open(context.Background(), f.url, f.schema)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(s.Close)
	return s
}

func (f *metricsFixture) exec(t *testing.T, sql string, args ...any) {
	t.Helper()
	url, err := pgtest.WithSearchPath(f.url, f.schema)
	if err != nil {
		t.Fatal(err)
	}
	conn, err := pgx.Connect(context.Background(), url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(context.Background())
	if _, err := conn.Exec(context.Background(), sql, args...); err != nil {
		t.Fatalf("%s: %v", sql, err)
	}
}

func g(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// expected is the exposition the fixture's fleet should produce.
func (f *metricsFixture) expected() string {
	var b strings.Builder
	line := func(name, labels string, v float64) { fmt.Fprintf(&b, "%s{%s} %s\n", name, labels, g(v)) }
	header := func(name string) {
		fmt.Fprintf(&b, "# HELP %s %s\n# TYPE %s gauge\n", name, helpOf(name), name)
	}
	header(metricAlertsFiring)
	line(metricAlertsFiring, `model="alpha"`, 2)
	line(metricAlertsFiring, `model="beta"`, 0)
	line(metricAlertsFiring, `model="delta"`, 0)
	header(metricDevianceExplained)
	for _, m := range []string{"alpha", "beta"} {
		line(metricDevianceExplained, `model="`+m+`"`, f.fits[m].DevianceExplained)
	}
	header(metricLastSuccess)
	for _, m := range []string{"alpha", "beta"} {
		// source: the Finished time the fixture recorded.
		line(metricLastSuccess, `model="`+m+`"`, float64(f.finished[m].UnixMilli())/1e3)
	}
	header(metricPredictiveRatio)
	line(metricPredictiveRatio, `model="alpha"`, 1.25) // beta's is NULL: omitted
	header(metricRowsFitted)
	for _, m := range []string{"alpha", "beta"} {
		line(metricRowsFitted, `model="`+m+`"`, float64(f.fits[m].RowsUsed))
	}
	header(metricTermEDF)
	for _, m := range []string{"alpha", "beta"} {
		for _, term := range f.fits[m].Document.Terms {
			line(metricTermEDF, fmt.Sprintf(`model=%q,term=%q`, m, term.Name), term.EDF)
		}
	}
	header(metricShiftScore)
	line(metricShiftScore, `model="alpha",term="x"`, 1.5)
	line(metricShiftScore, `model="alpha",term="z"`, 0.25)
	line(metricShiftScore, `model="beta",term="x"`, 0.5)
	header(metricShiftSize)
	line(metricShiftSize, `model="alpha",term="x"`, 0.4)
	line(metricShiftSize, `model="alpha",term="z"`, 0.125)
	line(metricShiftSize, `model="beta",term="x"`, 0.0625)
	return b.String()
}

// helpOf returns a fleet gauge's help text, from its descriptor.
func helpOf(name string) string {
	c := newFleetCollector(nil, nil)
	ch := make(chan *prometheus.Desc, 16)
	c.Describe(ch)
	close(ch)
	for d := range ch {
		s := d.String()
		if strings.Contains(s, `fqName: "`+name+`"`) {
			i := strings.Index(s, `help: "`) + len(`help: "`)
			rest := s[i:]
			for _, end := range []string{`", unit: `, `", constLabels`} {
				if j := strings.Index(rest, end); j >= 0 {
					rest = rest[:j]
				}
			}
			return rest
		}
	}
	panic("no metric " + name)
}

// The fleet gauges are the history's figures: the configured models only
// (gamma is not configured), the latest success's rows, time, deviance
// explained and term EDFs, the latest comparison's terms and ratio (beta's
// ratio is NULL: no series, not NaN), and the firing alerts (zero for a
// model with none, delta with no history at all included).
func TestMetricsFleet(t *testing.T) {
	t.Parallel()
	f := newMetricsFixture(t)
	m := newMetrics(prometheus.NewRegistry(), f.store, f.names, nil)
	if err := testutil.CollectAndCompare(m.fleet, strings.NewReader(f.expected()), fleetMetricNames...); err != nil {
		t.Error(err)
	}
	if len(f.fits["alpha"].Document.Terms) == 0 {
		t.Error("the fixture's fits have no terms: no term_edf series tested")
	}
}

// A restarted daemon (a new metrics over the same database, on another
// connection) and a second replica report the same figures, the last
// success time included: nothing is kept in the process.
func TestMetricsSameAfterRestart(t *testing.T) {
	t.Parallel()
	f := newMetricsFixture(t)
	first := newMetrics(prometheus.NewRegistry(), f.store, f.names, nil)
	firstOut := scrape(t, first)
	restarted := newMetrics(prometheus.NewRegistry(), f.open(t), f.names, nil)
	if got := scrape(t, restarted); fleetLines(got) != fleetLines(firstOut) {
		t.Errorf("after a restart:\n%s\nbefore:\n%s", fleetLines(got), fleetLines(firstOut))
	}
	want := fmt.Sprintf(`%s{model="alpha"} %s`, metricLastSuccess, g(float64(f.finished["alpha"].UnixMilli())/1e3))
	if !strings.Contains(firstOut, want) {
		t.Errorf("no %q in\n%s", want, firstOut)
	}
}

// scrape fetches the metrics handler's text exposition.
func scrape(t *testing.T, m *metrics) string {
	t.Helper()
	rec := httptest.NewRecorder()
	m.handler().ServeHTTP(rec, httptest.NewRequest(http.MethodGet, "/metrics", nil))
	if rec.Code != http.StatusOK {
		t.Fatalf("/metrics: %d %s", rec.Code, rec.Body)
	}
	return rec.Body.String()
}

// fleetLines keeps the fleet gauges' sample lines of an exposition.
func fleetLines(exposition string) string {
	var out []string
	for l := range strings.Lines(exposition) {
		for _, name := range fleetMetricNames {
			if strings.HasPrefix(l, name+"{") {
				out = append(out, l)
			}
		}
	}
	slices.Sort(out)
	return strings.Join(out, "")
}

// Before the database is attached only the counters, the histogram and the
// Go and process collectors are exported; once attached, the fleet too.
func TestMetricsBeforeConnected(t *testing.T) {
	t.Parallel()
	f := newMetricsFixture(t)
	reg := prometheus.NewRegistry()
	m := newMetrics(reg, nil, f.names, nil)
	families := func() []string {
		mfs, err := reg.Gather()
		if err != nil {
			t.Fatal(err)
		}
		var names []string
		for _, mf := range mfs {
			if strings.HasPrefix(mf.GetName(), "curvewatch_") {
				names = append(names, mf.GetName())
			}
		}
		return names
	}
	if got, want := families(), []string{metricDeliveries, metricRefitDuration, metricRefits}; !slices.Equal(got, want) {
		t.Errorf("before the database: %v, want %v", got, want)
	}
	out := scrape(t, m)
	for _, s := range []string{"go_goroutines", "process_start_time_seconds", `curvewatch_refits_total{model="delta",outcome="failed"} 0`} {
		if !strings.Contains(out, s) {
			t.Errorf("no %s in /metrics", s)
		}
	}
	m.setFleet(f.store)
	got := families()
	for _, name := range fleetMetricNames {
		if !slices.Contains(got, name) {
			t.Errorf("once attached, no %s (have %v)", name, got)
		}
	}
	m.setFleet(nil)
	if got := families(); len(got) != 3 {
		t.Errorf("after detaching: %v", got)
	}
}

// The counters count the configured models' refits by outcome, and
// deliveries by outcome only (the receiver is no label); the names lint
// clean.
func TestMetricsCountersAndLint(t *testing.T) {
	t.Parallel()
	f := newMetricsFixture(t)
	reg := prometheus.NewRegistry()
	var logs bytes.Buffer
	m := newMetrics(reg, f.store, f.names, slog.New(slog.NewTextHandler(&logs, nil)))
	m.observeRefit("alpha", "succeeded", 1200*time.Millisecond)
	m.observeRefit("alpha", "failed", 40*time.Millisecond)
	m.observeRefit("alpha", "failed", 45*time.Minute)
	m.observeRefit("gamma", "succeeded", time.Second) // not configured
	m.observeRefit("alpha", "exploded", time.Second)  // no such outcome
	m.observeDelivery("webhook:https://example.org/hook", DeliveryDelivered)
	m.observeDelivery("alertmanager:http://127.0.0.1:9093", DeliveryRetried)
	m.observeDelivery("alertmanager:http://127.0.0.1:9093", DeliveryDelivered)

	const want = `
# HELP curvewatch_alert_deliveries_total Attempts at delivering an alert to a receiver, by outcome (delivered, retried or abandoned).
# TYPE curvewatch_alert_deliveries_total counter
curvewatch_alert_deliveries_total{outcome="abandoned"} 0
curvewatch_alert_deliveries_total{outcome="delivered"} 2
curvewatch_alert_deliveries_total{outcome="retried"} 1
# HELP curvewatch_refits_total Refits this process ran, by model and outcome (succeeded, unconverged or failed).
# TYPE curvewatch_refits_total counter
curvewatch_refits_total{model="alpha",outcome="failed"} 2
curvewatch_refits_total{model="alpha",outcome="succeeded"} 1
curvewatch_refits_total{model="alpha",outcome="unconverged"} 0
curvewatch_refits_total{model="beta",outcome="failed"} 0
curvewatch_refits_total{model="beta",outcome="succeeded"} 0
curvewatch_refits_total{model="beta",outcome="unconverged"} 0
curvewatch_refits_total{model="delta",outcome="failed"} 0
curvewatch_refits_total{model="delta",outcome="succeeded"} 0
curvewatch_refits_total{model="delta",outcome="unconverged"} 0
`
	if err := testutil.GatherAndCompare(reg, strings.NewReader(want), metricRefits, metricDeliveries); err != nil {
		t.Error(err)
	}
	if n := testutil.CollectAndCount(m.duration, metricRefitDuration); n != 3 {
		t.Errorf("%d duration series, want one per configured model (3)", n)
	}
	out := scrape(t, m)
	for _, s := range []string{
		`curvewatch_refit_duration_seconds_bucket{model="alpha",le="0.05"} 1`,
		`curvewatch_refit_duration_seconds_bucket{model="alpha",le="1800"} 2`,
		`curvewatch_refit_duration_seconds_count{model="alpha"} 3`,
	} {
		if !strings.Contains(out, s) {
			t.Errorf("no %s in /metrics", s)
		}
	}
	if strings.Contains(out, "gamma") || strings.Contains(out, "example.org") {
		t.Errorf("an unconfigured model or a receiver shows in /metrics:\n%s", out)
	}
	if !strings.Contains(logs.String(), "exploded") {
		t.Errorf("the unknown outcome was not logged: %s", logs.String())
	}

	problems, err := testutil.GatherAndLint(reg)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range problems {
		if strings.HasPrefix(p.Metric, "curvewatch_") {
			t.Errorf("lint: %s: %s", p.Metric, p.Text)
		}
	}
	// Every metric DESIGN.md names is exported, with only the labels
	// model, term and outcome.
	mfs, err := reg.Gather()
	if err != nil {
		t.Fatal(err)
	}
	seen := map[string]bool{}
	for _, mf := range mfs {
		seen[mf.GetName()] = true
		if !strings.HasPrefix(mf.GetName(), "curvewatch_") {
			continue
		}
		for _, metric := range mf.GetMetric() {
			for _, l := range metric.GetLabel() {
				if !slices.Contains([]string{"model", "term", "outcome"}, l.GetName()) {
					t.Errorf("%s has label %q", mf.GetName(), l.GetName())
				}
			}
		}
	}
	for _, name := range append(fleetMetricNames, metricRefits, metricRefitDuration, metricDeliveries) {
		if !seen[name] {
			t.Errorf("%s is not exported", name)
		}
	}
}

// countingFleet counts the reads that reach the real store.
type countingFleet struct {
	fleetReader
	fleets, edfs atomic.Int64
}

func (c *countingFleet) Fleet(ctx context.Context, names []string) ([]history.ModelStatus, error) {
	c.fleets.Add(1)
	return c.fleetReader.Fleet(ctx, names)
}

func (c *countingFleet) TermEDFs(ctx context.Context, ids []int64) (map[int64]map[string]float64, error) {
	c.edfs.Add(1)
	return c.fleetReader.TermEDFs(ctx, ids)
}

// syncBuffer is a bytes.Buffer safe for the collector's log.
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

// Scrapes in a row cost one read; term EDFs are read once per fit; new
// data shows after the snapshot ages (a term no longer compared loses its
// series); with the database gone the last good figures are served and the
// outage is logged once.
func TestMetricsCacheAndOutage(t *testing.T) {
	t.Parallel()
	f := newMetricsFixture(t)
	store := f.open(t)
	reader := &countingFleet{fleetReader: store}
	var logs syncBuffer
	m := newMetrics(prometheus.NewRegistry(), reader, f.names, slog.New(slog.NewTextHandler(&logs, nil)))
	var clock atomic.Int64
	clock.Store(metricsT0.UnixNano())
	m.fleet.now = func() time.Time { return time.Unix(0, clock.Load()) }
	tick := func() { clock.Add(int64(m.fleet.maxAge + time.Millisecond)) }

	before := scrape(t, m)
	for range 3 {
		scrape(t, m)
	}
	if n := reader.fleets.Load(); n != 1 {
		t.Errorf("4 scrapes within the snapshot's age read the fleet %d times, want 1", n)
	}
	tick()
	scrape(t, m)
	if n, e := reader.fleets.Load(), reader.edfs.Load(); n != 2 || e != 1 {
		t.Errorf("after the snapshot aged: %d fleet reads (want 2), %d EDF reads (want 1: fits never change)", n, e)
	}

	// A new comparison for alpha that compares x only: z's shift series go.
	ctx := context.Background()
	ref, cand := f.fits["alpha"].ID-1, f.fits["alpha"].ID
	if _, err := f.store.RecordComparison(ctx, "alpha", ref, cand, &fit.ShiftReport{Format: fit.CompareFormat, Model: "alpha",
		Terms: []fit.TermShift{{Name: "x", Kind: "curve", Verdict: "stable", Score: 0.75, Size: 0.1, PAdjusted: 0.5}}}); err != nil {
		t.Fatal(err)
	}
	if out := scrape(t, m); fleetLines(out) != fleetLines(before) {
		t.Errorf("the snapshot changed before it aged")
	}
	tick()
	after := scrape(t, m)
	for _, s := range []string{`curvewatch_term_shift_score{model="alpha",term="x"} 0.75`} {
		if !strings.Contains(after, s) {
			t.Errorf("no %s after the new comparison", s)
		}
	}
	for _, s := range []string{`curvewatch_term_shift_score{model="alpha",term="z"}`, `curvewatch_term_shift_size{model="alpha",term="z"}`,
		`curvewatch_predictive_deviance_ratio{model="alpha"}`} {
		if strings.Contains(after, s) {
			t.Errorf("%s is still exported after a comparison without it", s)
		}
	}

	// The database goes away (the store's connections close): the last
	// good figures are served, and the outage logged once.
	store.Close()
	for range 3 {
		tick()
		if out := scrape(t, m); fleetLines(out) != fleetLines(after) {
			t.Errorf("with the database gone:\n%s\nwant the last good:\n%s", fleetLines(out), fleetLines(after))
		}
	}
	if n := strings.Count(logs.String(), "cannot read the fleet"); n != 1 {
		t.Errorf("the outage was logged %d times, want once:\n%s", n, logs.String())
	}
	m.setFleet(f.store)
	tick()
	scrape(t, m)
	if !strings.Contains(logs.String(), "readable again") {
		t.Errorf("the recovery was not logged:\n%s", logs.String())
	}
}
