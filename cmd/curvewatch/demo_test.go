package main

import (
	"bytes"
	"context"
	"crypto/rand"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"os"
	"regexp"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/alerts/webhook"
	"github.com/curvewatch/curvewatch/daemon/config"
	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/fit/csvsource"
	"github.com/curvewatch/curvewatch/internal/pgcluster"
	"github.com/curvewatch/curvewatch/internal/pgtest"
)

// watchWriter is a syncBuffer that closes found when a line holding every
// one of want has been written: the test waits on it, not on a clock.
type watchWriter struct {
	syncBuffer
	want  []string
	once  sync.Once
	found chan struct{}
}

func newWatchWriter(want ...string) *watchWriter {
	return &watchWriter{want: want, found: make(chan struct{})}
}

func (w *watchWriter) Write(p []byte) (int, error) {
	n, err := w.syncBuffer.Write(p)
	for line := range strings.SplitSeq(string(p), "\n") {
		all := true
		for _, s := range w.want {
			all = all && strings.Contains(line, s)
		}
		if all {
			w.once.Do(func() { close(w.found) })
		}
	}
	return n, err
}

// demoSchema returns a schema name of the test's own for --schema, and
// drops it and its _river twin when the test ends, should the demo have
// left them.
func demoSchema(t *testing.T, dbURL string) string {
	t.Helper()
	var b [4]byte
	if _, err := rand.Read(b[:]); err != nil {
		t.Fatal(err)
	}
	name := "demo_" + hex.EncodeToString(b[:])
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		conn, err := pgx.Connect(ctx, dbURL)
		if err != nil {
			t.Error(err)
			return
		}
		defer conn.Close(ctx)
		if _, err := conn.Exec(ctx, "DROP SCHEMA IF EXISTS "+name+", "+name+"_river CASCADE"); err != nil {
			t.Error(err)
		}
	})
	return name
}

// withURL are demo dependencies whose DATABASE_URL is dbURL and that have
// no server binaries (the demo must not look for them).
func withURL(t *testing.T, dbURL string) demoDeps {
	return demoDeps{
		getenv: func(name string) string {
			if name == "DATABASE_URL" {
				return dbURL
			}
			return ""
		},
		findServer: func(context.Context) (string, error) {
			t.Error("the demo looked for server binaries although DATABASE_URL is set")
			return "", pgcluster.ErrNoServer
		},
	}
}

// demoCLI runs the demo in-process and returns its exit code.
func demoCLI(ctx context.Context, stdout, stderr io.Writer, deps demoDeps, args ...string) int {
	return exit(demo(ctx, &env{stdout: stdout, stderr: stderr}, args, deps), stderr)
}

// fastDemo are flags that make the drift fire within seconds: a simulated
// hour every 50 ms, a refit every 2 s on the latest 3 s (60 simulated
// hours), S07 fouling 6 s into the feed.
var fastDemo = []string{"--speed", "20", "--every", "2s", "--drift-after", "6s"}

// recapCount reads "LABEL N" from the recap.
func recapCount(t *testing.T, out, label string) int {
	t.Helper()
	m := regexp.MustCompile(`(?m)^  ` + label + ` +(\d+) `).FindStringSubmatch(out)
	if m == nil {
		t.Fatalf("the recap has no %q line:\n%s", label, out)
	}
	n, _ := strconv.Atoi(m[1])
	return n
}

