package fit

import (
	"errors"
	"math"
	"reflect"
	"slices"
	"testing"

	"go.yaml.in/yaml/v3"
)

// FuzzParseSpec feeds ParseSpec arbitrary bytes, seeded with the golden
// specs and the error table. ParseSpec must not panic; what it rejects it
// rejects with a *SpecError; what it accepts must satisfy every promise of
// its doc comment and read back the same when written out again.
func FuzzParseSpec(f *testing.F) {
	for _, data := range readSpecGoldens(f) {
		f.Add(data)
	}
	for _, tc := range specErrorCases {
		f.Add([]byte(tc.in))
	}
	for _, in := range specFuzzSeeds {
		f.Add([]byte(in))
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		s, err := ParseSpec(data)
		if err != nil {
			checkSpecError(t, s, err)
			return
		}
		checkSpec(t, s)
		again, err := ParseSpec(writeSpec(t, s))
		if err != nil {
			t.Fatalf("the accepted spec, written out, is rejected: %v\nspec: %+v", err, s)
		}
		forgetLines(s)
		forgetLines(again)
		if !reflect.DeepEqual(s, again) {
			t.Fatalf("the spec changed when written out and read back:\nfirst  %+v\nsecond %+v", s, again)
		}
	})
}

// specFuzzSeeds are small accepted specs using the newer keys (by, shrink,
// per-margin surface bases and periods, serial), so that mutations start
// from inside each rule as well as from the goldens.
var specFuzzSeeds = []string{
	specHead + "terms:\n  - curve: x\n    by: site\n  - factor: site\n    shrink: true\n",
	specHead + "terms: [{curve: x, by: g, smoothing: 1}, {curve: z, by: g}, {factor: g, shrink: false}]\n",
	specHead + "terms:\n  - surface: [h, x]\n    basis: [cyclic, pspline]\n    period: [[0, 24], null]\n",
	specHead + "terms:\n  - surface: [x, h]\n    basis: [cubic, cyclic]\n    knots: quantile\n    size: [3, 4]\n    period: [~, [0, 1]]\n",
	specHead + "terms:\n  - surface: [h, d]\n    basis: cyclic\n    period: [[0, 24], [1, 366]]\n",
	specHead + "terms: [{curve: t}]\nserial: {order: t}\n",
	specHead + "terms: [{linear: x}]\nserial:\n  order: t\n  rho: -0.5\n  gap: 2\n",
	specHead + "terms: [{linear: x}]\nserial: {order: t, rho: estimate, gap: 0.25}\n",
}

// checkSpecError checks what ParseSpec returns for a spec it rejects.
func checkSpecError(t *testing.T, s *Spec, err error) {
	t.Helper()
	var se *SpecError
	if !errors.As(err, &se) || len(se.Problems) == 0 {
		t.Fatalf("error %T %q is not a *SpecError with problems", err, err)
	}
	if s != nil {
		t.Fatal("a spec returned with an error")
	}
	for i, p := range se.Problems {
		if p.Line < 0 || p.Message == "" {
			t.Fatalf("problem %d is malformed: %+v", i, p)
		}
		if i > 0 && p.Line < se.Problems[i-1].Line {
			t.Fatalf("problems out of line order: %v", err)
		}
	}
}

