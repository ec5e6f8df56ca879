package fit_test

import (
	"context"
	"encoding/json"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// mustFit fits or fails the test.
func mustFit(t testing.TB, spec *fit.Spec, data *fit.Table, opt fit.Options) *fit.Document {
	t.Helper()
	doc, err := fit.Fit(context.Background(), spec, data, opt)
	if err != nil {
		t.Fatal(err)
	}
	return doc
}

// cloneDoc deep-copies a document through its JSON form (as documents
// travel between runs).
func cloneDoc(t testing.TB, doc *fit.Document) *fit.Document {
	t.Helper()
	b, err := json.Marshal(doc)
	if err != nil {
		t.Fatal(err)
	}
	var out fit.Document
	if err := json.Unmarshal(b, &out); err != nil {
		t.Fatal(err)
	}
	return &out
}

// xyTable is rows of x on [0, 10] (from rows in baddata_test.go) with a
// time column t starting at t0, and y shifted by dy.
func xyTable(n int, seed uint64, t0, dy float64) *fit.Table {
	x, y := rows(n, seed)
	tc := make([]float64, n)
	for i := range tc {
		tc[i] = t0 + float64(i)
		y[i] += dy
	}
	return &fit.Table{Numeric: map[string][]float64{"x": x, "y": y, "t": tc}}
}

// sub returns rows [lo, hi) of a table.
func sub(tb *fit.Table, lo, hi int) *fit.Table {
	out := &fit.Table{Numeric: map[string][]float64{}}
	for k, c := range tb.Numeric {
		out.Numeric[k] = c[lo:hi]
	}
	return out
}

// Every kind of input that cannot give an honest verdict is refused with
// an error saying which, never compared.
func TestCompareBadInputs(t *testing.T) {
	base := curveSpec(fit.Gaussian, fit.Identity, curve("x", 8))
	ref := mustFit(t, base, xyTable(300, 1, 0, 0), fit.Options{})
	cand := mustFit(t, base, xyTable(300, 2, 1000, 0), fit.Options{})

	other := func(spec *fit.Spec, data *fit.Table) *fit.Document { return mustFit(t, spec, data, fit.Options{}) }
	mutated := func(mod func(d *fit.Document)) *fit.Document {
		d := cloneDoc(t, cand)
		mod(d)
		return d
	}
	// An unconverged fit: one PIRLS step of a poisson model.
	poisson := curveSpec(fit.Poisson, fit.Log, curve("x", 8))
	unconverged, err := fit.Fit(context.Background(), poisson, counted(xyTable(300, 3, 0, 0)), fit.Options{MaxIterations: 1})
	if !errors.Is(err, fit.ErrNotConverged) {
		t.Fatalf("one PIRLS step: %v, want ErrNotConverged", err)
	}
	converged := mustFit(t, poisson, counted(xyTable(300, 4, 0, 0)), fit.Options{})
	whole := xyTable(400, 5, 0, 0)
	halfA := mustFit(t, base, sub(whole, 0, 300), fit.Options{})
	halfB := mustFit(t, base, sub(whole, 100, 400), fit.Options{})
	winA := mustFit(t, base, xyTable(300, 6, 0, 0), fit.Options{TimeColumn: "t"})
	winB := mustFit(t, base, xyTable(300, 7, 200, 0), fit.Options{TimeColumn: "t"})
	gamma := curveSpec(fit.Gamma, fit.Log, curve("x", 8))
	shifted := xyTable(300, 8, 0, 0)
	for i := range shifted.Numeric["x"] {
		shifted.Numeric["x"][i] += 20
	}

	tests := []struct {
		name      string
		ref, cand *fit.Document
		tol       fit.Tolerance
		reason    string
		want      string // substring of the error
	}{
		{"other basis", ref, other(curveSpec(fit.Gaussian, fit.Identity, fit.TermSpec{Kind: fit.Curve, Columns: []string{"x"}, Basis: fit.PSpline, Knots: fit.QuantileKnots, Size: []int{8}}), xyTable(300, 2, 0, 0)),
			fit.Tolerance{}, fit.ReasonStructure, "term 1 differs in basis (cubic[], pspline[])"},
		{"other size", ref, other(curveSpec(fit.Gaussian, fit.Identity, curve("x", 6)), xyTable(300, 2, 0, 0)),
			fit.Tolerance{}, fit.ReasonStructure, "term 1 differs in size ([8], [6])"},
		{"other terms", ref, other(curveSpec(fit.Gaussian, fit.Identity, linear("x")), xyTable(300, 2, 0, 0)),
			fit.Tolerance{}, fit.ReasonStructure, "term 1 differs in kind (curve, linear)"},
		{"more terms", ref, other(curveSpec(fit.Gaussian, fit.Identity, curve("x", 8), linear("t")), xyTable(300, 2, 0, 0)),
			fit.Tolerance{}, fit.ReasonStructure, "number of terms 1 in the reference, 2 in the candidate"},
		{"other family", ref, other(gamma, xyTable(300, 2, 0, 3)),
			fit.Tolerance{}, fit.ReasonStructure, "family gaussian in the reference, gamma in the candidate"},
		{"other response", ref, other(&fit.Spec{Name: "m", Response: "t", Family: fit.Gaussian, Link: fit.Identity, Selection: fit.REML, Terms: []fit.TermSpec{curve("x", 8)}}, xyTable(300, 2, 0, 0)),
			fit.Tolerance{}, fit.ReasonStructure, `response "y" in the reference, "t" in the candidate`},
		{"unconverged reference", unconverged, converged,
			fit.Tolerance{}, fit.ReasonConvergence, "the reference fit: the fit did not converge"},
		{"unconverged candidate", ref, mutated(func(d *fit.Document) { d.Convergence.Converged = false }),
			fit.Tolerance{}, fit.ReasonConvergence, "the candidate fit: the fit did not converge"},
		{"newer format", ref, mutated(func(d *fit.Document) { d.Format = "curvewatch-fit/2" }),
			fit.Tolerance{}, fit.ReasonFormat, `document format "curvewatch-fit/2" is unknown or newer`},
		{"no format", mutated(func(d *fit.Document) { d.Format = "" }), cand,
			fit.Tolerance{}, fit.ReasonFormat, "the reference fit: the document has no format version"},
		{"missing covariance", ref, mutated(func(d *fit.Document) { d.Covariance = nil }),
			fit.Tolerance{}, fit.ReasonDamaged, "lacks the covariance of its coefficients"},
		{"no common range", ref, other(base, shifted),
			fit.Tolerance{}, fit.ReasonRange, `term "x": the fits share no range of "x"`},
		{"same rows", ref, cloneDoc(t, ref),
			fit.Tolerance{}, fit.ReasonOverlap, "used the same rows"},
		{"same rows, overlap allowed", ref, cloneDoc(t, ref),
			fit.Tolerance{AllowOverlap: true}, fit.ReasonOverlap, "there is nothing to compare"},
		{"shared rows", halfA, halfB,
			fit.Tolerance{}, fit.ReasonOverlap, "the fits share rows (estimated resemblance"},
		{"overlapping windows", winA, winB,
			fit.Tolerance{}, fit.ReasonOverlap, `time windows on "t" overlap ([0, 299] and [200, 499])`},
		{"no row sketch", ref, mutated(func(d *fit.Document) { d.Data.Sketch = nil }),
			fit.Tolerance{}, fit.ReasonOverlap, "lacks its row sketch"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			rep, err := fit.Compare(tc.ref, tc.cand, tc.tol)
			var ce *fit.CompareError
			if !errors.As(err, &ce) {
				t.Fatalf("got report %v and error %v; want a CompareError", rep != nil, err)
			}
			if ce.Reason != tc.reason || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error (%s) %q; want reason %s and %q", ce.Reason, err, tc.reason, tc.want)
			}
		})
	}
	// Overlapping windows with overlap allowed: compared, and said so.
	rep, err := fit.Compare(winA, winB, fit.Tolerance{AllowOverlap: true})
	if err != nil || !rep.Overlap.WindowsOverlap || !strings.Contains(rep.Overlap.Correction, "no shared rows") {
		t.Errorf("overlapping windows allowed: %v, %+v", err, rep)
	}
	// A bad tolerance is an error too.
	if _, err := fit.Compare(ref, cand, fit.Tolerance{Level: 1.5}); err == nil || !strings.Contains(err.Error(), "level 1.5") {
		t.Errorf("level 1.5: %v", err)
	}
	if _, err := fit.Compare(ref, cand, fit.Tolerance{Multiplicity: "bonferroni"}); err == nil || !strings.Contains(err.Error(), "bonferroni") {
		t.Errorf("multiplicity bonferroni: %v", err)
	}
}

