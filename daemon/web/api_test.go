package web_test

import (
	"fmt"
	"net/http"
	"slices"
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/daemon/web"
	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs/history"
)

// TestAPIReads checks the read endpoints' status codes and answers on the
// seeded scenario.
func TestAPIReads(t *testing.T) {
	t.Parallel()
	f := newFixture(t, "")
	sc := sonde(t)
	latest := f.fits[len(f.fits)-1]
	cases := []struct {
		name   string
		target string
		status int
		// check looks at the answer of a 200; errMatch is in the error
		// message otherwise.
		check    func(t *testing.T, body map[string]any)
		errMatch string
	}{
		{name: "fleet", target: "/api/v1/models", status: 200, check: func(t *testing.T, b map[string]any) {
			got := map[string]string{}
			for _, m := range list(b["models"]) {
				got[str(m["name"])] = str(m["state"])
			}
			want := map[string]string{sondeModel: web.StateShifted, emptyModel: web.StateNoData, failingModel: web.StateFailing, newModel: web.StateAwaiting}
			if fmt.Sprint(got) != fmt.Sprint(want) {
				t.Errorf("states %v, want %v", got, want)
			}
			sonde := list(b["models"])[0]
			if fire := list(sonde["firing_alerts"]); len(fire) != 1 || fire[0]["kind"] != "curve_shift" || fire[0]["term"] != "water_temp" {
				t.Errorf("firing alerts %v", fire)
			}
			if id := sonde["last_refit"].(map[string]any)["id"]; id != float64(latest) {
				t.Errorf("last refit %v, want %d", id, latest)
			}
			if sonde["breach"] != true || sonde["worst_shift_score"].(float64) <= 1 {
				t.Errorf("breach %v, worst score %v", sonde["breach"], sonde["worst_shift_score"])
			}
			if b["writable"] != false {
				t.Errorf("writable without a token")
			}
		}},
		{name: "model", target: "/api/v1/models/" + sondeModel, status: 200, check: func(t *testing.T, b map[string]any) {
			cfg := b["config"].(map[string]any)
			if cfg["window"] != "30d" || cfg["watch"].(map[string]any)["level"] != 0.99 || b["writable"] != false {
				t.Errorf("config %v, writable %v", cfg, b["writable"])
			}
			if b["baseline_fit_id"] != float64(f.fits[0]) {
				t.Errorf("baseline %v, want %d", b["baseline_fit_id"], f.fits[0])
			}
		}},
		{name: "model with nothing yet", target: "/api/v1/models/" + emptyModel, status: 200, check: func(t *testing.T, b map[string]any) {
			if b["last_refit"] != nil || b["latest_comparison"] != nil || b["state"] != web.StateNoData {
				t.Errorf("empty model: %v", b)
			}
		}},
		{name: "unknown model", target: "/api/v1/models/nowhere", status: 404, errMatch: `no model named "nowhere"`},
		{name: "fits", target: "/api/v1/models/" + sondeModel + "/fits", status: 200, check: func(t *testing.T, b map[string]any) {
			fits := list(b["fits"])
			if len(fits) != len(f.fits)+1 || fits[0]["id"] != float64(latest) || b["next_before"] != nil {
				t.Errorf("%d fits, first %v, next %v", len(fits), fits[0]["id"], b["next_before"])
			}
			for _, x := range fits {
				if x["id"] == float64(f.failed) && (x["status"] != "failed" || x["reason"] == nil || x["deviance_explained"] != nil) {
					t.Errorf("failed fit %v", x)
				}
				if x["id"] == float64(f.fits[0]) && x["is_baseline"] != true {
					t.Errorf("baseline not marked: %v", x)
				}
			}
			if c := fits[0]["comparison"].(map[string]any); c["breach"] != true || !slices.Contains(strs(c["shifted"]), "water_temp") {
				t.Errorf("latest fit's comparison %v", c)
			}
		}},
		{name: "fits limit 0", target: "/api/v1/models/" + sondeModel + "/fits?limit=0", status: 400, errMatch: "limit=0"},
		{name: "fits limit too big", target: "/api/v1/models/" + sondeModel + "/fits?limit=501", status: 400, errMatch: "from 1 to 500"},
		{name: "fits bad before", target: "/api/v1/models/" + sondeModel + "/fits?before=yesterday", status: 400, errMatch: "before=yesterday"},
		{name: "fits of unknown model", target: "/api/v1/models/nowhere/fits", status: 404, errMatch: "nowhere"},
		{name: "fit", target: fmt.Sprintf("/api/v1/fits/%d", latest), status: 200, check: func(t *testing.T, b map[string]any) {
			var names []string
			for _, c := range list(b["curves"]) {
				names = append(names, str(c["name"]))
				g := c["grid"].(map[string]any)
				if n := len(g["x"].([]any)); n == 0 || len(g["fit"].([]any)) != n || len(g["se"].([]any)) != n {
					t.Errorf("curve %s: grid lengths", c["name"])
				}
				d, dx := g["density"].([]any), g["density_x"].([]any)
				if len(d) == 0 || len(d) != len(dx) {
					t.Errorf("curve %s: density %d bins, centres %d", c["name"], len(d), len(dx))
				}
			}
			if fmt.Sprint(names) != "[water_temp flow]" {
				t.Errorf("curves %v", names)
			}
			if s := list(b["surfaces"]); len(s) != 1 || len(s[0]["fit"].([]any)) == 0 {
				t.Errorf("surfaces %v", len(s))
			}
			if l := list(b["linear"]); len(l) != 1 || l[0]["column"] != "conductivity" || l[0]["lower"].(float64) >= l[0]["upper"].(float64) {
				t.Errorf("linear %v", l)
			}
			fa := list(b["factors"])
			if len(fa) != 1 || len(list(fa[0]["levels"])) != 3 || list(fa[0]["levels"])[0]["reference"] != true {
				t.Errorf("factors %v", fa)
			}
			fig := b["figures"].(map[string]any)
			if fig["response"] != "dissolved_oxygen" || fig["deviance_explained"] != sc.docs[7].DevianceExplained {
				t.Errorf("figures %v", fig)
			}
		}},
		{name: "failed fit", target: fmt.Sprintf("/api/v1/fits/%d", f.failed), status: 200, check: func(t *testing.T, b map[string]any) {
			if b["figures"] != nil || len(list(b["curves"])) != 0 || !strings.Contains(str(b["reason"]), "statement timeout") {
				t.Errorf("failed fit %v", b)
			}
		}},
		{name: "fit id not a number", target: "/api/v1/fits/latest", status: 400, errMatch: `"latest"`},
		{name: "unknown fit", target: "/api/v1/fits/987654321", status: 404, errMatch: "no fit 987654321"},
		{name: "comparisons", target: "/api/v1/models/" + sondeModel + "/comparisons", status: 200, check: func(t *testing.T, b map[string]any) {
			cs := list(b["comparisons"])
			if len(cs) != len(f.comps) || cs[0]["id"] != float64(f.comps[len(f.comps)-1]) || cs[0]["worst_term"] != "water_temp" {
				t.Errorf("%d comparisons, first %v", len(cs), cs[0])
			}
		}},
		{name: "comparison", target: fmt.Sprintf("/api/v1/comparisons/%d", f.comps[len(f.comps)-1]), status: 200, check: func(t *testing.T, b map[string]any) {
			rep := b["report"].(map[string]any)
			if rep["format"] != fit.CompareFormat || len(list(rep["terms"])) != 5 || b["candidate_fit_id"] != float64(latest) {
				t.Errorf("report %v", rep["format"])
			}
		}},
		{name: "unknown comparison", target: "/api/v1/comparisons/987654321", status: 404, errMatch: "no comparison 987654321"},
		{name: "history", target: "/api/v1/models/" + sondeModel + "/history", status: 200, check: func(t *testing.T, b map[string]any) {
			pts := list(b["points"])
			if len(pts) != len(f.fits)+1 || pts[0]["fit_id"] != float64(f.fits[0]) {
				t.Errorf("%d points, first %v", len(pts), pts[0])
			}
			if fmt.Sprint(strs(b["terms"])) != "[conductivity flow site water_temp water_temp,flow]" {
				t.Errorf("terms %v", b["terms"])
			}
			last := pts[len(pts)-1]["scores"].(map[string]any)
			if last["water_temp"].(float64) <= 1 {
				t.Errorf("latest water_temp score %v", last["water_temp"])
			}
		}},
		{name: "history limit", target: "/api/v1/models/" + sondeModel + "/history?limit=2", status: 200, check: func(t *testing.T, b map[string]any) {
			if n := len(list(b["points"])); n != 2 {
				t.Errorf("%d points", n)
			}
		}},
		{name: "alerts", target: "/api/v1/alerts?model=" + sondeModel, status: 200, check: func(t *testing.T, b map[string]any) {
			as := list(b["alerts"])
			if len(as) != 2 || as[0]["state"] != "firing" || as[1]["state"] != "resolved" {
				t.Errorf("alerts %v", as)
			}
		}},
		{name: "firing alerts", target: "/api/v1/alerts?state=firing", status: 200, check: func(t *testing.T, b map[string]any) {
			if as := list(b["alerts"]); len(as) != 1 || as[0]["kind"] != "curve_shift" {
				t.Errorf("alerts %v", as)
			}
		}},
		{name: "alerts in two states", target: "/api/v1/alerts?state=pending,resolved", status: 200, check: func(t *testing.T, b map[string]any) {
			if as := list(b["alerts"]); len(as) != 1 || as[0]["kind"] != "refit_failing" {
				t.Errorf("alerts %v", as)
			}
		}},
		{name: "alerts bad state", target: "/api/v1/alerts?state=burning", status: 400, errMatch: "state=burning"},
		{name: "alerts of unknown model", target: "/api/v1/alerts?model=nowhere", status: 404, errMatch: "nowhere"},
		{name: "alert events", target: "/api/v1/models/" + sondeModel + "/alert-events", status: 200, check: func(t *testing.T, b map[string]any) {
			ev := list(b["events"])
			// pending, resolved (refit_failing); pending, firing (water_temp).
			if len(ev) != 4 || ev[0]["state"] != "firing" || ev[0]["fit_id"] != float64(f.fits[6]) {
				t.Errorf("events %v", ev)
			}
		}},
		{name: "no such endpoint", target: "/api/v1/nothing", status: 404, errMatch: "openapi.json"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			code, body, hdr := f.call(t, "GET", tc.target, "")
			if code != tc.status {
				t.Fatalf("GET %s: status %d, want %d: %v", tc.target, code, tc.status, body)
			}
			if !strings.HasPrefix(hdr.Get("Content-Type"), "application/json") {
				t.Errorf("content type %q", hdr.Get("Content-Type"))
			}
			if tc.status != 200 {
				if msg := str(body["error"]); !strings.Contains(msg, tc.errMatch) {
					t.Errorf("error %q does not mention %q", msg, tc.errMatch)
				}
				return
			}
			tc.check(t, body)
		})
	}
}