// The whole demo against the test database: the daemon refits, compares
// with the baseline, and once S07 fouls raises a curve_shift alert for
// water_temp[site=S07] that reaches the sink. The test stops the demo as
// Ctrl-C would, as soon as the sink has printed that alert.
func TestDemoEndToEnd(t *testing.T) {
	t.Parallel()
	dbURL := pgtest.URL(t)
	schema := demoSchema(t, dbURL)
	stdout, stderr := newWatchWriter("FIRING", "water_temp[site=S07]"), &syncBuffer{}
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	code := make(chan int, 1)
	args := append([]string{"--for", "100s", "--schema", schema, "--keep"}, fastDemo...)
	go func() { code <- demoCLI(ctx, stdout, stderr, withURL(t, dbURL), args...) }()

	select {
	case <-stdout.found:
		cancel()
	case c := <-code:
		t.Fatalf("the demo ended (exit %d) before the S07 alert\nstdout:\n%s\nstderr:\n%s", c, stdout.String(), stderr.String())
	case <-time.After(110 * time.Second):
		t.Fatalf("no S07 alert within 110 s\nstdout:\n%s\nstderr:\n%s", stdout.String(), stderr.String())
	}
	select {
	case c := <-code:
		if c != exitOK {
			t.Fatalf("exit code %d after the interrupt, want 0\nstdout:\n%s\nstderr:\n%s", c, stdout.String(), stderr.String())
		}
	case <-time.After(30 * time.Second):
		t.Fatalf("the demo did not stop within 30 s of the interrupt\nstdout:\n%s", stdout.String())
	}
	out := stdout.String()
	t.Logf("demo output:\n%s", out)
	if m := regexp.MustCompile(`kept +the config folder (\S+) \(--keep\)`).FindStringSubmatch(out); m != nil {
		if err := os.RemoveAll(m[1]); err != nil {
			t.Error(err)
		}
	} else {
		t.Errorf("the output does not say where the kept config is")
	}
	for _, want := range []string{
		"dashboard    http://127.0.0.1:", "webhook      http://127.0.0.1:",
		"statistical signals for people to review, not a\ncompliance determination",
		"baseline: fit 1 of the back-filled week", "daemon ready", "stable vs fit 1",
		"S07's sonde starts to foul", "stopping: interrupted", "\nRecap\n",
		"kept         schemas " + schema,
	} {
		if !strings.Contains(out, want) {
			t.Errorf("the output lacks %q", want)
		}
	}
	// No alert fires before the sonde fouls. A false alarm needs two
	// breaching comparisons in a row; in TestDemoSettingsSeparate none of
	// 20 stable windows of this river breached.
	if foul := strings.Index(out, "starts to foul"); foul < 0 || strings.Contains(out[:foul], "FIRING") {
		t.Errorf("an alert fired before the sonde fouled")
	}
	if n := recapCount(t, out, "fits"); n < 3 {
		t.Errorf("the recap counts %d fits, want at least 3", n)
	}
	if n := recapCount(t, out, "comparisons"); n < 2 {
		t.Errorf("the recap counts %d comparisons, want at least 2", n)
	}
	if n := recapCount(t, out, "alerts"); n < 1 {
		t.Errorf("the recap counts %d alerts fired, want at least 1", n)
	}

	// The history says the same (--keep left the schemas).
	conn, err := pgx.Connect(context.Background(), dbURL)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(context.Background())
	var fits, compared, delivered, curveShift int
	err = conn.QueryRow(context.Background(), fmt.Sprintf(`
		SELECT (SELECT count(*) FROM %[1]s.fits WHERE status = 'succeeded'),
		       (SELECT count(*) FROM %[1]s.comparisons),
		       (SELECT count(*) FROM %[1]s.alert_deliveries WHERE state = 'delivered' AND receiver LIKE 'webhook:%%'),
		       (SELECT count(*) FROM %[1]s.alert_states WHERE kind = 'curve_shift' AND term = 'water_temp[site=S07]' AND state = 'firing')`,
		schema)).Scan(&fits, &compared, &delivered, &curveShift)
	if err != nil {
		t.Fatal(err)
	}
	if fits < 3 || compared < 2 || delivered < 1 || curveShift != 1 {
		t.Errorf("history: %d fits, %d comparisons, %d deliveries, S07 curve_shift firing %d; want ≥ 3, ≥ 2, ≥ 1, 1",
			fits, compared, delivered, curveShift)
	}
	if strings.Contains(stderr.String(), "level=ERROR") {
		t.Errorf("the daemon logged errors:\n%s", stderr.String())
	}
}

