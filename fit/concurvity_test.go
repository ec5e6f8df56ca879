package fit

import (
	"context"
	"encoding/json"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// Tests of the concurvity measures (concurvity.go). Identifiers carry a
// "concurv" prefix: this file shares package fit with other files.

func concurvSpec(terms ...TermSpec) *Spec {
	return &Spec{Name: "concurvity", Response: "y", Family: Gaussian, Link: Identity, Selection: REML, Terms: terms}
}

func concurvLinear(col string) TermSpec { return TermSpec{Kind: Linear, Columns: []string{col}} }

func concurvFactor(col string) TermSpec { return TermSpec{Kind: Factor, Columns: []string{col}} }

func concurvCurve(col string, b Basis, size int) TermSpec {
	knots := QuantileKnots
	if b == PSpline {
		knots = EvenKnots
	}
	return TermSpec{Kind: Curve, Columns: []string{col}, Basis: b, Knots: knots, Size: []int{size}}
}

func concurvFit(t *testing.T, spec *Spec, data *Table, opt Options) *Document {
	t.Helper()
	doc, err := Fit(context.Background(), spec, data, opt)
	if err != nil {
		t.Fatal(err)
	}
	return doc
}

// concurvAssertRange checks invariant (d): every term carries measures that
// are finite, within [0, 1], with Fitted ≤ Worst.
func concurvAssertRange(t *testing.T, doc *Document) {
	t.Helper()
	for _, term := range doc.Terms {
		c := term.Concurvity
		if c == nil {
			t.Errorf("term %q has no concurvity", term.Name)
			continue
		}
		for what, v := range map[string]float64{"worst": c.Worst, "fitted": c.Fitted, "partner_worst": c.PartnerWorst} {
			if math.IsNaN(v) || v < 0 || v > 1 {
				t.Errorf("term %q: %s = %g, want a number in [0, 1]", term.Name, what, v)
			}
		}
		if c.Fitted > c.Worst || c.PartnerWorst > c.Worst+1e-12 {
			t.Errorf("term %q: fitted %g and partner %g must not exceed worst %g", term.Name, c.Fitted, c.PartnerWorst, c.Worst)
		}
	}
}

// concurvWarning returns the concurvity warning about term name, or "".
func concurvWarning(doc *Document, name string) string {
	for _, w := range doc.Warnings {
		if strings.HasPrefix(w, `term "`+name+`" can be almost reproduced`) {
			return w
		}
	}
	return ""
}

// The largest squared canonical correlation between two lines at angle θ
// is cos²θ (source: Björck & Golub 1973, "Numerical methods for computing
// angles between linear subspaces", Math. Comp. 27, definition of principal
// angles). R is built so that its columns are the intercept e₀, a = e₁ and
// b = cos θ e₁ + sin θ e₂, scaled arbitrarily (the measure must not depend
// on how a term's coefficients are scaled).
func TestConcurvityPrincipalAngle(t *testing.T) {
	for _, theta := range []float64{math.Pi / 2, 1.2, math.Pi / 4, 0.3, 1e-3, 1e-6} {
		sa, sb := 3.0, 0.01
		r := []float64{
			2, 0, 0,
			0, sa, sb * math.Cos(theta),
			0, 0, sb * math.Sin(theta),
		}
		beta := []float64{1, 0.5, -2}
		got := concurvityFromR(r, 3, [][]int{{1}, {2}}, beta)
		want := math.Cos(theta) * math.Cos(theta)
		for j, c := range got {
			if math.Abs(c.Worst-want) > 1e-12 {
				t.Errorf("θ = %g, term %d: worst %.15g, want cos²θ = %.15g", theta, j, c.Worst, want)
			}
			// A single column: the fitted values span the term, so fitted = worst.
			if math.Abs(c.Fitted-want) > 1e-12 {
				t.Errorf("θ = %g, term %d: fitted %.15g, want %.15g", theta, j, c.Fitted, want)
			}
			if want > 1e-12 && c.partner != 1-j {
				t.Errorf("θ = %g, term %d: partner %d, want %d", theta, j, c.partner, 1-j)
			}
		}
	}
}

// With the intercept among the others, a term's constant part does not
// count: the intercept column e₀ + e₁ and a term column e₁ make a term whose
// only direction beyond the constant, e₁ − ½(e₀ + e₁) ∝ e₁ − e₀, is
// orthogonal to a second term e₂ (source: construction; Hotelling 1936
// canonical correlations of orthogonal sets are 0). Without centring, e₁
// would be reproduced by the intercept to ½.
func TestConcurvityIgnoresConstant(t *testing.T) {
	r := []float64{
		1, 0, 0,
		0, 1, 0,
		0, 0, 1,
	}
	// Column 0 = e₀ + e₁ needs a non-triangular R; concurvityFromR only
	// uses R's column geometry, so any square factor with RᵀR = XᵀWX will do.
	r[1*3+0] = 1
	got := concurvityFromR(r, 3, [][]int{{1}, {2}}, []float64{0, 1, 1})
	for j, c := range got {
		if c.Worst > 1e-15 || c.Fitted > 1e-15 {
			t.Errorf("term %d: worst %g fitted %g, want 0", j, c.Worst, c.Fitted)
		}
	}
}

// Rank-deficient R (a zero column, duplicated columns, a term inside the
// others' span) still gives finite measures in [0, 1] (invariant (d)), and a
// term whose columns repeat another's is reproduced exactly: worst 1
// (source: definition — a subspace contained in another has a principal
// angle 0, Björck & Golub 1973).
func TestConcurvityRankDeficientR(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 3))
	const p = 9
	r := make([]float64, p*p)
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			r[i*p+j] = rng.NormFloat64()
		}
	}
	for i := 0; i < p; i++ {
		r[i*p+4] = 0                     // a column zero on the data
		r[i*p+6] = 2*r[i*p+2] - r[i*p+3] // term 3 lies in term 1's span
		r[i*p+8] = r[i*p+7]              // two equal columns within term 4
	}
	blocks := [][]int{{1, 2, 3}, {4, 5}, {6}, {7, 8}, {}}
	beta := []float64{1, 0.3, -0.2, 0.1, 5, 0.7, 0.4, 1, -1}
	got := concurvityFromR(r, p, blocks, beta)
	for j, c := range got {
		for _, v := range []float64{c.Worst, c.Fitted, c.PartnerWorst} {
			if math.IsNaN(v) || v < 0 || v > 1 {
				t.Errorf("block %d: measures %+v out of [0, 1]", j, c.Concurvity)
			}
		}
		if c.Fitted > c.Worst {
			t.Errorf("block %d: fitted %g > worst %g", j, c.Fitted, c.Worst)
		}
	}
	if got[2].Worst < 1-1e-12 || got[2].partner != 0 {
		t.Errorf("a column inside term 1's span: worst %.15g partner %d, want 1 and 0", got[2].Worst, got[2].partner)
	}
	// β₇ = −β₈ on equal columns: the fitted values are zero.
	if got[3].Fitted != 0 {
		t.Errorf("zero fitted values: fitted %g, want 0", got[3].Fitted)
	}
	if got[4].Worst != 1 || got[4].Fitted != 0 {
		t.Errorf("a fully aliased term: %+v, want worst 1, fitted 0", got[4].Concurvity)
	}
}

