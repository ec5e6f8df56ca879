package web_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/daemon/web"
	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs/history"
)

// Server time of the dashboard's pages, measured in-process (the
// requests go straight to the handler: no network, no browser).
//
//	go test ./daemon/web/ -run '^$' -bench 'Page$' -benchtime 20x
//
// Each reports ms/page, the sum over the API calls the page makes, and
// the slowest call's ms.

// BenchmarkModelPage serves the API calls of one model page (the model,
// its history of 1,000 fits, its alerts and alert events, a page of fits,
// the latest comparison's report and the two compared fits) for a model
// with 1,000 fits, each compared with the baseline. The fits and reports
// are copies of the sonde scenario's real ones (curve grid rows are not
// copied: the API does not read them).
func BenchmarkModelPage(b *testing.B) {
	const total = 1000
	f := newFixture(b, "")
	start := time.Now()
	seedHistory(b, f, total)
	b.Logf("seeded %d fits in %.1f s", total, time.Since(start).Seconds())

	// The calls model.js makes, with the ids it would find.
	_, m, _ := f.call(b, "GET", "/api/v1/models/"+sondeModel, "")
	c := m["latest_comparison"].(map[string]any)
	calls := []string{
		"/models/" + sondeModel,
		"/api/v1/models/" + sondeModel,
		"/api/v1/models/" + sondeModel + "/history?limit=1000",
		"/api/v1/alerts?model=" + sondeModel,
		"/api/v1/models/" + sondeModel + "/alert-events?limit=15",
		"/api/v1/models/" + sondeModel + "/fits?limit=20",
		fmt.Sprintf("/api/v1/comparisons/%v", c["id"]),
		fmt.Sprintf("/api/v1/fits/%v", c["reference_fit_id"]),
		fmt.Sprintf("/api/v1/fits/%v", c["candidate_fit_id"]),
	}
	if _, h, _ := f.call(b, "GET", calls[2], ""); len(list(h["points"])) != total {
		b.Fatalf("history has %d points, want %d", len(list(h["points"])), total)
	}
	pageBench(b, f.mux, calls)
}

// seedHistory gives the fixture's sonde model total fits in all, copying
// its recorded candidates and their comparisons (scores jittered), with
// every fortieth refit failed.
func seedHistory(tb testing.TB, f *fixture, total int) {
	tb.Helper()
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, f.url)
	if err != nil {
		tb.Fatal(err)
	}
	defer conn.Close(ctx)
	rng := rand.New(rand.NewPCG(5, 8))
	batch := &pgx.Batch{}
	have := len(f.fits) + 1
	for g := 1; g <= total-have; g++ {
		k := g % len(f.comps) // which recorded candidate to copy
		slot := day(9).Add(time.Duration(g) * 6 * time.Hour)
		if g%40 == 0 {
			batch.Queue(`INSERT INTO fits (model, status, reason, slot, started_at, finished_at)
				VALUES ($1, 'failed', 'pull: canceling statement due to statement timeout (60s)', $2, $2, $3)`,
				sondeModel, slot, slot.Add(time.Minute))
			continue
		}
		batch.Queue(`
			WITH nf AS (
				INSERT INTO fits (model, status, slot, started_at, finished_at, window_first, window_last, rows_read, rows_used,
				                  deviance, deviance_explained, edf_total, scale, converged, document)
				SELECT model, status, $2, $2, $3, window_first, window_last, rows_read, rows_used,
				       deviance, deviance_explained, edf_total, scale, converged, document FROM fits WHERE id = $1
				RETURNING id),
			nc AS (
				INSERT INTO comparisons (model, reference_fit_id, candidate_fit_id, breach, report, degradation_ratio, p_value, created_at)
				SELECT c.model, c.reference_fit_id, nf.id, c.breach, c.report, c.degradation_ratio, c.p_value, $3
				FROM comparisons c, nf WHERE c.id = $4
				RETURNING id)
			INSERT INTO comparison_terms (comparison_id, term, kind, verdict, score, size, p_adjusted)
			SELECT nc.id, t.term, t.kind, t.verdict, t.score * $5, t.size, t.p_adjusted
			FROM comparison_terms t, nc WHERE t.comparison_id = $4`,
			f.fits[k+1], slot, slot.Add(95*time.Second), f.comps[k], 0.6+0.8*rng.Float64())
	}
	if err := conn.SendBatch(ctx, batch).Close(); err != nil {
		tb.Fatal(err)
	}
	if _, err := conn.Exec(ctx, `ANALYZE`); err != nil {
		tb.Fatal(err)
	}
	var n int
	if err := conn.QueryRow(ctx, `SELECT count(*) FROM fits WHERE model = $1`, sondeModel).Scan(&n); err != nil || n != total {
		tb.Fatalf("%d fits (%v), want %d", n, err, total)
	}
}