// Without --keep the demo drops its schemas; with --for it stops by itself.
func TestDemoDropsItsSchemas(t *testing.T) {
	t.Parallel()
	dbURL := pgtest.URL(t)
	schema := demoSchema(t, dbURL)
	var stdout, stderr syncBuffer
	args := append([]string{"--for", "3s", "--schema", schema}, fastDemo...)
	if c := demoCLI(context.Background(), &stdout, &stderr, withURL(t, dbURL), args...); c != exitOK {
		t.Fatalf("exit %d\nstdout:\n%s\nstderr:\n%s", c, stdout.String(), stderr.String())
	}
	out := stdout.String()
	for _, want := range []string{"stopping: --for 3s has passed", "\nRecap\n", "  fits         "} {
		if !strings.Contains(out, want) {
			t.Errorf("the output lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "kept") {
		t.Errorf("the demo kept something without --keep:\n%s", out)
	}
	conn, err := pgx.Connect(context.Background(), dbURL)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(context.Background())
	var n int
	if err := conn.QueryRow(context.Background(), `SELECT count(*) FROM pg_namespace WHERE nspname IN ($1, $2)`, schema, schema+"_river").Scan(&n); err != nil {
		t.Fatal(err)
	}
	if n != 0 {
		t.Errorf("%d of the demo's schemas are left", n)
	}
}

// A schema that exists already is not the demo's to drop: it refuses.
func TestDemoRefusesExistingSchema(t *testing.T) {
	t.Parallel()
	dbURL := pgtest.URL(t)
	schema := demoSchema(t, dbURL)
	conn, err := pgx.Connect(context.Background(), dbURL)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(context.Background())
	if _, err := conn.Exec(context.Background(), "CREATE SCHEMA "+schema+"_river; CREATE TABLE "+schema+"_river.precious (x int)"); err != nil {
		t.Fatal(err)
	}
	var stdout, stderr syncBuffer
	if c := demoCLI(context.Background(), &stdout, &stderr, withURL(t, dbURL), "--schema", schema, "--for", "1s"); c != exitFailed {
		t.Fatalf("exit %d, want 1\nstderr:\n%s", c, stderr.String())
	}
	if want := "schema " + schema + "_river already exists"; !strings.Contains(stderr.String(), want) {
		t.Errorf("stderr lacks %q:\n%s", want, stderr.String())
	}
	var n int
	if err := conn.QueryRow(context.Background(), "SELECT count(*) FROM "+schema+"_river.precious").Scan(&n); err != nil {
		t.Errorf("the existing schema was touched: %v", err)
	}
}

// With neither DATABASE_URL nor server binaries, the demo says exactly how
// to get PostgreSQL, and exits 1.
func TestDemoWithoutPostgres(t *testing.T) {
	t.Parallel()
	deps := demoDeps{
		getenv: func(string) string { return "" },
		findServer: func(context.Context) (string, error) {
			return "", fmt.Errorf("%w found: not in `pg_config --bindir`, nor in /nowhere", pgcluster.ErrNoServer)
		},
	}
	var stdout, stderr bytes.Buffer
	if c := demoCLI(context.Background(), &stdout, &stderr, deps); c != exitFailed {
		t.Fatalf("exit %d, want 1\nstderr:\n%s", c, stderr.String())
	}
	for _, want := range []string{"no PostgreSQL", "DATABASE_URL is not set", "apt-get install -y postgresql",
		"DATABASE_URL=postgres://user@host:5432/db curvewatch demo"} {
		if !strings.Contains(stderr.String(), want) {
			t.Errorf("stderr lacks %q:\n%s", want, stderr.String())
		}
	}
}

// Without DATABASE_URL the demo runs on a throwaway cluster of its own,
// which is gone when it ends.
func TestDemoThrowawayCluster(t *testing.T) {
	t.Parallel()
	if _, err := pgcluster.FindServer(context.Background()); err != nil {
		if pgtest.URL(t) != "" {
			t.Skipf("no server binaries to start a cluster with (the other demo tests use the test server): %v", err)
		}
	}
	deps := demoDeps{getenv: func(string) string { return "" }, findServer: pgcluster.FindServer}
	var stdout, stderr syncBuffer
	args := append([]string{"--for", "3s"}, fastDemo...)
	if c := demoCLI(context.Background(), &stdout, &stderr, deps, args...); c != exitOK {
		t.Fatalf("exit %d\nstdout:\n%s\nstderr:\n%s", c, stdout.String(), stderr.String())
	}
	out := stdout.String()
	m := regexp.MustCompile(`a throwaway cluster on 127\.0\.0\.1:(\d+) \(removed on exit\)`).FindStringSubmatch(out)
	if m == nil || !strings.Contains(out, "\nRecap\n") {
		t.Fatalf("the output does not name the cluster or lacks the recap:\n%s", out)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if conn, err := pgx.Connect(ctx, "postgres://postgres@127.0.0.1:"+m[1]+"/postgres?sslmode=disable"); err == nil {
		conn.Close(ctx)
		t.Errorf("the throwaway cluster still answers on port %s", m[1])
	}
}

func TestDemoUsageErrors(t *testing.T) {
	t.Parallel()
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"--every", "1500ms"}, "--every must be whole seconds"},
		{[]string{"--every", "0s"}, "--every must be whole seconds"},
		{[]string{"--speed", "0"}, "--speed must be from 1 to 3600"},
		{[]string{"--for", "-1s"}, "--for must be 0"},
		{[]string{"--drift-after", "-5s"}, "--drift-after must be 0"},
		{[]string{"--schema", "Bad-Name"}, `--schema "Bad-Name" is not a usable schema name`},
		{[]string{"--listen", "nowhere"}, `--listen "nowhere" is not host:port`},
		{[]string{"--bogus"}, "unknown flag --bogus"},
	}
	for _, c := range cases {
		r := cli(t, append([]string{"demo"}, c.args...)...)
		r.wantCode(t, exitUsage)
		r.wantStderr(t, c.want, "curvewatch demo --help")
	}
}