// (a) Two linear terms on exactly orthogonal, centred ±1 columns (a 2²
// factorial design, replicated): no part of either can be reproduced by the
// other or the intercept, so worst = fitted = 0 (source: construction —
// the canonical correlations of mutually orthogonal sets are 0, Hotelling
// 1936).
func TestConcurvityOrthogonalDesign(t *testing.T) {
	const n = 32
	x1, x2, y := make([]float64, n), make([]float64, n), make([]float64, n)
	for i := range y {
		x1[i] = float64(1 - 2*(i%2))
		x2[i] = float64(1 - 2*((i/2)%2))
		y[i] = 1 + 2*x1[i] - x2[i] + 0.1*math.Sin(float64(i)) // sin: any non-degenerate residual
	}
	for _, hh := range []bool{false, true} {
		doc := concurvFit(t, concurvSpec(concurvLinear("x1"), concurvLinear("x2")),
			&Table{Numeric: map[string][]float64{"x1": x1, "x2": x2, "y": y}}, Options{Householder: hh})
		concurvAssertRange(t, doc)
		for _, term := range doc.Terms {
			c := term.Concurvity
			if c.Worst > 1e-12 || c.Fitted > 1e-12 || c.Partner != "" {
				t.Errorf("householder=%v, term %q: %+v, want worst ≈ 0, fitted ≈ 0, no partner", hh, term.Name, *c)
			}
		}
		for _, w := range doc.Warnings {
			if strings.Contains(w, "reproduced") {
				t.Errorf("unexpected warning %q", w)
			}
		}
	}
}