// checkSpec checks the promises ParseSpec makes about a spec it accepts.
func checkSpec(t *testing.T, s *Spec) {
	t.Helper()
	if s.Name == "" || s.Response == "" || len(s.Terms) == 0 {
		t.Fatalf("accepted without name, response or terms: %+v", s)
	}
	if !slices.Contains(allowedLinks(s.Family), s.Link) {
		t.Fatalf("family %q with link %q", s.Family, s.Link)
	}
	if s.Selection != REML && s.Selection != GCV {
		t.Fatalf("selection %q", s.Selection)
	}
	roles := map[string]bool{s.Response: true}
	if s.Weights != "" {
		roles[s.Weights] = true
	}
	if s.Offset != "" {
		roles[s.Offset] = true
	}
	curves := map[string]bool{}
	for i, term := range s.Terms {
		checkTerm(t, i, term)
		for _, col := range append(slices.Clone(term.Columns), term.By) {
			if roles[col] {
				t.Fatalf("terms[%d] uses the column %q of the response, weights or offset", i, col)
			}
		}
		if term.Kind == Curve {
			if curves[term.Columns[0]] {
				t.Fatalf("terms[%d]: a second curve of %q", i, term.Columns[0])
			}
			curves[term.Columns[0]] = true
		}
	}
	if sr := s.Serial; sr != nil {
		okRho := sr.Estimate && sr.Rho == 0 || !sr.Estimate && sr.Rho > -1 && sr.Rho < 1
		if sr.Order == "" || roles[sr.Order] || !okRho || !(sr.Gap >= 0) || math.IsInf(sr.Gap, 0) ||
			s.Family != Gaussian || s.Link != Identity {
			t.Fatalf("serial %+v with family %s, link %s", *sr, s.Family, s.Link)
		}
	}
	numeric, text := s.Columns()
	for _, col := range text {
		if slices.Contains(numeric, col) {
			t.Fatalf("column %q is read both as numbers and as text", col)
		}
	}
	if err := s.CheckColumns(append(numeric, text...)); err != nil {
		t.Fatalf("CheckColumns(Columns()) = %v", err)
	}
	for key, v := range s.Watch {
		var ok bool
		switch key {
		case "against":
			ok = v == "baseline" || v == "previous"
		case "practical_shift", "deviance_increase":
			x, isFloat := v.(float64)
			ok = isFloat && x > 0 && !math.IsInf(x, 0)
		case "level":
			x, isFloat := v.(float64)
			ok = isFloat && x > 0 && x < 1
		case "confirm_runs":
			n, isInt := v.(int)
			ok = isInt && n >= 1
		}
		if !ok {
			t.Fatalf("watch %s = %#v", key, v)
		}
	}
}

// checkTerm checks one accepted term.
func checkTerm(t *testing.T, i int, term TermSpec) {
	t.Helper()
	want := 1
	if term.Kind == Surface {
		want = 2
	}
	if len(term.Columns) != want || slices.Contains(term.Columns, "") ||
		(want == 2 && term.Columns[0] == term.Columns[1]) {
		t.Fatalf("terms[%d]: %s with columns %q", i, term.Kind, term.Columns)
	}
	for _, v := range append(slices.Clone(term.Smoothing), term.Period...) {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			t.Fatalf("terms[%d]: non-finite smoothing or period: %+v", i, term)
		}
	}
	for _, v := range term.Smoothing {
		if v <= 0 {
			t.Fatalf("terms[%d]: smoothing %v", i, term.Smoothing)
		}
	}
	if term.Kind != Curve && term.By != "" || term.Kind != Factor && term.Shrink {
		t.Fatalf("terms[%d]: %s with by or shrink: %+v", i, term.Kind, term)
	}
	if term.Kind != Surface && (term.Bases != nil || term.Periods != nil) {
		t.Fatalf("terms[%d]: %s with per-margin options: %+v", i, term.Kind, term)
	}
	switch term.Kind {
	case Linear, Factor:
		if term.Basis != "" || term.Size != nil || term.Knots != "" || term.Period != nil || term.Smoothing != nil {
			t.Fatalf("terms[%d]: %s with curve options: %+v", i, term.Kind, term)
		}
	case Curve:
		okBasis := term.Basis == Cubic || term.Basis == PSpline || term.Basis == Cyclic
		okKnots := term.Knots == QuantileKnots || term.Knots == EvenKnots || term.Knots == AllKnots
		okSize := len(term.Size) == 1 && (term.Knots == AllKnots) == (term.Size[0] == 0) &&
			(term.Size[0] == 0 || term.Size[0] >= term.Basis.MinSize() && term.Size[0] <= MaxBasisSize)
		okPeriod := (term.Basis == Cyclic) == (term.Period != nil) &&
			(term.Period == nil || len(term.Period) == 2 && term.Period[0] < term.Period[1])
		if !okBasis || !okKnots || term.Basis == PSpline && term.Knots != EvenKnots ||
			!okSize || !okPeriod || len(term.Smoothing) > 1 || term.By == term.Columns[0] {
			t.Fatalf("terms[%d]: bad curve %+v", i, term)
		}
	case Surface:
		checkSurface(t, i, term)
	default:
		t.Fatalf("terms[%d]: kind %q", i, term.Kind)
	}
}