// BenchmarkFleetPage serves the fleet page's API call for 1,000 models,
// each with a baseline and a compared candidate (every tenth with a
// failed refit after them, every twentieth with a firing alert).
func BenchmarkFleetPage(b *testing.B) {
	const fleet = 1000
	st, url := newStore(b)
	ctx := context.Background()
	// A small real model to copy: one curve and one line.
	spec, err := fit.ParseSpec([]byte("name: t\nresponse: dissolved_oxygen\nfamily: gaussian\nterms:\n  - curve: water_temp\n    size: 6\n  - linear: conductivity\n"))
	if err != nil {
		b.Fatal(err)
	}
	var docs [2]*fit.Document
	for i := range docs {
		if docs[i], err = fit.Fit(ctx, spec, sondeTable(uint64(300+i), float64(i)), fit.Options{}); err != nil {
			b.Fatal(err)
		}
	}
	rep, err := fit.Compare(docs[0], docs[1], fit.DefaultTolerance())
	if err != nil {
		b.Fatal(err)
	}
	var ids [2]int64
	for i, d := range docs {
		if ids[i], err = st.RecordFit(ctx, history.FitRecord{Model: "template", Slot: day(i), Started: day(i), Finished: day(i).Add(time.Minute), Document: d}); err != nil {
			b.Fatal(err)
		}
	}
	cid, err := st.RecordComparison(ctx, "template", ids[0], ids[1], rep)
	if err != nil {
		b.Fatal(err)
	}
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		b.Fatal(err)
	}
	defer conn.Close(ctx)
	start := time.Now()
	for _, q := range []struct {
		sql  string
		args []any
	}{
		{`INSERT INTO models (name) SELECT format('sonde-%s-oxygen', lpad(g::text, 4, '0')) FROM generate_series(1, $1::int) g`, []any{fleet}},
		{`INSERT INTO fits (model, status, slot, started_at, finished_at, rows_read, rows_used, deviance, deviance_explained,
		                   edf_total, scale, converged, document)
		 SELECT m.name, f.status, f.slot, f.started_at, f.finished_at, f.rows_read, f.rows_used, f.deviance, f.deviance_explained,
		        f.edf_total, f.scale, f.converged, f.document
		 FROM models m CROSS JOIN fits f WHERE m.name LIKE 'sonde-%' AND f.model = 'template' ORDER BY m.name, f.id`, nil},
		{`INSERT INTO baselines (model, fit_id, pinned_by) SELECT model, min(id), 'auto' FROM fits WHERE model LIKE 'sonde-%' GROUP BY model`, nil},
		{`INSERT INTO comparisons (model, reference_fit_id, candidate_fit_id, breach, report, degradation_ratio, p_value)
		 SELECT f.model, min(f.id), max(f.id), abs(hashtext(f.model)) % 7 = 0, c.report, c.degradation_ratio, c.p_value
		 FROM fits f, comparisons c WHERE f.model LIKE 'sonde-%' AND c.id = $1 GROUP BY f.model, c.id`, []any{cid}},
		{`INSERT INTO comparison_terms (comparison_id, term, kind, verdict, score, size, p_adjusted)
		 SELECT c.id, t.term, t.kind, t.verdict, t.score * (0.2 + (abs(hashtext(c.model || t.term)) % 100) / 40.0), t.size, t.p_adjusted
		 FROM comparisons c, comparison_terms t WHERE c.model LIKE 'sonde-%' AND t.comparison_id = $1`, []any{cid}},
		{`INSERT INTO fits (model, status, reason, started_at, finished_at)
		 SELECT name, 'failed', 'pull: connection refused', now(), now() FROM models WHERE name LIKE 'sonde-%0-oxygen'`, nil},
		{`INSERT INTO alert_states (model, term, kind, state, since, firing_since, consecutive, summary)
		 SELECT name, 'water_temp', 'curve_shift', 'firing', now(), now(), 2, 'curve water_temp moved beyond its 99% band'
		 FROM models WHERE name ~ '^sonde-\d\d[02468]0-oxygen$'`, nil},
		{`ANALYZE`, nil},
	} {
		if _, err := conn.Exec(ctx, q.sql, q.args...); err != nil {
			b.Fatalf("%s: %v", q.sql, err)
		}
	}
	b.Logf("seeded %d models in %.1f s", fleet, time.Since(start).Seconds())

	var ms []web.Model
	for g := 1; g <= fleet; g++ {
		ms = append(ms, web.Model{Name: fmt.Sprintf("sonde-%04d-oxygen", g), Schedule: "0 3 * * *", Table: "river.sonde_readings",
			Window: 30 * 24 * time.Hour, Against: "baseline", Tolerance: fit.DefaultTolerance()})
	}
	srv, err := web.New(web.Config{Store: st, Models: ms})
	if err != nil {
		b.Fatal(err)
	}
	mux := http.NewServeMux()
	srv.Register(mux)
	fx := &fixture{mux: mux}
	if _, body, _ := fx.call(b, "GET", "/api/v1/models", ""); len(list(body["models"])) != fleet {
		b.Fatalf("the fleet answer lists %d models, want %d", len(list(body["models"])), fleet)
	}
	pageBench(b, mux, []string{"/", "/api/v1/models"})
}

// pageBench times the calls in turn and reports ms per page and the
// slowest call's mean ms.
func pageBench(b *testing.B, h http.Handler, calls []string) {
	each := make([]time.Duration, len(calls))
	b.ResetTimer()
	for b.Loop() {
		for i, target := range calls {
			t0 := time.Now()
			rr := httptest.NewRecorder()
			h.ServeHTTP(rr, httptest.NewRequest("GET", target, nil))
			each[i] += time.Since(t0)
			if rr.Code != 200 {
				b.Fatalf("GET %s: %d %s", target, rr.Code, rr.Body.String())
			}
		}
	}
	var sum, slowest time.Duration
	worst := 0
	for i, d := range each {
		sum += d
		if d > slowest {
			slowest, worst = d, i
		}
	}
	n := float64(b.N)
	b.ReportMetric(float64(sum.Microseconds())/1000/n, "ms/page")
	b.ReportMetric(float64(slowest.Microseconds())/1000/n, "ms/slowest-call")
	b.Logf("slowest call: %s", calls[worst])
	for i, c := range calls {
		b.Logf("%8.2f ms  %s", float64(each[i].Microseconds())/1000/n, c)
	}
}