// TestAPIPaging walks the fits, comparisons and alert events one small
// page at a time and checks that the pages cover everything once, newest
// first.
func TestAPIPaging(t *testing.T) {
	t.Parallel()
	f := newFixture(t, "")
	for _, tc := range []struct {
		path, key string
		want      int
	}{
		{"/api/v1/models/" + sondeModel + "/fits", "fits", len(f.fits) + 1},
		{"/api/v1/models/" + sondeModel + "/comparisons", "comparisons", len(f.comps)},
		{"/api/v1/models/" + sondeModel + "/alert-events", "events", 4},
	} {
		t.Run(tc.key, func(t *testing.T) {
			var ids []float64
			next := tc.path + "?limit=3"
			for pages := 0; next != ""; pages++ {
				if pages > 10 {
					t.Fatal("the pages do not end")
				}
				code, body, _ := f.call(t, "GET", next, "")
				if code != 200 {
					t.Fatalf("GET %s: %d %v", next, code, body)
				}
				for _, x := range list(body[tc.key]) {
					ids = append(ids, x["id"].(float64))
				}
				next = ""
				if body["next"] != nil {
					next = str(body["next"])
					if !strings.Contains(next, "limit=3") || body["next_before"] != ids[len(ids)-1] {
						t.Errorf("next %q, next_before %v", next, body["next_before"])
					}
				}
			}
			if len(ids) != tc.want {
				t.Errorf("%d rows over the pages, want %d", len(ids), tc.want)
			}
			if !slices.IsSortedFunc(ids, func(a, b float64) int { return int(b - a) }) || len(slices.Compact(slices.Clone(ids))) != len(ids) {
				t.Errorf("ids %v: not newest first without repeats", ids)
			}
		})
	}
}

