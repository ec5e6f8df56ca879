package web_test

import (
	"context"
	"encoding/json"
	"io"
	"math"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/daemon/web"
	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/internal/pgtest"
	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/curvewatch/curvewatch/migrations"
)

func TestMain(m *testing.M) { pgtest.Main(m) }

// The scenario (invented, for these tests only; no numerical claim rests
// on it): a river dissolved-oxygen sonde read against water temperature
// and flow at three sites. From the fourth run on, the sonde's membrane
// fouls and reads low in warm water: the water_temp curve sags above
// 16 °C, more with every run, and site S07c's offset drifts. The model is
// testdata/sonde/model.yaml.

// drifts is the fouling at each run: run 0 is the baseline.
var drifts = []float64{0, 0, 0.1, 0.3, 0.6, 0.9, 1.2, 1.5}

const sondeRows = 700

type scenario struct {
	spec *fit.Spec
	docs []*fit.Document
	// reports[i] compares docs[i] with docs[0] (nil for i = 0).
	reports []*fit.ShiftReport
}

var (
	scenOnce sync.Once
	scen     scenario
	scenErr  error
)

// sonde returns the scenario's fits (made once per test binary).
func sonde(t testing.TB) *scenario {
	t.Helper()
	scenOnce.Do(func() {
		body, err := os.ReadFile(filepath.Join("testdata", "sonde", "model.yaml"))
		if err != nil {
			scenErr = err
			return
		}
		scen.spec, scenErr = fit.ParseSpec(body)
		if scenErr != nil {
			return
		}
		scen.docs = make([]*fit.Document, len(drifts))
		scen.reports = make([]*fit.ShiftReport, len(drifts))
		for i, d := range drifts {
			scen.docs[i], scenErr = fit.Fit(context.Background(), scen.spec, sondeTable(uint64(100+i), d), fit.Options{})
			if scenErr != nil {
				return
			}
			if i > 0 {
				scen.reports[i], scenErr = fit.Compare(scen.docs[0], scen.docs[i], fit.DefaultTolerance())
				if scenErr != nil {
					return
				}
			}
		}
	})
	if scenErr != nil {
		t.Fatalf("the sonde scenario: %v", scenErr)
	}
	return &scen
}

// sondeTable simulates one run's rows with the given fouling.
func sondeTable(seed uint64, fouling float64) *fit.Table {
	rng := rand.New(rand.NewPCG(seed, 2718))
	n := sondeRows
	temp, flow, cond, do := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
	site := make([]string, n)
	offsets := map[string]float64{"S07a": 0, "S07b": -0.35, "S07c": 0.25}
	names := []string{"S07a", "S07b", "S07c"}
	for r := range n {
		site[r] = names[r%3]
		temp[r] = 2 + 26*rng.Float64()
		flow[r] = math.Exp(math.Log(1.5) + (math.Log(60)-math.Log(1.5))*rng.Float64())
		cond[r] = 220 + 380*rng.Float64()
		lf := math.Log(flow[r])
		y := 14.4 - 0.39*temp[r] + 0.0052*temp[r]*temp[r] + 0.45*lf - 0.0012*(cond[r]-400) +
			0.02*(temp[r]-15)*(lf-2.5) + offsets[site[r]]
		if temp[r] > 16 {
			y -= fouling * (temp[r] - 16) / 12
		}
		if site[r] == "S07c" {
			y += 0.3 * fouling
		}
		do[r] = y + 0.3*rng.NormFloat64()
	}
	return &fit.Table{
		Numeric: map[string][]float64{"water_temp": temp, "flow": flow, "conductivity": cond, "dissolved_oxygen": do},
		Text:    map[string][]string{"site": site},
	}
}

func ctxT(t testing.TB) context.Context {
	ctx, cancel := context.WithTimeout(context.Background(), 3*time.Minute)
	t.Cleanup(cancel)
	return ctx
}

// newStore migrates a fresh schema and opens a store on it.
func newStore(t testing.TB) (*history.Store, string) {
	t.Helper()
	url, schema := pgtest.Schema(t)
	if err := migrations.Up(ctxT(t), url, schema); err != nil {
		t.Fatal(err)
	}
	s, err := history.Open(ctxT(t), url, schema)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(s.Close)
	return s, url
}

// The fixture's models.
const (
	sondeModel   = "sonde-07-oxygen" // eight fits, a failure, comparisons, alerts
	emptyModel   = "sonde-12-oxygen" // nothing yet
	failingModel = "sonde-03-oxygen" // one failed refit
	newModel     = "sonde-05-oxygen" // one fit, nothing compared
)

var day0 = time.Date(2025, 6, 1, 3, 0, 0, 0, time.UTC)

func day(d int) time.Time { return day0.AddDate(0, 0, d) }

// fixture is a server on a seeded store.
type fixture struct {
	store *history.Store
	url   string
	srv   *web.Server
	mux   *http.ServeMux
	// fits are the sonde model's succeeded fits in order (fits[0] is the
	// baseline); comps[i] compares fits[i+1] with fits[0].
	fits     []int64
	failed   int64
	comps    []int64
	otherFit int64 // newModel's fit
}

func models() []web.Model {
	tol := fit.DefaultTolerance()
	m := func(name, table string) web.Model {
		return web.Model{Name: name, Schedule: "0 3 * * *", Table: table, Window: 30 * 24 * time.Hour,
			Against: "baseline", Tolerance: tol, ConfirmRuns: 2, MaxAge: 48 * time.Hour}
	}
	return []web.Model{m(sondeModel, "river.sonde_readings"), m(emptyModel, "river.sonde_readings"),
		m(failingModel, "river.sonde_readings"), m(newModel, "river.sonde_readings")}
}