// checkSurface checks one accepted surface.
func checkSurface(t *testing.T, i int, term TermSpec) {
	t.Helper()
	if len(term.Bases) != 2 || len(term.Size) != 2 || term.Period != nil ||
		term.Smoothing != nil && len(term.Smoothing) != 2 {
		t.Fatalf("terms[%d]: bad surface %+v", i, term)
	}
	common := Basis("")
	if term.Bases[0] == term.Bases[1] {
		common = term.Bases[0]
	}
	cyclic := slices.Contains(term.Bases, Cyclic)
	okBasis := term.Basis == common
	okKnots := term.Knots == EvenKnots || term.Knots == QuantileKnots && !slices.Contains(term.Bases, PSpline)
	okSize := term.Size[0]*term.Size[1] <= MaxBasisSize
	okPeriods := cyclic == (term.Periods != nil) && (term.Periods == nil || len(term.Periods) == 2)
	for j, b := range term.Bases {
		okBasis = okBasis && (b == Cubic || b == PSpline || b == Cyclic)
		okSize = okSize && term.Size[j] >= b.MinSize()
		if okPeriods && cyclic {
			pj := term.Periods[j]
			okPeriods = (b == Cyclic) == (pj != nil) &&
				(pj == nil || len(pj) == 2 && pj[0] < pj[1] && !math.IsInf(pj[0], 0) && !math.IsInf(pj[1], 0))
		}
	}
	if !okBasis || !okKnots || !okSize || !okPeriods {
		t.Fatalf("terms[%d]: bad surface %+v", i, term)
	}
}

// writeSpec writes s as spec YAML, every default spelt out.
func writeSpec(t *testing.T, s *Spec) []byte {
	t.Helper()
	m := map[string]any{
		"name":      s.Name,
		"response":  s.Response,
		"family":    string(s.Family),
		"link":      string(s.Link),
		"selection": string(s.Selection),
	}
	if s.Weights != "" {
		m["weights"] = s.Weights
	}
	if s.Offset != "" {
		m["offset"] = s.Offset
	}
	if s.Watch != nil {
		m["watch"] = s.Watch
	}
	if sr := s.Serial; sr != nil {
		serial := map[string]any{"order": sr.Order, "rho": sr.Rho}
		if sr.Estimate {
			serial["rho"] = "estimate"
		}
		if sr.Gap > 0 {
			serial["gap"] = sr.Gap
		}
		m["serial"] = serial
	}
	terms := make([]map[string]any, len(s.Terms))
	for i, term := range s.Terms {
		tm := map[string]any{}
		switch term.Kind {
		case Surface:
			tm["surface"] = term.Columns
			tm["size"] = term.Size
			tm["knots"] = string(term.Knots)
			// One name when the margins agree, else a list: both forms.
			tm["basis"] = []string{string(term.Bases[0]), string(term.Bases[1])}
			if term.Basis != "" {
				tm["basis"] = string(term.Basis)
			}
			if term.Periods != nil {
				period := make([]any, 2)
				for j, pj := range term.Periods {
					if pj != nil {
						period[j] = pj
					}
				}
				tm["period"] = period
			}
		default:
			tm[string(term.Kind)] = term.Columns[0]
			if term.Kind == Curve && term.Knots != AllKnots {
				tm["size"] = term.Size[0]
			}
			if term.Basis != "" {
				tm["basis"] = string(term.Basis)
				tm["knots"] = string(term.Knots)
			}
		}
		if term.Period != nil {
			tm["period"] = term.Period
		}
		if term.Smoothing != nil {
			tm["smoothing"] = term.Smoothing
		}
		if term.By != "" {
			tm["by"] = term.By
		}
		if term.Shrink {
			tm["shrink"] = true
		}
		terms[i] = tm
	}
	m["terms"] = terms
	out, err := yaml.Marshal(m)
	if err != nil {
		t.Fatalf("yaml.Marshal: %v", err)
	}
	return out
}
