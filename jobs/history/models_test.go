package history_test

import (
	"encoding/json"
	"errors"
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/internal/pgtest"
	"github.com/curvewatch/curvewatch/jobs/history"
)

// TestRecordComparison stores the report and one row per term, in one
// transaction, and refuses fits of another model.
func TestRecordComparison(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	refDoc, candDoc := testDocs(t)
	rep, err := fit.Compare(refDoc, candDoc, fit.DefaultTolerance())
	if err != nil {
		t.Fatal(err)
	}
	ref, err := s.RecordFit(ctxT(t), record("m", day(1), refDoc))
	if err != nil {
		t.Fatal(err)
	}
	cand, err := s.RecordFit(ctxT(t), record("m", day(2), candDoc))
	if err != nil {
		t.Fatal(err)
	}
	other, err := s.RecordFit(ctxT(t), record("other", day(2), candDoc))
	if err != nil {
		t.Fatal(err)
	}

	id, err := s.RecordComparison(ctxT(t), "m", ref, cand, rep)
	if err != nil {
		t.Fatal(err)
	}
	var breach bool
	var body []byte
	if err := conn.QueryRow(ctxT(t), `SELECT breach, report FROM comparisons WHERE id = $1 AND reference_fit_id = $2 AND candidate_fit_id = $3`, id, ref, cand).Scan(&breach, &body); err != nil {
		t.Fatal(err)
	}
	var back fit.ShiftReport
	if err := json.Unmarshal(body, &back); err != nil || breach != rep.Breach || back.Format != fit.CompareFormat || len(back.Terms) != len(rep.Terms) {
		t.Errorf("stored breach %v, report %q with %d terms (%v)", breach, back.Format, len(back.Terms), err)
	}
	terms, err := s.ComparisonTerms(ctxT(t), id)
	if err != nil {
		t.Fatal(err)
	}
	if len(terms) != len(rep.Terms) || len(terms) == 0 {
		t.Fatalf("%d term rows, report has %d terms", len(terms), len(rep.Terms))
	}
	byName := map[string]history.TermResult{}
	for _, tr := range terms {
		byName[tr.Term] = tr
	}
	for _, ts := range rep.Terms {
		tr, ok := byName[ts.Name]
		if !ok || tr.Kind != ts.Kind || tr.Verdict != ts.Verdict || tr.Score != ts.Score || tr.Size != ts.Size || tr.PAdjusted != ts.PAdjusted {
			t.Errorf("term %s: stored %+v, report %+v", ts.Name, tr, ts)
		}
	}

	for _, tc := range []struct {
		name         string
		model        string
		ref, cand    int64
		wantNoFitErr bool
	}{
		{"candidate of another model", "m", ref, other, true},
		{"both of another model", "other", ref, cand, true},
		{"missing fit", "m", ref, cand + 1000, true},
		{"a fit with itself", "m", ref, ref, false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			before := count(t, conn, `SELECT count(*) FROM comparisons`)
			_, err := s.RecordComparison(ctxT(t), tc.model, tc.ref, tc.cand, rep)
			if err == nil || errors.Is(err, history.ErrNoFit) != tc.wantNoFitErr || !strings.Contains(err.Error(), `"`+tc.model+`"`) {
				t.Fatalf("got %v", err)
			}
			if n := count(t, conn, `SELECT count(*) FROM comparisons`); n != before {
				t.Errorf("a refused comparison was stored")
			}
		})
	}

	// Deleting the candidate takes the comparison and its terms with it.
	if _, err := conn.Exec(ctxT(t), `DELETE FROM fits WHERE id = $1`, cand); err != nil {
		t.Fatal(err)
	}
	if n := count(t, conn, `SELECT count(*) FROM comparison_terms WHERE comparison_id = $1`, id); n != 0 {
		t.Errorf("%d term rows outlived their fit", n)
	}
}