// (b) A linear term on x and a curve of x plus tiny noise: the curve's basis
// holds a straight line in its own column, so each term can almost take the
// other's shape — worst near 1 for both, and a warning naming both (source:
// construction; a natural cubic spline reproduces straight lines exactly,
// Green & Silverman 1994, "Nonparametric Regression and Generalized Linear
// Models", §2.3).
func TestConcurvityNearDuplicateCurve(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 8))
	const n = 300
	x, xn, y := make([]float64, n), make([]float64, n), make([]float64, n)
	for i := range y {
		x[i] = 10 * rng.Float64()
		xn[i] = x[i] + 1e-3*rng.NormFloat64()
		y[i] = math.Sin(x[i]) + 0.2*x[i] + 0.3*rng.NormFloat64()
	}
	doc := concurvFit(t, concurvSpec(concurvLinear("x"), concurvCurve("xn", Cubic, 10)),
		&Table{Numeric: map[string][]float64{"x": x, "xn": xn, "y": y}}, Options{})
	concurvAssertRange(t, doc)
	for i, name := range []string{"x", "xn"} {
		other := []string{"xn", "x"}[i]
		c := doc.Terms[i].Concurvity
		if c.Worst < 0.999 {
			t.Errorf("term %q: worst %.6f, want close to 1", name, c.Worst)
		}
		if c.Partner != other {
			t.Errorf("term %q: partner %q, want %q", name, c.Partner, other)
		}
		w := concurvWarning(doc, name)
		if w == "" || !strings.Contains(w, `term "`+other+`"`) {
			t.Errorf("term %q: warning %q should name both terms (warnings %q)", name, w, doc.Warnings)
		}
	}
	// The linear term's fitted values are its column, which the curve
	// reproduces almost exactly.
	if c := doc.Terms[0].Concurvity; c.Fitted < 0.999 {
		t.Errorf("linear term: fitted %.6f, want close to 1", c.Fitted)
	}
	t.Logf("linear %+v, curve %+v, warnings %q", *doc.Terms[0].Concurvity, *doc.Terms[1].Concurvity, doc.Warnings)
}

// concurvCorrelation is the (weighted) Pearson correlation of a and b.
func concurvCorrelation(a, b, w []float64) float64 {
	var sw, ma, mb float64
	for i := range a {
		sw += w[i]
		ma += w[i] * a[i]
		mb += w[i] * b[i]
	}
	ma, mb = ma/sw, mb/sw
	var sab, saa, sbb float64
	for i := range a {
		da, db := a[i]-ma, b[i]-mb
		sab += w[i] * da * db
		saa += w[i] * da * da
		sbb += w[i] * db * db
	}
	return sab / math.Sqrt(saa*sbb)
}

