package daemon

import (
	"context"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/fit"
)

// One App serving a good model and three bad ones, all on "@every 1s": a
// response column that is all NULL, a curve on a text column, and a where
// predicate that divides by zero on some rows. Each bad model gets failed
// fit rows whose reason says what is wrong, and never a successful one; the
// good model keeps getting succeeded fits; the App stays ready.
func TestFaultsBadModelsFailAlone(t *testing.T) {
	t.Parallel()
	db := newTestDB(t)
	ctx := context.Background()
	// A response column with no values at all.
	if _, err := db.pool.Exec(ctx, `ALTER TABLE readings ADD COLUMN turbidity double precision`); err != nil {
		t.Fatal(err)
	}
	cfg := testConfig(t, db, "@every 1s")
	good := cfg.Models[0]
	model := func(name, spec, where string) {
		t.Helper()
		s, err := fit.ParseSpec([]byte(spec))
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		m := good
		m.Name, m.Spec, m.Source.Where = name, s, where
		cfg.Models = append(cfg.Models, m)
	}
	model("null-response", "name: null-response\nresponse: turbidity\nterms:\n  - curve: water_temp\n    size: 6\n", "")
	model("text-curve", "name: text-curve\nresponse: dissolved_oxygen\nterms:\n  - curve: site\n    size: 6\n", "")
	// Rows are hourly: every other one has an even hour, and divides by zero.
	model("bad-where", "name: bad-where\nresponse: dissolved_oxygen\nterms:\n  - curve: water_temp\n    size: 6\n",
		"1 / (extract(hour FROM observed_at)::int % 2) = 1")

	a, _ := startApp(t, cfg, Options{Workers: 2})
	waitReady(t, a, 15*time.Second)
	bad := []string{"null-response", "text-curve", "bad-where"}
	waitFor(t, 12*time.Second, "a failed fit of each bad model and three succeeded fits of the good one", func() (bool, error) {
		for _, m := range bad {
			if db.count(t, `SELECT count(*) FROM fits WHERE model = $1 AND status = 'failed'`, m) == 0 {
				return false, nil
			}
		}
		return db.count(t, `SELECT count(*) FROM fits WHERE model = $1 AND status = 'succeeded'`, good.Name) >= 3, nil
	})

	// Each bad model's reason names its fault (lower-cased substrings of
	// the message; any one of them will do).
	want := map[string][]string{
		"null-response": {"turbidity"},
		// The refit checks column types before pulling, so the reason
		// names the column.
		"text-curve": {`column "site"`},
		"bad-where":  {"division by zero"},
	}
	for _, m := range bad {
		if n := db.count(t, `SELECT count(*) FROM fits WHERE model = $1 AND status <> 'failed'`, m); n != 0 {
			t.Errorf("model %s: %d fits that did not fail", m, n)
		}
		var reason string
		if err := db.pool.QueryRow(ctx, `SELECT reason FROM fits WHERE model = $1 AND status = 'failed' ORDER BY id LIMIT 1`, m).Scan(&reason); err != nil {
			t.Fatalf("model %s: %v", m, err)
		}
		t.Logf("model %s failed: %s", m, reason)
		ok := false
		for _, w := range want[m] {
			ok = ok || strings.Contains(strings.ToLower(reason), w)
		}
		if !ok {
			t.Errorf("model %s: reason %q names none of %q", m, reason, want[m])
		}
	}
	if n := db.count(t, `SELECT count(*) FROM fits WHERE model = $1 AND status <> 'succeeded'`, good.Name); n != 0 {
		t.Errorf("the good model has %d fits that did not succeed", n)
	}
	if code, body := get(t, a, "/readyz"); code != http.StatusOK {
		t.Errorf("/readyz with bad models: %d %q", code, body)
	}
	// And the good model carries on after the failures.
	n := db.count(t, `SELECT count(*) FROM fits WHERE model = $1 AND status = 'succeeded'`, good.Name)
	waitFor(t, 5*time.Second, "another succeeded fit of the good model", func() (bool, error) {
		return db.count(t, `SELECT count(*) FROM fits WHERE model = $1 AND status = 'succeeded'`, good.Name) > n, nil
	})
}