// counted turns y into counts round(exp(y/2)) (for poisson fits).
func counted(tb *fit.Table) *fit.Table {
	for i, v := range tb.Numeric["y"] {
		tb.Numeric["y"][i] = math.Round(math.Exp(v / 2))
	}
	return tb
}

// The tolerance comes from the spec's watch section, with the documented
// defaults for absent keys (DESIGN.md).
func TestToleranceFromSpec(t *testing.T) {
	spec, err := fit.ParseSpec([]byte("name: m\nresponse: y\nterms:\n  - curve: x\nwatch:\n  practical_shift: 0.2\n  level: 0.95\n  confirm_runs: 3\n"))
	if err != nil {
		t.Fatal(err)
	}
	got := fit.ToleranceFromSpec(spec)
	// The defaults are the product's own (DESIGN.md, the watch section):
	// common practice (no source).
	want := fit.Tolerance{PracticalShift: 0.2, Level: 0.95, DevianceIncrease: 0.15, NoiseRatio: 1.25, Multiplicity: "holm"}
	if got != want {
		t.Errorf("from the spec: %+v, want %+v", got, want)
	}
	// A document's spec decoded from JSON holds the same keys as float64.
	var decoded fit.Spec
	if err := json.Unmarshal([]byte(`{"watch":{"deviance_increase":0.3,"level":0.9}}`), &decoded); err != nil {
		t.Fatal(err)
	}
	got = fit.ToleranceFromSpec(&decoded)
	want = fit.Tolerance{PracticalShift: 0.5, Level: 0.9, DevianceIncrease: 0.3, NoiseRatio: 1.25, Multiplicity: "holm"}
	if got != want {
		t.Errorf("from JSON: %+v, want %+v", got, want)
	}
	defaults := fit.Tolerance{PracticalShift: 0.5, Level: 0.99, DevianceIncrease: 0.15, NoiseRatio: 1.25, Multiplicity: "holm"}
	if got := fit.ToleranceFromSpec(nil); got != defaults {
		t.Errorf("nil spec: %+v", got)
	}
	if got := (fit.Tolerance{Level: 0.9, AllowOverlap: true}).WithDefaults(); got != (fit.Tolerance{PracticalShift: 0.5, Level: 0.9, DevianceIncrease: 0.15, NoiseRatio: 1.25, Multiplicity: "holm", AllowOverlap: true}) {
		t.Errorf("WithDefaults: %+v", got)
	}
}