// The sink prints and counts each signed delivery once, and refuses one
// whose signature does not verify.
func TestDemoSinkVerifies(t *testing.T) {
	t.Parallel()
	var out bytes.Buffer
	clock := time.Date(2025, 7, 14, 12, 0, 0, 0, time.UTC)
	o := &demoOut{w: &out, now: func() time.Time { return clock }}
	s := &hookSink{secret: "sink-secret", out: o, log: slog.New(slog.DiscardHandler), now: func() time.Time { return clock }, seen: map[string]bool{}}
	alert := alerts.Alert{Key: alerts.Key{Model: "river-oxygen", Term: "water_temp[site=S07]", Kind: alerts.KindCurveShift},
		State: alerts.StateFiring, Summary: "curve water_temp[site=S07] shifted", StartsAt: clock, ChangedAt: clock}
	body, err := json.Marshal(webhook.NewBody(alert))
	if err != nil {
		t.Fatal(err)
	}
	post := func(secret string) int {
		req := httptest.NewRequest(http.MethodPost, "/hook", bytes.NewReader(body))
		req.Header.Set(webhook.HeaderTimestamp, strconv.FormatInt(clock.Unix(), 10))
		req.Header.Set(webhook.HeaderSignature, webhook.Sign(secret, clock, body))
		rec := httptest.NewRecorder()
		s.receive(rec, req)
		return rec.Code
	}
	if c := post("sink-secret"); c != http.StatusNoContent {
		t.Fatalf("a signed delivery got %d", c)
	}
	if c := post("sink-secret"); c != http.StatusNoContent {
		t.Fatalf("a repeated delivery got %d", c)
	}
	if c := post("another-secret"); c != http.StatusUnauthorized {
		t.Fatalf("a delivery signed with another secret got %d, want 401", c)
	}
	if want := "12:00:00  FIRING    river-oxygen  water_temp[site=S07]  curve water_temp[site=S07] shifted\n"; out.String() != want {
		t.Errorf("the sink printed %q, want %q", out.String(), want)
	}
	if f, r, bad := s.counts(); f != 1 || r != 0 || bad != 1 {
		t.Errorf("counts %d fired, %d resolved, %d refused; want 1, 0, 1", f, r, bad)
	}
}

func TestDemoWindowAndAddresses(t *testing.T) {
	t.Parallel()
	for _, c := range []struct {
		every time.Duration
		speed int
		want  time.Duration
	}{
		{5 * time.Second, 5, 10 * time.Second}, // 50 simulated hours at 5 per second
		{2 * time.Second, 20, 3 * time.Second}, // 2.5 s, rounded up to whole seconds
		{30 * time.Second, 5, 30 * time.Second},
		{time.Second, 3600, time.Second},
	} {
		if got := demoWindow(c.every, c.speed); got != c.want {
			t.Errorf("demoWindow(%s, %d) = %s, want %s", c.every, c.speed, got, c.want)
		}
	}
	for addr, want := range map[string]string{
		"127.0.0.1:9464": "http://127.0.0.1:9464/",
		"0.0.0.0:9464":   "http://127.0.0.1:9464/",
		":9464":          "http://127.0.0.1:9464/",
		"[::]:9464":      "http://127.0.0.1:9464/",
	} {
		if got := dashboardURL(addr); got != want {
			t.Errorf("dashboardURL(%q) = %q, want %q", addr, got, want)
		}
	}
	got, err := resolveListen("127.0.0.1:0")
	if err != nil || strings.HasSuffix(got, ":0") {
		t.Errorf("resolveListen(127.0.0.1:0) = %q, %v", got, err)
	}
}