// TestPinBaseline checks the one write: read-only by default, the bearer
// token, and each bad request.
func TestPinBaseline(t *testing.T) {
	t.Parallel()
	const token = "river-token-7f3a"
	f := newFixture(t, token)
	pin := "/api/v1/models/" + sondeModel + "/baseline"
	good := fmt.Sprintf(`{"fit_id": %d}`, f.fits[3])
	auth := func(tok string) []string {
		return []string{"Authorization", "Bearer " + tok, "Content-Type", "application/json"}
	}

	readOnly, err := web.New(web.Config{Store: f.store, Models: models()})
	if err != nil {
		t.Fatal(err)
	}
	ro := &fixture{store: f.store, mux: http.NewServeMux()}
	readOnly.Register(ro.mux)
	code, body, _ := ro.call(t, "POST", pin, good, auth(token)...)
	if code != http.StatusForbidden || !strings.Contains(str(body["error"]), "api.token") {
		t.Errorf("read-only server: %d %v, want 403 saying to set api.token", code, body)
	}
	if _, m, _ := ro.call(t, "GET", "/api/v1/models/"+sondeModel, ""); m["writable"] != false {
		t.Errorf("read-only server says writable")
	}
	if _, m, _ := f.call(t, "GET", "/api/v1/models/"+sondeModel, ""); m["writable"] != true {
		t.Errorf("server with a token says not writable")
	}

	cases := []struct {
		name   string
		target string
		body   string
		header []string
		status int
		match  string
	}{
		{"no token", pin, good, nil, 401, "Authorization: Bearer"},
		{"wrong scheme", pin, good, []string{"Authorization", "Basic " + token}, 401, "Authorization: Bearer"},
		{"wrong token", pin, good, auth("river-token-0000"), 401, "not the configured API token"},
		{"unknown model", "/api/v1/models/nowhere/baseline", good, auth(token), 404, "nowhere"},
		{"not JSON", pin, `fit_id=3`, auth(token), 400, `{"fit_id": N}`},
		{"unknown field", pin, `{"fit": 3}`, auth(token), 400, `unknown field "fit"`},
		{"no fit id", pin, `{}`, auth(token), 400, "fit_id is missing"},
		{"two values", pin, good + good, auth(token), 400, "more than one"},
		{"unknown fit", pin, `{"fit_id": 987654321}`, auth(token), 404, "no fit 987654321"},
		{"another model's fit", pin, fmt.Sprintf(`{"fit_id": %d}`, f.otherFit), auth(token), 404, "fit of model " + `"` + newModel},
		{"failed fit", pin, fmt.Sprintf(`{"fit_id": %d}`, f.failed), auth(token), 400, "only a succeeded fit"},
		{"GET not allowed", pin, "", nil, 405, "POST"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			method := "POST"
			if tc.status == 405 {
				method = "GET"
			}
			code, body, hdr := f.call(t, method, tc.target, tc.body, tc.header...)
			if code != tc.status || !strings.Contains(str(body["error"]), tc.match) {
				t.Errorf("%d %q, want %d mentioning %q", code, body["error"], tc.status, tc.match)
			}
			if code == 401 && !strings.HasPrefix(hdr.Get("WWW-Authenticate"), "Bearer") {
				t.Errorf("401 without WWW-Authenticate: Bearer")
			}
		})
	}
	if id, _, _ := f.store.Baseline(ctxT(t), sondeModel); id != f.fits[0] {
		t.Fatalf("a refused pin moved the baseline to %d", id)
	}

	code, body, _ = f.call(t, "POST", pin, good, auth(token)...)
	if code != 200 || body["baseline_fit_id"] != float64(f.fits[3]) || body["previous_baseline_fit_id"] != float64(f.fits[0]) || body["pinned_by"] != "operator" {
		t.Fatalf("pin: %d %v", code, body)
	}
	if id, _, _ := f.store.Baseline(ctxT(t), sondeModel); id != f.fits[3] {
		t.Errorf("baseline is fit %d after the pin, want %d", id, f.fits[3])
	}
	_, fits, _ := f.call(t, "GET", "/api/v1/models/"+sondeModel+"/fits", "")
	for _, x := range list(fits["fits"]) {
		if (x["id"] == float64(f.fits[3])) != (x["is_baseline"] == true) {
			t.Errorf("fit %v: is_baseline %v", x["id"], x["is_baseline"])
		}
	}
}

