package web_test

import (
	"encoding/json"
	"fmt"
	"net/http"
	"net/url"
	"sort"
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/daemon/web"
)

// TestOpenAPI walks the served OpenAPI document: for every path, method
// and documented status it makes the real handler answer that status (on
// the seeded scenario in PostgreSQL), and checks the answer against the
// documented schema. It also checks that the document and the routes the
// server registers under /api/ are the same set.
func TestOpenAPI(t *testing.T) {
	t.Parallel()
	const token = "openapi-token"
	f := newFixture(t, token)
	servers := map[string]*fixture{"main": f}
	for name, cfg := range map[string]web.Config{
		"read-only": {Store: f.store, Models: models()},
		"no store":  {Models: models(), Token: token},
	} {
		srv, err := web.New(cfg)
		if err != nil {
			t.Fatal(err)
		}
		x := &fixture{mux: http.NewServeMux()}
		srv.Register(x.mux)
		servers[name] = x
	}

	code, doc, _ := f.call(t, "GET", "/api/v1/openapi.json", "")
	if code != 200 || !strings.HasPrefix(str(doc["openapi"]), "3.1") {
		t.Fatalf("openapi.json: %d, version %v", code, doc["openapi"])
	}
	sc := &schemaChecker{doc: doc}
	// Every schema in the document uses only keywords the checker knows.
	var walk func(path string, s any)
	walk = func(path string, s any) {
		m, ok := s.(map[string]any)
		if !ok {
			return
		}
		if err := keywords(m); err != nil {
			t.Errorf("%s: %v", path, err)
		}
		for k, v := range asMap(m["properties"]) {
			walk(path+".properties."+k, v)
		}
		for i, v := range asSlice(m["allOf"]) {
			walk(fmt.Sprintf("%s.allOf[%d]", path, i), v)
		}
		for i, v := range asSlice(m["oneOf"]) {
			walk(fmt.Sprintf("%s.oneOf[%d]", path, i), v)
		}
		walk(path+".items", m["items"])
		walk(path+".additionalProperties", m["additionalProperties"])
	}
	for name, s := range asMap(asMap(doc["components"])["schemas"]) {
		walk("#/components/schemas/"+name, s)
	}

	latest := f.fits[len(f.fits)-1]
	documented := map[string]bool{}
	for path, item := range asMap(doc["paths"]) {
		for method, op := range asMap(item) {
			method = strings.ToUpper(method)
			documented[method+" "+path] = true
			op := asMap(op)
			params := map[string]map[string]any{}
			for _, p := range asSlice(op["parameters"]) {
				p := asMap(p)
				if ref, ok := p["$ref"].(string); ok {
					var err error
					if p, err = sc.resolve(ref); err != nil {
						t.Fatal(err)
					}
				}
				params[str(p["name"])] = p
			}
			for status, resp := range asMap(op["responses"]) {
				if status == "default" {
					continue // unexpected failures: nothing to provoke
				}
				t.Run(method+" "+path+" "+status, func(t *testing.T) {
					resp := asMap(resp)
					if ref, ok := resp["$ref"].(string); ok {
						var err error
						if resp, err = sc.resolve(ref); err != nil {
							t.Fatal(err)
						}
					}
					schema := asMap(asMap(asMap(resp["content"])["application/json"])["schema"])
					if schema == nil {
						t.Fatal("no application/json schema")
					}
					// The request that should get this status.
					server := "main"
					pathVals := map[string]string{"model": sondeModel, "id": fmt.Sprint(latest)}
					if strings.HasPrefix(path, "/api/v1/comparisons/") {
						pathVals["id"] = fmt.Sprint(f.comps[len(f.comps)-1])
					}
					query := url.Values{}
					body := ""
					header := []string{}
					if op["requestBody"] != nil {
						body = fmt.Sprintf(`{"fit_id": %d}`, f.fits[2])
						header = []string{"Authorization", "Bearer " + token, "Content-Type", "application/json"}
					}
					switch status {
					case "200":
					case "400":
						switch {
						case params["limit"] != nil:
							query.Set("limit", "many")
						case params["state"] != nil:
							query.Set("state", "melting")
						case params["id"] != nil:
							pathVals["id"] = "first"
						case body != "":
							body = "{"
						default:
							t.Fatal("documents 400 but has nothing the test knows how to make invalid")
						}
					case "401":
						header = []string{"Authorization", "Bearer not-" + token}
					case "403":
						server = "read-only"
					case "404":
						switch {
						case params["model"] != nil && params["model"]["in"] == "query":
							query.Set("model", "no-such-model")
						case params["model"] != nil:
							pathVals["model"] = "no-such-model"
						case params["id"] != nil:
							pathVals["id"] = "987654321"
						default:
							t.Fatal("documents 404 but has no model or id to get wrong")
						}
					case "503":
						server = "no store"
					default:
						t.Fatalf("the test does not know how to make status %s", status)
					}
					target := path
					for k, v := range pathVals {
						target = strings.ReplaceAll(target, "{"+k+"}", v)
					}
					if len(query) > 0 {
						target += "?" + query.Encode()
					}
					code, got, hdr := servers[server].call(t, method, target, body, header...)
					if fmt.Sprint(code) != status {
						t.Fatalf("%s %s: status %d, want %s: %v", method, target, code, status, got)
					}
					if !strings.HasPrefix(hdr.Get("Content-Type"), "application/json") {
						t.Fatalf("content type %q", hdr.Get("Content-Type"))
					}
					for _, p := range sc.check("$", schema, got) {
						t.Error(p)
					}
				})
			}
		}
	}

	// More 200 answers, for the shapes the walk above does not reach:
	// empty, failing and unconverged models, failed fits, first pages.
	for _, tc := range []struct{ op, target string }{
		{"/api/v1/models/{model}", "/api/v1/models/" + emptyModel},
		{"/api/v1/models/{model}", "/api/v1/models/" + failingModel},
		{"/api/v1/models/{model}", "/api/v1/models/" + newModel},
		{"/api/v1/models/{model}/fits", "/api/v1/models/" + sondeModel + "/fits?limit=2"},
		{"/api/v1/models/{model}/fits", "/api/v1/models/" + emptyModel + "/fits"},
		{"/api/v1/models/{model}/history", "/api/v1/models/" + failingModel + "/history"},
		{"/api/v1/models/{model}/comparisons", "/api/v1/models/" + sondeModel + "/comparisons?limit=1"},
		{"/api/v1/models/{model}/alert-events", "/api/v1/models/" + sondeModel + "/alert-events?limit=1"},
		{"/api/v1/fits/{id}", fmt.Sprintf("/api/v1/fits/%d", f.failed)},
		{"/api/v1/fits/{id}", fmt.Sprintf("/api/v1/fits/%d", f.fits[0])},
		{"/api/v1/alerts", "/api/v1/alerts?state=resolved"},
	} {
		code, got, _ := f.call(t, "GET", tc.target, "")
		schema := asMap(asMap(asMap(asMap(asMap(asMap(asMap(asMap(doc["paths"])[tc.op])["get"])["responses"])["200"])["content"])["application/json"])["schema"])
		if code != 200 || schema == nil {
			t.Errorf("GET %s: %d (schema %v)", tc.target, code, schema != nil)
			continue
		}
		for _, p := range sc.check("$", schema, got) {
			t.Errorf("GET %s: %s", tc.target, p)
		}
	}

	// The routes and the document agree, and the mux sends each
	// documented path to its own route.
	srv, err := web.New(web.Config{Models: models()})
	if err != nil {
		t.Fatal(err)
	}
	mux := http.NewServeMux()
	srv.Register(mux)
	registered := map[string]bool{}
	for _, r := range srv.Routes() {
		key := r.Method + " " + r.Pattern
		registered[key] = true
		if !documented[key] {
			t.Errorf("route %s is not in openapi.json", key)
		}
		if !strings.HasPrefix(r.Pattern, "/api/v1/") {
			t.Errorf("route %s is outside /api/v1/", key)
		}
	}
	var keys []string
	for k := range documented {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, key := range keys {
		if !registered[key] {
			t.Errorf("openapi.json documents %s, which the server does not register", key)
			continue
		}
		method, path, _ := strings.Cut(key, " ")
		req := httptestRequest(t, method, strings.NewReplacer("{model}", "m", "{id}", "1").Replace(path))
		if _, pattern := mux.Handler(req); pattern != key {
			t.Errorf("%s reaches pattern %q", key, pattern)
		}
	}
	// Anything else under /api/ reaches the JSON not-found answer, not a
	// page.
	for _, p := range []string{"/api/", "/api/v2/models", "/api/v1/models/m/fits/1"} {
		if _, pattern := mux.Handler(httptestRequest(t, "GET", p)); pattern != "/api/" {
			t.Errorf("GET %s reaches %q, want the API's not-found", p, pattern)
		}
	}
}

// TestSchemaChecker makes sure the checker finds what it should, so that a
// passing TestOpenAPI means something.
func TestSchemaChecker(t *testing.T) {
	t.Parallel()
	var doc map[string]any
	err := json.Unmarshal([]byte(`{"components": {"schemas": {
		"A": {"type": "object", "required": ["n", "s"], "properties": {"n": {"type": "integer"}, "s": {"type": ["string", "null"]},
		      "b": {"oneOf": [{"$ref": "#/components/schemas/B"}, {"type": "null"}]}, "l": {"type": "array", "items": {"type": "number"}}}},
		"B": {"type": "object", "required": ["x"], "properties": {"x": {"type": "boolean"}}},
		"C": {"allOf": [{"$ref": "#/components/schemas/B"}, {"type": "object", "required": ["y"], "properties": {"y": {"type": "string", "enum": ["p", "q"]}}}]}}}}`), &doc)
	if err != nil {
		t.Fatal(err)
	}
	sc := &schemaChecker{doc: doc}
	a := map[string]any{"$ref": "#/components/schemas/A"}
	c := map[string]any{"$ref": "#/components/schemas/C"}
	for _, tc := range []struct {
		schema map[string]any
		value  string
		want   string // "" for valid
	}{
		{a, `{"n": 1, "s": null}`, ""},
		{a, `{"n": 1, "s": "x", "b": {"x": true}, "l": [1, 2.5]}`, ""},
		{a, `{"n": 1.5, "s": null}`, "$.n: 1.5 is not of type [integer]"},
		{a, `{"n": 1}`, `required property "s" is missing`},
		{a, `{"n": 1, "s": 2}`, "$.s: 2 is not of type [string null]"},
		{a, `{"n": 1, "s": null, "b": {"x": 3}}`, "matches 0 of the oneOf schemas"},
		{a, `{"n": 1, "s": null, "l": [1, "2"]}`, `$.l[1]: "2" is not of type [number]`},
		{a, `{"n": 1, "s": null, "z": 0}`, "members [z] are not in the schema"},
		{c, `{"x": true, "y": "p"}`, ""},
		{c, `{"x": true, "y": "r"}`, "r is not one of [p q]"},
		{c, `{"x": true}`, `required property "y" is missing`},
		{c, `{"x": true, "y": "q", "w": 1}`, "members [w] are not in the schema"},
		{map[string]any{"type": "string", "pattern": "^a"}, `"a"`, `keyword "pattern" is not supported`},
	} {
		var v any
		if err := json.Unmarshal([]byte(tc.value), &v); err != nil {
			t.Fatal(err)
		}
		got := strings.Join(sc.check("$", tc.schema, v), "; ")
		if (tc.want == "") != (got == "") || !strings.Contains(got, tc.want) {
			t.Errorf("%s: problems %q, want %q", tc.value, got, tc.want)
		}
	}
}