// (c) For two linear terms the squared canonical correlation of the two
// single columns, once the intercept is removed, is the squared Pearson
// correlation r² (common practice (no source)); with weights it is the
// weighted correlation in the fit's weights — the prior weights for the
// gaussian family, μ at convergence for poisson with log link (whose
// working weight is μ: McCullagh & Nelder 1989, "Generalized Linear
// Models", 2nd ed., §2.5). r is computed directly from the columns here.
func TestConcurvityTwoLinearIsSquaredCorrelation(t *testing.T) {
	for _, tc := range []struct {
		name    string
		rho     float64
		weights bool
		family  Family
	}{
		{"weak", 0.3, false, Gaussian},
		{"strong", 0.8, false, Gaussian},
		{"near-collinear", 0.99, false, Gaussian},
		{"negative", -0.6, false, Gaussian},
		{"prior weights", 0.7, true, Gaussian},
		{"poisson", 0.85, false, Poisson},
	} {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(21, uint64(1000*math.Abs(tc.rho))))
			const n = 250
			x1, x2, y, w := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
			for i := range y {
				z1, z2 := rng.NormFloat64(), rng.NormFloat64()
				x1[i] = 3 + 2*z1
				x2[i] = -1 + 0.5*(tc.rho*z1+math.Sqrt(1-tc.rho*tc.rho)*z2)
				w[i] = 1
				if tc.weights {
					w[i] = 0.2 + 3*rng.Float64()
				}
				if tc.family == Poisson {
					y[i] = float64(concurvPoisson(rng, math.Exp(0.5+0.2*x1[i]-0.3*x2[i])))
				} else {
					y[i] = 1 + x1[i] - 2*x2[i] + rng.NormFloat64()
				}
			}
			spec := concurvSpec(concurvLinear("x1"), concurvLinear("x2"))
			spec.Family = tc.family
			if tc.family == Poisson {
				spec.Link = Log
			}
			data := &Table{Numeric: map[string][]float64{"x1": x1, "x2": x2, "y": y}}
			if tc.weights {
				spec.Weights = "w"
				data.Numeric["w"] = w
			}
			doc := concurvFit(t, spec, data, Options{})
			concurvAssertRange(t, doc)
			if tc.family == Poisson {
				b := doc.Coefficients // reported parametrisation: per unit of each column
				for i := range w {
					w[i] = math.Exp(b[0] + b[1]*x1[i] + b[2]*x2[i])
				}
			}
			r := concurvCorrelation(x1, x2, w)
			want := r * r
			for i, term := range doc.Terms {
				c := term.Concurvity
				// source: common practice (no source) — squared (weighted) Pearson correlation.
				if math.Abs(c.Worst-want) > 1e-10 {
					t.Errorf("term %q: worst %.15f, want r² = %.15f", term.Name, c.Worst, want)
				}
				if math.Abs(c.Fitted-want) > 1e-10 {
					t.Errorf("term %q: fitted %.15f, want r² = %.15f", term.Name, c.Fitted, want)
				}
				other := doc.Terms[1-i].Name
				if c.Partner != other || math.Abs(c.PartnerWorst-want) > 1e-10 {
					t.Errorf("term %q: partner %q (%.15f), want %q (%.15f)", term.Name, c.Partner, c.PartnerWorst, other, want)
				}
				if warned := concurvWarning(doc, term.Name) != ""; warned != (want > concurvityWarnAt) {
					t.Errorf("term %q: r² = %.4f, warned %v", term.Name, want, warned)
				}
			}
		})
	}
}

// concurvPoisson draws a Poisson variate by inversion (small means only).
func concurvPoisson(rng *rand.Rand, mu float64) int {
	u, k := rng.Float64(), 0
	p := math.Exp(-mu)
	for s := p; u > s && k < 1000; s += p {
		k++
		p *= mu / float64(k)
	}
	return k
}