// TestStoreNotReady checks that every database endpoint answers 503 until
// SetStore, and that the description and the pages do not need the store.
func TestStoreNotReady(t *testing.T) {
	t.Parallel()
	f := newFixture(t, "tok")
	srv, err := web.New(web.Config{Models: models(), Token: "tok"})
	if err != nil {
		t.Fatal(err)
	}
	nf := &fixture{mux: http.NewServeMux()}
	srv.Register(nf.mux)
	for _, r := range srv.Routes() {
		target := strings.NewReplacer("{model}", sondeModel, "{id}", fmt.Sprint(f.fits[1])).Replace(r.Pattern)
		code, body, hdr := nf.call(t, r.Method, target, fmt.Sprintf(`{"fit_id": %d}`, f.fits[1]), "Authorization", "Bearer tok")
		if r.Pattern == "/api/v1/openapi.json" {
			if code != 200 {
				t.Errorf("%s without a store: %d", target, code)
			}
			continue
		}
		if code != http.StatusServiceUnavailable || !strings.Contains(str(body["error"]), "not connected") || hdr.Get("Retry-After") == "" {
			t.Errorf("%s %s without a store: %d %v", r.Method, target, code, body)
		}
	}
	for _, page := range []string{"/", "/models/" + sondeModel, "/assets/app.css"} {
		if code, _, _ := nf.call(t, "GET", page, ""); code != 200 {
			t.Errorf("GET %s without a store: %d", page, code)
		}
	}
	srv.SetStore(f.store)
	if code, body, _ := nf.call(t, "GET", "/api/v1/models", ""); code != 200 || len(list(body["models"])) != 4 {
		t.Errorf("after SetStore: %d %v", code, body)
	}
	srv.SetStore(nil)
	if code, _, _ := nf.call(t, "GET", "/api/v1/models", ""); code != 503 {
		t.Errorf("after SetStore(nil): %d", code)
	}
}