// verdicts returns each term's verdict and the level's.
func verdicts(rep *fit.ShiftReport) map[string]string {
	out := map[string]string{"level": rep.Level.Verdict}
	for _, ts := range rep.Terms {
		out[ts.Name] = ts.Verdict
	}
	return out
}

// A change in the covariate mix moves a data-centred curve up or down
// without changing the relationship: the documents' own grids differ by
// many standard errors, but the re-centred comparison finds no shift, and
// the level (compared through the intercept and the curves' grid means)
// is unchanged too. Known truth: f₁ = 0.5 sin 2πx₁; with x₁ drawn with
// density 2x₁ its data mean is ∫ x sin(2πx) dx = −1/(2π) ≈ −0.159 instead
// of 0.
func TestCompareRecentring(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	const n = 50000
	spec := threeCurves(fit.Gaussian)
	uniform := world{family: fit.Gaussian, sigma: 0.5}
	skewed := world{family: fit.Gaussian, sigma: 0.5, mix: math.Sqrt}
	ref := mustFit(t, spec, uniform.window(rand.New(rand.NewPCG(600, 1)), n), fit.Options{})
	cand := mustFit(t, spec, skewed.window(rand.New(rand.NewPCG(600, 2)), n), fit.Options{})
	gr, gc := ref.Terms[0].Grid, cand.Terms[0].Grid
	mid := len(gr.X) / 2
	raw := gc.Fit[mid] - gr.Fit[mid]
	// source: simulation with known truth (the centring constants differ by 1/(2π)).
	if math.Abs(raw-1/(2*math.Pi)) > 0.03 {
		t.Errorf("data-centred curves differ by %.3f at x1 = %.2f, want about %.3f", raw, gr.X[mid], 1/(2*math.Pi))
	}
	rep, err := fit.Compare(ref, cand, fit.Tolerance{Level: 0.99, PracticalShift: 0.05})
	if err != nil {
		t.Fatal(err)
	}
	for name, v := range verdicts(rep) {
		if v == fit.VerdictShifted {
			t.Errorf("%s: %s under a change of covariate mix only (report %+v)", name, v, rep.Terms)
		}
	}
	// The re-centred difference at the same point is noise: the
	// standard error there is about 0.01.
	if x1 := rep.Terms[0]; x1.Score > 1 || math.Abs(x1.Grid.Delta[mid]) > 0.04 {
		t.Errorf("x1: score %.2f, re-centred difference %.3f at x1 = %.2f; want inside the band and far below the raw %.3f",
			x1.Score, x1.Grid.Delta[mid], x1.Grid.X[mid], raw)
	}
}