// newFixture seeds a fresh schema with the scenario and returns a server
// on it (token "" = read-only).
func newFixture(t testing.TB, token string) *fixture {
	t.Helper()
	sc := sonde(t)
	st, url := newStore(t)
	f := &fixture{store: st, url: url}
	ctx := ctxT(t)
	rec := func(model string, d int, doc *fit.Document) int64 {
		id, err := st.RecordFit(ctx, history.FitRecord{Model: model, Slot: day(d), Started: day(d),
			Finished: day(d).Add(95 * time.Second), Document: doc,
			Window: &history.Window{First: day(d - 30), Last: day(d).Add(-time.Hour)}})
		if err != nil {
			t.Fatal(err)
		}
		return id
	}
	for i, doc := range sc.docs {
		d := i
		if i >= 4 {
			d = i + 1 // day 4 is the failure
		}
		if i == 4 {
			var err error
			f.failed, err = st.RecordFailure(ctx, sondeModel, day(4), "pull: canceling statement due to statement timeout (60s)", day(4), day(4).Add(time.Minute))
			if err != nil {
				t.Fatal(err)
			}
		}
		id := rec(sondeModel, d, doc)
		f.fits = append(f.fits, id)
		if i == 0 {
			if err := st.PinBaseline(ctx, sondeModel, id, history.PinnedAuto); err != nil {
				t.Fatal(err)
			}
			continue
		}
		cid, err := st.RecordComparison(ctx, sondeModel, f.fits[0], id, sc.reports[i])
		if err != nil {
			t.Fatal(err)
		}
		f.comps = append(f.comps, cid)
	}
	if _, err := st.RecordFailure(ctx, failingModel, day(8), "source table river.sonde_readings: no rows in the window", day(8), day(8).Add(2*time.Second)); err != nil {
		t.Fatal(err)
	}
	f.otherFit = rec(newModel, 8, sc.docs[1])
	if err := st.PinBaseline(ctx, newModel, f.otherFit, history.PinnedAuto); err != nil {
		t.Fatal(err)
	}
	seedAlerts(t, st, f)

	srv, err := web.New(web.Config{Store: st, Models: models(), Token: token, Now: func() time.Time { return day(8).Add(2 * time.Hour) }})
	if err != nil {
		t.Fatal(err)
	}
	f.srv = srv
	f.mux = http.NewServeMux()
	srv.Register(f.mux)
	return f
}

// seedAlerts walks the sonde model's alerts through alerts.Step as the
// daemon would: the failure opens refit_failing (pending, then resolved),
// the growing water_temp shift goes pending and then fires.
func seedAlerts(t testing.TB, st *history.Store, f *fixture) {
	t.Helper()
	steps := []struct {
		d      int
		fitID  int64
		kind   alerts.Kind
		term   string
		breach bool
		sum    string
	}{
		{4, f.failed, alerts.KindRefitFailing, "", true, "refit failed: pull: canceling statement due to statement timeout (60s)"},
		{5, f.fits[4], alerts.KindRefitFailing, "", false, "refit succeeded"},
		{6, f.fits[5], alerts.KindCurveShift, "water_temp", true, "curve water_temp moved by 0.9 mg/L beyond its 99% band above 19 °C"},
		{7, f.fits[6], alerts.KindCurveShift, "water_temp", true, "curve water_temp moved by 1.2 mg/L beyond its 99% band above 18 °C"},
		{8, f.fits[7], alerts.KindCurveShift, "water_temp", true, "curve water_temp moved by 1.5 mg/L beyond its 99% band above 18 °C"},
	}
	for _, s := range steps {
		err := st.InTx(ctxT(t), func(tx pgx.Tx) error {
			states, err := st.AlertStatesTx(ctxT(t), tx, sondeModel)
			if err != nil {
				return err
			}
			key := alerts.Key{Model: sondeModel, Term: s.term, Kind: s.kind}
			next, tr := alerts.Step(states[key], alerts.Finding{Model: sondeModel, Term: s.term, Kind: s.kind, Breach: s.breach,
				Summary: s.sum, Numbers: map[string]any{"fit_id": s.fitID}}, 2, day(s.d).Add(2*time.Minute))
			return st.SaveAlertTx(ctxT(t), tx, next, tr, s.fitID)
		})
		if err != nil {
			t.Fatal(err)
		}
	}
}

// call serves one request and decodes the JSON answer (nil when it is not
// JSON).
func (f *fixture) call(t testing.TB, method, target, body string, header ...string) (int, map[string]any, http.Header) {
	t.Helper()
	var rd io.Reader
	if body != "" {
		rd = strings.NewReader(body)
	}
	req := httptest.NewRequestWithContext(ctxT(t), method, target, rd)
	for i := 0; i+1 < len(header); i += 2 {
		req.Header.Set(header[i], header[i+1])
	}
	rr := httptest.NewRecorder()
	f.mux.ServeHTTP(rr, req)
	var out map[string]any
	if strings.HasPrefix(rr.Header().Get("Content-Type"), "application/json") {
		if err := json.Unmarshal(rr.Body.Bytes(), &out); err != nil {
			t.Fatalf("%s %s: answer is not JSON: %v\n%s", method, target, err, rr.Body.String())
		}
	}
	return rr.Code, out, rr.Header()
}

func httptestRequest(t testing.TB, method, target string) *http.Request {
	return httptest.NewRequestWithContext(ctxT(t), method, target, nil)
}

func serve(h http.Handler, req *http.Request) *httptest.ResponseRecorder {
	rr := httptest.NewRecorder()
	h.ServeHTTP(rr, req)
	return rr
}