// TestPages checks the HTML pages and assets: status codes, the caution,
// the content security policy and the API's 404/405 for other paths.
func TestPages(t *testing.T) {
	t.Parallel()
	srv, err := web.New(web.Config{Models: models()})
	if err != nil {
		t.Fatal(err)
	}
	f := &fixture{mux: http.NewServeMux()}
	srv.Register(f.mux)
	for _, tc := range []struct {
		target, ctype string
		status        int
		contains      string
	}{
		{"/", "text/html", 200, "not a compliance determination"},
		{"/models/" + sondeModel, "text/html", 200, `data-model="sonde-07-oxygen"`},
		{"/models/nowhere", "text/html", 404, "No model named"},
		{"/assets/app.css", "text/css", 200, "--brand"},
		{"/assets/model.js", "text/javascript", 200, "pin as baseline"},
		{"/assets/icon.svg", "image/svg+xml", 200, "<svg"},
		{"/assets/nothing.js", "text/plain", 404, ""},
	} {
		req := httptestRequest(t, "GET", tc.target)
		rr := serve(f.mux, req)
		if rr.Code != tc.status || !strings.HasPrefix(rr.Header().Get("Content-Type"), tc.ctype) ||
			!strings.Contains(strings.ToLower(rr.Body.String()), strings.ToLower(tc.contains)) {
			t.Errorf("GET %s: %d %s, want %d %s containing %q", tc.target, rr.Code, rr.Header().Get("Content-Type"), tc.status, tc.ctype, tc.contains)
		}
		if tc.ctype == "text/html" && !strings.Contains(rr.Header().Get("Content-Security-Policy"), "default-src 'none'") {
			t.Errorf("GET %s: no content security policy", tc.target)
		}
		if tc.ctype == "text/html" && !strings.Contains(rr.Body.String(), "Defer to local regulations and qualified professionals.") {
			t.Errorf("GET %s: the caution is missing", tc.target)
		}
	}
	// An asset revalidates with its ETag.
	rr := serve(f.mux, httptestRequest(t, "GET", "/assets/app.css"))
	req := httptestRequest(t, "GET", "/assets/app.css")
	req.Header.Set("If-None-Match", rr.Header().Get("ETag"))
	if rr2 := serve(f.mux, req); rr2.Code != http.StatusNotModified {
		t.Errorf("revalidating app.css: %d, want 304", rr2.Code)
	}
	// Wrong methods on API paths get 405 with Allow.
	rr = serve(f.mux, httptestRequest(t, "DELETE", "/api/v1/models"))
	if rr.Code != 405 || !strings.Contains(rr.Header().Get("Allow"), "GET") {
		t.Errorf("DELETE /api/v1/models: %d, Allow %q", rr.Code, rr.Header().Get("Allow"))
	}
}

// TestNewRejectsBadModels checks the constructor's checks.
func TestNewRejectsBadModels(t *testing.T) {
	t.Parallel()
	if _, err := web.New(web.Config{Models: []web.Model{{Name: "a"}, {Name: "a"}}}); err == nil || !strings.Contains(err.Error(), "twice") {
		t.Errorf("duplicate names: %v", err)
	}
	if _, err := web.New(web.Config{Models: []web.Model{{}}}); err == nil {
		t.Errorf("an unnamed model was accepted")
	}
	var st *history.Store
	if _, err := web.New(web.Config{Store: st}); err != nil {
		t.Errorf("no models, no store: %v", err)
	}
}

func list(v any) []map[string]any {
	var out []map[string]any
	for _, x := range v.([]any) {
		out = append(out, x.(map[string]any))
	}
	return out
}

func strs(v any) []string {
	var out []string
	for _, x := range v.([]any) {
		out = append(out, x.(string))
	}
	return out
}

func str(v any) string {
	s, _ := v.(string)
	return s
}