// A change of level alone (the response moves by 0.3 everywhere) is found
// by the level comparison and not mistaken for a change of shape (known
// truth; n = 2000 per window).
func TestCompareLevelShift(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	spec := threeCurves(fit.Gaussian)
	same := world{family: fit.Gaussian, sigma: 0.5}
	up := world{family: fit.Gaussian, sigma: 0.5, change: func(float64) float64 { return 0.3 }}
	ref := mustFit(t, spec, same.window(rand.New(rand.NewPCG(601, 1)), 2000), fit.Options{})
	cand := mustFit(t, spec, up.window(rand.New(rand.NewPCG(601, 2)), 2000), fit.Options{})
	rep, err := fit.Compare(ref, cand, fit.Tolerance{Level: 0.99, PracticalShift: 0.1})
	if err != nil {
		t.Fatal(err)
	}
	lv := rep.Level
	// source: simulation with known truth (a level shift of 0.3).
	if math.Abs(lv.Delta-0.3) > 4*lv.SE || lv.Verdict != fit.VerdictShifted || !rep.Breach {
		t.Errorf("level %+v; want a breach of about 0.3", lv)
	}
	for _, ts := range rep.Terms {
		if ts.Verdict != fit.VerdictStable {
			t.Errorf("%s: %s (score %.2f) under a pure level change", ts.Name, ts.Verdict, ts.Score)
		}
	}
	if rep.Tests != 4 {
		t.Errorf("%d tests in the Holm family, want 4 (three curves and the level)", rep.Tests)
	}
	// The same documents always give the same report (fixed seeds).
	again, err := fit.Compare(ref, cand, fit.Tolerance{Level: 0.99, PracticalShift: 0.1})
	if err != nil {
		t.Fatal(err)
	}
	a, _ := json.Marshal(rep)
	b, _ := json.Marshal(again)
	if string(a) != string(b) {
		t.Error("two comparisons of the same documents differ")
	}
}

// mixedTable simulates a curve in x, a line in z (slope) and a factor site
// whose level B is offset by siteB; sites lists the levels drawn.
func mixedTable(rng *rand.Rand, n int, slope, siteB float64, sites []string) *fit.Table {
	x, z, y := make([]float64, n), make([]float64, n), make([]float64, n)
	site := make([]string, n)
	for i := range y {
		x[i], z[i] = rng.Float64(), 10+10*rng.Float64()
		site[i] = sites[i%len(sites)]
		eff := map[string]float64{"A": 0, "B": siteB, "C": -0.4, "D": 0.2}[site[i]]
		y[i] = math.Sin(2*math.Pi*x[i]) + slope*z[i] + eff + 0.5*rng.NormFloat64()
	}
	return &fit.Table{Numeric: map[string][]float64{"x": x, "z": z, "y": y}, Text: map[string][]string{"site": site}}
}