// (d) Rank-deficient and mixed designs through the whole fit: measures are
// finite and in [0, 1] with fitted ≤ worst; a fully aliased linear term
// reports worst 1 and fitted 0 (source: definition — its column lies in the
// others' span, a principal angle of 0).
func TestConcurvityRangeRankDeficient(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	const n = 400
	x, z, gap, y, cnt := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
	x2, aliased := make([]float64, n), make([]float64, n)
	site, region := make([]string, n), make([]string, n)
	for i := range y {
		x[i], z[i] = rng.Float64(), rng.Float64()
		// Data on [0, 1] ∪ [3, 4] only: B-splines on even knots over [0, 4]
		// with support inside the gap have no data (XᵀWX singular).
		gap[i] = rng.Float64()
		if i%2 == 1 {
			gap[i] += 3
		}
		x2[i] = x[i] + 0.3*z[i]
		aliased[i] = 2*x[i] - 1
		site[i] = []string{"a", "b", "c", "d"}[i%4]
		region[i] = map[string]string{"a": "north", "b": "north", "c": "south", "d": "east"}[site[i]]
		if i%7 == 0 {
			region[i] = "east" // partly aliased with site
		}
		y[i] = math.Sin(4*x[i]) + z[i]*z[i] + 0.2*math.Cos(gap[i]) + 0.2*rng.NormFloat64()
		cnt[i] = float64(concurvPoisson(rng, math.Exp(0.5+math.Sin(4*x[i]))))
	}
	num := map[string][]float64{"x": x, "z": z, "gap": gap, "x2": x2, "aliased": aliased, "y": y}
	txt := map[string][]string{"site": site, "region": region}
	surface := TermSpec{Kind: Surface, Columns: []string{"x", "z"}, Basis: PSpline, Knots: EvenKnots, Size: []int{5, 5}}
	for _, tc := range []struct {
		name   string
		spec   *Spec
		opt    Options
		check  func(t *testing.T, doc *Document)
		counts bool
	}{
		{name: "fully aliased linear term", spec: concurvSpec(concurvLinear("x"), concurvLinear("aliased"), concurvCurve("z", Cubic, 8)),
			check: func(t *testing.T, doc *Document) {
				if c := doc.Terms[1].Concurvity; c.Worst != 1 || c.Fitted != 0 {
					t.Errorf("aliased term: %+v, want worst 1, fitted 0", *c)
				}
			}},
		{name: "nested factors", spec: concurvSpec(concurvFactor("site"), concurvFactor("region"), concurvLinear("x"))},
		{name: "pspline over a data gap", spec: concurvSpec(concurvCurve("gap", PSpline, 20), concurvLinear("z"), concurvFactor("site")),
			// Sites a and c have data only on [0, 1], b and d only on
			// [3, 4]; with knots inside the gap the spline can take any
			// constant on each island (B-splines span every piecewise cubic
			// on their knots with the knots' continuity: Curry & Schoenberg
			// 1966, de Boor 1978 ch. IX), so the step between the islands
			// is in both terms' spans: worst 1 for both, naming each other
			// (source: that construction).
			check: func(t *testing.T, doc *Document) {
				for i, other := range map[int]string{0: "site", 2: "gap"} {
					c := doc.Terms[i].Concurvity
					if c.Worst < 1-1e-9 || c.Partner != other || !strings.Contains(concurvWarning(doc, doc.Terms[i].Name), `"`+other+`"`) {
						t.Errorf("term %q: %+v, want worst 1 with partner %q and a warning naming it", doc.Terms[i].Name, *c, other)
					}
				}
			}},
		{name: "pspline over a data gap, householder", spec: concurvSpec(concurvCurve("gap", PSpline, 20), concurvLinear("z")), opt: Options{Householder: true}},
		{name: "curves, surface, linear and factor", spec: concurvSpec(concurvCurve("x", Cubic, 8), concurvCurve("z", PSpline, 8), surface, concurvLinear("x2"), concurvFactor("site"))},
		{name: "poisson", spec: concurvSpec(concurvCurve("x", Cubic, 8), concurvLinear("x2"), concurvFactor("region")), counts: true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			spec := tc.spec
			data := &Table{Numeric: num, Text: txt}
			if tc.counts {
				spec.Family, spec.Link = Poisson, Log
				data = &Table{Numeric: map[string][]float64{"x": x, "x2": x2, "y": cnt}, Text: txt}
			}
			doc := concurvFit(t, spec, data, tc.opt)
			concurvAssertRange(t, doc)
			if tc.check != nil {
				tc.check(t, doc)
			}
			for _, term := range doc.Terms {
				t.Logf("%-8s %+v", term.Name, *term.Concurvity)
			}
		})
	}
}

// The document carries the measures under the documented JSON keys.
func TestConcurvityJSON(t *testing.T) {
	b, err := json.Marshal(Concurvity{Worst: 0.5, Fitted: 0.25, Partner: "x", PartnerWorst: 0.4})
	if err != nil {
		t.Fatal(err)
	}
	if got, want := string(b), `{"worst":0.5,"fitted":0.25,"partner":"x","partner_worst":0.4}`; got != want {
		t.Errorf("json %s, want %s", got, want)
	}
}

// BenchmarkConcurvity times the measures for a model of 200 coefficients in
// eight terms (a large spec: several curves and a 10×10 surface).
func BenchmarkConcurvity(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 2))
	const p = 200
	r := make([]float64, p*p)
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			r[i*p+j] = rng.NormFloat64()
		}
		r[i*p+i] += 10
	}
	beta := make([]float64, p)
	for i := range beta {
		beta[i] = rng.NormFloat64()
	}
	var blocks [][]int
	for _, s := range [][2]int{{1, 20}, {21, 20}, {41, 20}, {61, 20}, {81, 19}, {100, 99}, {199, 1}} {
		blocks = append(blocks, coefRange(s[0], s[1]))
	}
	for b.Loop() {
		concurvityFromR(r, p, blocks, beta)
	}
}