// TestBaselines: auto pins only a model with no baseline; operator pins
// replace; only a succeeded fit of the model can be pinned.
func TestBaselines(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	doc, _ := testDocs(t)
	first, _ := s.RecordFit(ctxT(t), record("m", day(1), doc))
	second, _ := s.RecordFit(ctxT(t), record("m", day(2), doc))
	third, _ := s.RecordFit(ctxT(t), record("m", day(3), doc))
	weak, _ := s.RecordFit(ctxT(t), record("m", day(4), unconverged(doc)))
	failed, _ := s.RecordFailure(ctxT(t), "m", day(5), "boom", t0, t0)
	foreign, _ := s.RecordFit(ctxT(t), record("other", day(1), doc))

	if _, ok, err := s.Baseline(ctxT(t), "m"); ok || err != nil {
		t.Fatalf("baseline before any pin: %v, %v", ok, err)
	}
	for i, tc := range []struct {
		fit     int64
		by      string
		want    int64  // the baseline afterwards
		wantBy  string // pinned_by afterwards
		wantErr string
	}{
		{first, history.PinnedAuto, first, "auto", ""},
		{second, history.PinnedAuto, first, "auto", ""}, // the first stays
		{third, history.PinnedOperator, third, "operator", ""},
		{second, history.PinnedAuto, third, "operator", ""},
		{second, history.PinnedOperator, second, "operator", ""},
		{weak, history.PinnedOperator, second, "operator", "unconverged"},
		{failed, history.PinnedOperator, second, "operator", "failed"},
		{foreign, history.PinnedOperator, second, "operator", "not a fit of this model"},
		{first, "admin", second, "operator", `"admin"`},
	} {
		err := s.PinBaseline(ctxT(t), "m", tc.fit, tc.by)
		if tc.wantErr == "" && err != nil || tc.wantErr != "" && (err == nil || !strings.Contains(err.Error(), tc.wantErr) || !strings.Contains(err.Error(), `"m"`)) {
			t.Errorf("step %d: pin fit %d by %s: %v, want error %q", i, tc.fit, tc.by, err, tc.wantErr)
		}
		got, ok, err := s.Baseline(ctxT(t), "m")
		var by string
		conn.QueryRow(ctxT(t), `SELECT pinned_by FROM baselines WHERE model = 'm'`).Scan(&by)
		if err != nil || !ok || got != tc.want || by != tc.wantBy {
			t.Errorf("step %d: baseline %d by %s (%v, %v), want %d by %s", i, got, by, ok, err, tc.want, tc.wantBy)
		}
	}
}

// TestUpsertModel inserts the spec, then replaces it.
func TestUpsertModel(t *testing.T) {
	t.Parallel()
	s, conn := newStore(t)
	spec, err := fit.ParseSpec([]byte(specYAML))
	if err != nil {
		t.Fatal(err)
	}
	if err := s.UpsertModel(ctxT(t), "m", spec); err != nil {
		t.Fatal(err)
	}
	spec.Response = "y2"
	if err := s.UpsertModel(ctxT(t), "m", spec); err != nil {
		t.Fatal(err)
	}
	var response string
	if err := conn.QueryRow(ctxT(t), `SELECT spec->>'response' FROM models WHERE name = 'm'`).Scan(&response); err != nil || response != "y2" {
		t.Errorf("stored response %q, %v", response, err)
	}
	if n := count(t, conn, `SELECT count(*) FROM models`); n != 1 {
		t.Errorf("%d model rows", n)
	}
	if err := s.UpsertModel(ctxT(t), "m", nil); err == nil || !strings.Contains(err.Error(), `"m"`) {
		t.Errorf("nil spec: %v", err)
	}
}

// TestOpenNeedsMigratedSchema says to run migrate.
func TestOpenNeedsMigratedSchema(t *testing.T) {
	t.Parallel()
	url, schema := pgtest.Schema(t)
	_, err := history.Open(ctxT(t), url, schema)
	if err == nil || !strings.Contains(err.Error(), "curvewatch migrate") || !strings.Contains(err.Error(), schema) {
		t.Errorf("Open on an empty schema: %v", err)
	}
	if _, err := history.Open(ctxT(t), url, "bad-name"); err == nil {
		t.Error("Open accepted schema bad-name")
	}
}