// Linear and factor terms: a slope change and a change of one level are
// found (z-tests), the linear term's size is the slope difference times
// half the common range, and a level in one fit only is a warning (known
// truth; n = 3000 per window).
func TestCompareLinearAndFactor(t *testing.T) {
	spec := curveSpec(fit.Gaussian, fit.Identity, curve("x", 8), linear("z"), factor("site"))
	ref := mustFit(t, spec, mixedTable(rand.New(rand.NewPCG(602, 1)), 3000, 0.1, 0.5, []string{"A", "B", "C"}), fit.Options{})
	cand := mustFit(t, spec, mixedTable(rand.New(rand.NewPCG(602, 2)), 3000, 0.2, 1.5, []string{"A", "B", "C", "D"}), fit.Options{})
	rep, err := fit.Compare(ref, cand, fit.Tolerance{Level: 0.99, PracticalShift: 0.3})
	if err != nil {
		t.Fatal(err)
	}
	v := verdicts(rep)
	// source: simulation with known truth (slope 0.1 → 0.2 over z ∈ [10, 20],
	// a shift of 0.5 at the ends of the centred line; level B 0.5 → 1.5).
	if v["z"] != fit.VerdictShifted || v["site"] != fit.VerdictShifted || v["x"] != fit.VerdictStable {
		t.Errorf("verdicts %v; want z and site shifted, x stable", v)
	}
	z, site := rep.Terms[1], rep.Terms[2]
	lo, hi := z.Common[0][0], z.Common[0][1]
	dz := *cand.Terms[1].Estimate - *ref.Terms[1].Estimate
	if math.Abs(z.Size-math.Abs(dz)*(hi-lo)/2) > 1e-12 || math.Abs(z.Size-0.5) > 0.1 {
		t.Errorf("linear size %.4f; want |Δslope|·w/2 = %.4f, near 0.5", z.Size, math.Abs(dz)*(hi-lo)/2)
	}
	b, c := site.Levels["B"], site.Levels["C"]
	if math.Abs(b.Delta-1) > 4*b.SE || b.Verdict != fit.VerdictShifted || c.Verdict != fit.VerdictStable {
		t.Errorf("site levels B %+v, C %+v; want B shifted by about 1, C stable", b, c)
	}
	if _, ok := site.Levels["D"]; ok || !strings.Contains(strings.Join(rep.Warnings, "\n"), "D (candidate only)") {
		t.Errorf("level D in the candidate only: levels %v, warnings %q", site.Levels, rep.Warnings)
	}
}

// Surfaces are compared on the common rectangle, leaving out where either
// fit had no data: a candidate without data in one corner gets those grid
// points excluded; an unchanged surface is stable and a changed one is
// shifted (known truth; n = 3000 per window).
func TestCompareSurface(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	truth := func(a, b float64) float64 { return math.Sin(3*a) * math.Cos(3*b) }
	gen := func(seed uint64, corner bool, change float64) *fit.Table {
		rng := rand.New(rand.NewPCG(603, seed))
		const n = 3000
		var x1, x2, y []float64
		for len(y) < n {
			a, b := rng.Float64(), rng.Float64()
			if corner && a > 0.7 && b > 0.7 {
				continue
			}
			x1, x2 = append(x1, a), append(x2, b)
			y = append(y, truth(a, b)+change*a*b+0.3*rng.NormFloat64())
		}
		return &fit.Table{Numeric: map[string][]float64{"x1": x1, "x2": x2, "y": y}}
	}
	spec := curveSpec(fit.Gaussian, fit.Identity, fit.TermSpec{Kind: fit.Surface, Columns: []string{"x1", "x2"}, Basis: fit.PSpline, Knots: fit.EvenKnots, Size: []int{6, 6}})
	ref := mustFit(t, spec, gen(1, false, 0), fit.Options{})
	same := mustFit(t, spec, gen(2, true, 0), fit.Options{})
	moved := mustFit(t, spec, gen(3, true, 1.5), fit.Options{})
	rep, err := fit.Compare(ref, same, fit.Tolerance{Level: 0.99, PracticalShift: 0})
	if err != nil {
		t.Fatal(err)
	}
	s := rep.Terms[0]
	if s.Surface == nil || !s.Surface.Excluded[29][29] || s.Surface.Excluded[0][0] || s.Surface.SE[29][29] != 0 {
		t.Fatalf("surface grid %+v; want the far corner excluded", s.Surface)
	}
	if _, err := json.Marshal(rep); err != nil {
		t.Errorf("the report does not encode: %v", err)
	}
	// source: simulation with known truth (no change).
	if s.Verdict != fit.VerdictStable {
		t.Errorf("unchanged surface: %s (score %.2f)", s.Verdict, s.Score)
	}
	rep, err = fit.Compare(ref, moved, fit.Tolerance{Level: 0.99, PracticalShift: 0.2})
	if err != nil {
		t.Fatal(err)
	}
	// source: simulation with known truth (a change 1.5·x₁x₂, which after
	// re-centring still spans more than 0.5 over the common region).
	if s := rep.Terms[0]; s.Verdict != fit.VerdictShifted || s.OutsideFraction == 0 || s.Outside != nil {
		t.Errorf("changed surface: %s (score %.2f, outside %.2f)", s.Verdict, s.Score, s.OutsideFraction)
	}
}