// The demo's own config parses, and its model is what the demo promises.
func TestDemoConfigParses(t *testing.T) {
	t.Parallel()
	text := demoConfig(demoConfigValues{schema: "curvewatch_demo", table: "curvewatch_demo_river.sonde_readings",
		listen: "127.0.0.1:9464", hook: "http://127.0.0.1:9999/hook", every: 5 * time.Second, window: 10 * time.Second})
	cfg, err := config.Parse(strings.NewReader(text), config.ParseOptions{Getenv: func(name string) string {
		return map[string]string{"DATABASE_URL": "postgres://demo@127.0.0.1:5432/demo", "DEMO_HOOK_SECRET": "s3"}[name]
	}})
	if err != nil {
		t.Fatalf("%v\n%s", err, text)
	}
	m, ok := cfg.Model(demoModel)
	if !ok {
		t.Fatal("no demo model")
	}
	if m.Schedule != "@every 5s" || m.Source.Window != 10*time.Second || m.Source.Time != "received_at" ||
		m.Watch.Against != config.AgainstBaseline || m.Watch.ConfirmRuns != 2 {
		t.Errorf("model %+v", m)
	}
	if len(cfg.Alerting.Webhooks) != 1 || cfg.Alerting.Webhooks[0].Secret.Reveal() != "s3" {
		t.Errorf("webhooks %+v", cfg.Alerting.Webhooks)
	}
	if cfg.PublicURL != "http://127.0.0.1:9464" {
		t.Errorf("public_url %q", cfg.PublicURL)
	}
}

// The demo's settings separate its river's stable windows from its fouled
// ones, fitted and compared as the daemon does (fit.Compare plus the
// predictive check) with the demo's spec and watch section: a simulation
// with known truth. Stable windows must not breach (a false alarm needs two
// breaches in a row, and the test allows one in twenty windows); every
// fully fouled window must, with S07's temperature curve shifted.
func TestDemoSettingsSeparate(t *testing.T) {
	if testing.Short() {
		t.Skip("a simulation; skipped with -short")
	}
	t.Parallel()
	ctx := context.Background()
	cfg, err := config.Parse(strings.NewReader(demoConfig(demoConfigValues{schema: "s", table: "s_river.t",
		listen: "127.0.0.1:9464", hook: "http://127.0.0.1:9999/hook", every: 5 * time.Second, window: 10 * time.Second})),
		config.ParseOptions{Getenv: func(string) string { return "postgres://demo@127.0.0.1/demo" }})
	if err != nil {
		t.Fatal(err)
	}
	m, _ := cfg.Model(demoModel)
	tol := m.Watch.Tolerance()
	rv := newRiver(7, demoSimStart)
	fitHours := func(from time.Time, hours int) (*fit.Document, fit.Source) {
		t.Helper()
		var b strings.Builder
		b.WriteString("site,water_temp,flow,hour,dissolved_oxygen\n")
		for i := range hours {
			for _, r := range rv.hour(from.Add(time.Duration(i) * time.Hour)) {
				fmt.Fprintf(&b, "%s,%.4f,%.4f,%.4f,%.4f\n", r.site, r.temp, r.flow, r.hour, r.oxygen)
			}
		}
		text := b.String()
		src, err := csvsource.New("window.csv", func() (io.ReadCloser, error) { return io.NopCloser(strings.NewReader(text)), nil })
		if err != nil {
			t.Fatal(err)
		}
		doc, err := fit.Fit(ctx, m.Spec, src, fit.Options{})
		if err != nil {
			t.Fatal(err)
		}
		return doc, src
	}
	span := int(demoWindowSpan / time.Hour)
	ref, _ := fitHours(demoSimStart, int(demoBaselineSpan/time.Hour))
	now := demoSimStart.Add(demoBaselineSpan)
	breached := func(cand *fit.Document, src fit.Source) (bool, *fit.ShiftReport) {
		rep, err := fit.Compare(ref, cand, tol)
		if err != nil {
			t.Fatal(err)
		}
		deg, err := fit.PredictiveDegradation(ctx, ref, cand, src, rep.Tolerance, false)
		if err != nil {
			t.Fatal(err)
		}
		return rep.Breach || deg.Breach, rep
	}
	falseAlarms := 0
	for range 20 {
		cand, src := fitHours(now, span)
		now = now.Add(time.Duration(span) * time.Hour)
		if b, _ := breached(cand, src); b {
			falseAlarms++
		}
	}
	if falseAlarms > 1 {
		t.Errorf("%d of 20 stable windows breached; the demo would raise false alarms", falseAlarms)
	}
	rv.foulAt = now.Add(-foulRamp) // at full strength from the first fouled window on
	for i := range 5 {
		cand, src := fitHours(now, span)
		now = now.Add(time.Duration(span) * time.Hour)
		b, rep := breached(cand, src)
		shifted := false
		for _, term := range rep.Terms {
			shifted = shifted || term.Name == "water_temp[site=S07]" && term.Verdict == fit.VerdictShifted
		}
		if !b || !shifted {
			t.Errorf("fouled window %d: breach %v, S07's curve shifted %v", i, b, shifted)
		}
	}
}