// Curves per level of a factor are compared level by level; a level with
// a curve in one fit only is a warning, not a failure.
func TestCompareByLevel(t *testing.T) {
	spec := curveSpec(fit.Gaussian, fit.Identity,
		fit.TermSpec{Kind: fit.Curve, Columns: []string{"x"}, Basis: fit.Cubic, Knots: fit.QuantileKnots, Size: []int{8}, By: "site"},
		factor("site"))
	ref := mustFit(t, spec, sites(rand.New(rand.NewPCG(604, 1)), 1500, []string{"S05", "S07", "S09"}, []float64{1, 2, 0}, []float64{0, 0.5, -0.5}), fit.Options{})
	cand := mustFit(t, spec, sites(rand.New(rand.NewPCG(604, 2)), 1000, []string{"S05", "S07"}, []float64{1, 3, 0}, []float64{0, 0.5, -0.5}), fit.Options{})
	rep, err := fit.Compare(ref, cand, fit.Tolerance{Level: 0.99, PracticalShift: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	v := verdicts(rep)
	// source: simulation with known truth (S07's amplitude 2 → 3, S05's
	// unchanged).
	if v["x[site=S05]"] != fit.VerdictStable || v["x[site=S07]"] != fit.VerdictShifted {
		t.Errorf("verdicts %v; want S05 stable and S07 shifted", v)
	}
	if _, ok := v["x[site=S09]"]; ok || !strings.Contains(strings.Join(rep.Warnings, "\n"), `level "S09" of "site" has a curve in the reference fit only`) {
		t.Errorf("S09 in the reference only: verdicts %v, warnings %q", v, rep.Warnings)
	}
}

// A sensor going noisy: the scale ratio and its F test find it; it is
// reported but does not breach (known truth: sd 0.5 → 0.75, a variance
// ratio of 2.25; with the same sd the noise is steady).
func TestCompareNoise(t *testing.T) {
	spec := threeCurves(fit.Gaussian)
	gen := func(seed uint64, sd float64) *fit.Table {
		w := world{family: fit.Gaussian, sigma: sd}
		return w.window(rand.New(rand.NewPCG(605, seed)), 1500)
	}
	ref := mustFit(t, spec, gen(1, 0.5), fit.Options{})
	for _, tc := range []struct {
		sd      float64
		verdict string
	}{{0.5, "steady"}, {0.75, "noisier"}} {
		cand := mustFit(t, spec, gen(2, tc.sd), fit.Options{})
		rep, err := fit.Compare(ref, cand, fit.Tolerance{Level: 0.99, PracticalShift: 10})
		if err != nil {
			t.Fatal(err)
		}
		want := tc.sd * tc.sd / 0.25
		// source: simulation with known truth; the ratio of two variance
		// estimates on about 1500 degrees of freedom each is within 15% of
		// the true ratio (its sd is about √(4/1500) ≈ 5%).
		if rep.Noise == nil || rep.Noise.Verdict != tc.verdict || math.Abs(rep.Noise.Ratio/want-1) > 0.15 || rep.Breach {
			t.Errorf("sd %.2f: noise %+v, breach %v; want %s near ratio %.2f and no breach", tc.sd, rep.Noise, rep.Breach, tc.verdict, want)
		}
	}
}

// With overlap allowed, the correction Var(Δ) ≈ (1 − s)(V_ref + V_cand)
// makes the standardised differences of fits sharing half their rows
// (J = 1/3, s = 1/2) have unit variance again; treated as independent they
// would have variance 1 − s = 0.5. 300 pairs of a linear model: the
// variance of 300 standard normals is within 0.25 of 1 (about 3 sds).
func TestCompareOverlapCorrection(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	spec := curveSpec(fit.Gaussian, fit.Identity, linear("z"))
	const pairs, n = 300, 900
	var sumSlope, sumLevel, shared float64
	for p := 0; p < pairs; p++ {
		rng := rand.New(rand.NewPCG(606, uint64(p)))
		z, y := make([]float64, n), make([]float64, n)
		for i := range y {
			z[i] = rng.Float64()
			y[i] = 1 + 2*z[i] + rng.NormFloat64()
		}
		all := &fit.Table{Numeric: map[string][]float64{"z": z, "y": y}}
		a := mustFit(t, spec, sub(all, 0, 600), fit.Options{})
		b := mustFit(t, spec, sub(all, 300, 900), fit.Options{})
		rep, err := fit.Compare(a, b, fit.Tolerance{Level: 0.95, PracticalShift: 0, AllowOverlap: true})
		if err != nil {
			t.Fatal(err)
		}
		if rep.Overlap.Correction == "" {
			t.Fatalf("pair %d: no correction noted for shared rows (%+v)", p, rep.Overlap)
		}
		zs := rep.Terms[0].Score * rep.Terms[0].Critical
		sumSlope += zs * zs / pairs
		sumLevel += rep.Level.Z * rep.Level.Z / pairs
		shared += rep.Overlap.Shared / pairs
	}
	t.Logf("mean shared fraction %.3f (true 0.5); var z: slope %.3f, level %.3f", shared, sumSlope, sumLevel)
	// source: Broder (1997) bottom-k resemblance, true J = 1/3 so s = 1/2;
	// the estimate from 128 hashes has an sd of about 0.04.
	if math.Abs(shared-0.5) > 0.05 {
		t.Errorf("mean estimated shared fraction %.3f, want 0.5", shared)
	}
	// source: simulation with known truth (no change), margin above.
	if math.Abs(sumSlope-1) > 0.25 || math.Abs(sumLevel-1) > 0.25 {
		t.Errorf("variance of the standardised differences: slope %.3f, level %.3f; want 1 ± 0.25", sumSlope, sumLevel)
	}
}

// Statistical versus practical significance (common practice (no
// source)): at n = 200 000 per window, a shift of 0.05 on the link scale
// over part of one curve is clearly real, but it stays below a practical
// shift of 0.1 and so does not breach; with a margin of 0.01 it does.
func TestCompareEquivalence(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	const n = 200000
	spec := curveSpec(fit.Gaussian, fit.Identity, curve("x1", 10), curve("x2", 10))
	same := world{family: fit.Gaussian, sigma: 0.5}
	tiny := world{family: fit.Gaussian, sigma: 0.5, change: bump(0.05)}
	ref := mustFit(t, spec, same.window(rand.New(rand.NewPCG(607, 1)), n), fit.Options{})
	cand := mustFit(t, spec, tiny.window(rand.New(rand.NewPCG(607, 2)), n), fit.Options{})
	rep, err := fit.Compare(ref, cand, fit.Tolerance{Level: 0.99, PracticalShift: 0.1})
	if err != nil {
		t.Fatal(err)
	}
	x1 := rep.Terms[0]
	t.Logf("x1: score %.2f, size %.4f, p %.2g; level Δ %.4f (se %.4f)", x1.Score, x1.Size, x1.PAdjusted, rep.Level.Delta, rep.Level.SE)
	// source: simulation with known truth (a change of at most 0.05).
	if x1.Verdict != fit.VerdictSmall || x1.Size > 0.1 || rep.Breach {
		t.Errorf("x1 %s (size %.4f), breach %v; want real but small, no breach", x1.Verdict, x1.Size, rep.Breach)
	}
	rep, err = fit.Compare(ref, cand, fit.Tolerance{Level: 0.99, PracticalShift: 0.01})
	if err != nil {
		t.Fatal(err)
	}
	if rep.Terms[0].Verdict != fit.VerdictShifted || !rep.Breach {
		t.Errorf("with a practical shift of 0.01: %s, breach %v", rep.Terms[0].Verdict, rep.Breach)
	}
}

// Factor levels are compared against the reference fit's baseline: a
// candidate whose own baseline differs (a new level sorts first) is
// re-based, so its effects and its level mean the same as the
// reference's; a candidate without the reference's baseline level cannot
// be re-based, and then neither the factor nor the model level is
// compared (known truth: level B 0.5 → 1.5, the rest unchanged).
func TestCompareFactorBaselines(t *testing.T) {
	spec := curveSpec(fit.Gaussian, fit.Identity, curve("x", 8), linear("z"), factor("site"))
	ref := mustFit(t, spec, mixedTable(rand.New(rand.NewPCG(608, 1)), 3000, 0.1, 0.5, []string{"A", "B", "C"}), fit.Options{})
	rebased := mustFit(t, spec, mixedTable(rand.New(rand.NewPCG(608, 2)), 4000, 0.1, 1.5, []string{"9", "A", "B", "C"}), fit.Options{})
	if rebased.Terms[2].Reference != "9" {
		t.Fatalf("candidate baseline %q, want 9", rebased.Terms[2].Reference)
	}
	rep, err := fit.Compare(ref, rebased, fit.Tolerance{Level: 0.99, PracticalShift: 0.3})
	if err != nil {
		t.Fatal(err)
	}
	site := rep.Terms[2]
	b, c := site.Levels["B"], site.Levels["C"]
	// source: simulation with known truth (B moves by 1, C and the level
	// do not).
	if math.Abs(b.Delta-1) > 4*b.SE || math.Abs(c.Delta) > 4*c.SE || site.Verdict != fit.VerdictShifted {
		t.Errorf("re-based levels B %+v, C %+v (verdict %s); want B shifted by about 1 and C unchanged", b, c, site.Verdict)
	}
	if rep.Level.Verdict != fit.VerdictStable || !strings.Contains(site.Note, `re-based from "9" to the reference's baseline "A"`) {
		t.Errorf("level %+v, note %q; want a stable level and the re-basing noted", rep.Level, site.Note)
	}
	if _, ok := site.Levels["9"]; ok {
		t.Error("level 9 is in the candidate only and must not be compared")
	}
	noBase := mustFit(t, spec, mixedTable(rand.New(rand.NewPCG(608, 3)), 3000, 0.1, 1.5, []string{"B", "C"}), fit.Options{})
	rep, err = fit.Compare(ref, noBase, fit.Tolerance{Level: 0.99, PracticalShift: 0.3})
	if err != nil {
		t.Fatal(err)
	}
	if rep.Terms[2].Verdict != fit.VerdictNotCompared || rep.Level.Verdict != fit.VerdictNotCompared || rep.Tests != 2 {
		t.Errorf("without the baseline level: site %s, level %s, %d tests; want both not compared and 2 tests", rep.Terms[2].Verdict, rep.Level.Verdict, rep.Tests)
	}
	if w := strings.Join(rep.Warnings, "\n"); !strings.Contains(w, `baseline level "A" is not estimated in the candidate`) {
		t.Errorf("warnings %q", w)
	}
}

// A shrunk factor's levels are compared like a factor's (every level, no
// baseline), and the note gives both fits' level variances.
func TestCompareShrunkFactor(t *testing.T) {
	gen := func(seed uint64, shift float64) *fit.Table {
		rng := rand.New(rand.NewPCG(609, seed))
		var y []float64
		var site []string
		for s := 0; s < 12; s++ {
			level := 0.5 * math.Sin(float64(s))
			if s == 3 {
				level += shift
			}
			for r := 0; r < 80; r++ {
				site = append(site, string(rune('a'+s)))
				y = append(y, 3+level+0.5*rng.NormFloat64())
			}
		}
		return &fit.Table{Numeric: map[string][]float64{"y": y}, Text: map[string][]string{"site": site}}
	}
	spec := curveSpec(fit.Gaussian, fit.Identity, fit.TermSpec{Kind: fit.Factor, Columns: []string{"site"}, Shrink: true})
	ref := mustFit(t, spec, gen(1, 0), fit.Options{})
	cand := mustFit(t, spec, gen(2, 1), fit.Options{})
	rep, err := fit.Compare(ref, cand, fit.Tolerance{Level: 0.99, PracticalShift: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	site := rep.Terms[0]
	// source: simulation with known truth (site d moves by 1; shrinkage
	// pulls the estimate in a little).
	if len(site.Levels) != 12 || site.Levels["d"].Verdict != fit.VerdictShifted || site.Levels["a"].Verdict != fit.VerdictStable {
		t.Errorf("levels %+v", site.Levels)
	}
	if !strings.Contains(site.Note, "level variance") {
		t.Errorf("note %q", site.Note)
	}
}
