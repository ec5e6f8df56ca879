package fit_test

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

func curveSpec(family fit.Family, link fit.Link, terms ...fit.TermSpec) *fit.Spec {
	return &fit.Spec{Name: "m", Response: "y", Family: family, Link: link, Selection: fit.REML, Terms: terms}
}

func curve(col string, size int) fit.TermSpec {
	return fit.TermSpec{Kind: fit.Curve, Columns: []string{col}, Basis: fit.Cubic, Knots: fit.QuantileKnots, Size: []int{size}}
}

func linear(col string) fit.TermSpec {
	return fit.TermSpec{Kind: fit.Linear, Columns: []string{col}}
}

func factor(col string) fit.TermSpec {
	return fit.TermSpec{Kind: fit.Factor, Columns: []string{col}}
}

// rows returns n rows of x on [0, 10] and a smooth response.
func rows(n int, seed uint64) (x, y []float64) {
	rng := rand.New(rand.NewPCG(seed, 1))
	x, y = make([]float64, n), make([]float64, n)
	for i := range x {
		x[i] = 10 * rng.Float64()
		y[i] = 2 + math.Sin(x[i]) + 0.3*rng.NormFloat64()
	}
	return x, y
}

// Each kind of bad input gives a clear error (naming the line, column or
// term) or a documented handling, never a panic or a NaN.
func TestBadData(t *testing.T) {
	x, y := rows(200, 1)
	withY := func(mod func(y []float64)) []float64 {
		c := append([]float64(nil), y...)
		mod(c)
		return c
	}
	tests := []struct {
		name    string
		spec    *fit.Spec
		data    *fit.Table
		wantErr string // substring; "" means the fit must succeed
		check   func(t *testing.T, doc *fit.Document)
	}{
		{
			name: "missing values are dropped and counted",
			spec: curveSpec(fit.Gaussian, fit.Identity, curve("x", 8)),
			data: &fit.Table{Numeric: map[string][]float64{"x": withY(func(c []float64) { c[3], c[9] = math.NaN(), math.Inf(1) }), "y": withY(func(c []float64) { copy(c, y); c[5] = math.NaN() })}},
			check: func(t *testing.T, doc *fit.Document) {
				if doc.Data.RowsUsed != 197 || doc.Data.Dropped["x"] != 2 || doc.Data.Dropped["y"] != 1 {
					t.Errorf("data record %+v", doc.Data)
				}
			},
		},
		{
			name:    "negative count",
			spec:    curveSpec(fit.Poisson, fit.Log, curve("x", 8)),
			data:    &fit.Table{Numeric: map[string][]float64{"x": x, "y": withY(func(c []float64) { c[7] = -2 })}},
			wantErr: `line 9, column "y": a poisson response is a count and cannot be negative`,
		},
		{
			name:    "proportion above one",
			spec:    curveSpec(fit.Binomial, fit.Logit, curve("x", 8)),
			data:    &fit.Table{Numeric: map[string][]float64{"x": x, "y": withY(func(c []float64) { clear(c); c[0] = 1.5 })}},
			wantErr: `line 2, column "y": a binomial response is a 0/1 outcome or a proportion`,
		},
		{
			name:    "non-positive gamma response",
			spec:    curveSpec(fit.Gamma, fit.Log, curve("x", 8)),
			data:    &fit.Table{Numeric: map[string][]float64{"x": x, "y": withY(func(c []float64) { c[2] = 0 })}},
			wantErr: `line 4, column "y": a gamma response must be positive`,
		},
		{
			name:    "constant covariate",
			spec:    curveSpec(fit.Gaussian, fit.Identity, curve("x", 8)),
			data:    &fit.Table{Numeric: map[string][]float64{"x": withY(func(c []float64) { clear(c) }), "y": y}},
			wantErr: `term "x": the covariate is constant`,
		},
		{
			name:    "constant linear covariate",
			spec:    curveSpec(fit.Gaussian, fit.Identity, linear("x")),
			data:    &fit.Table{Numeric: map[string][]float64{"x": withY(func(c []float64) { clear(c) }), "y": y}},
			wantErr: `column "x" is constant`,
		},
		{
			name:    "fewer rows than coefficients",
			spec:    curveSpec(fit.Gaussian, fit.Identity, fit.TermSpec{Kind: fit.Curve, Columns: []string{"x"}, Basis: fit.Cubic, Knots: fit.EvenKnots, Size: []int{10}}),
			data:    &fit.Table{Numeric: map[string][]float64{"x": x[:6], "y": y[:6]}},
			wantErr: "6 usable rows but the model has 10 coefficients",
		},
		{
			name: "too few distinct values for the size",
			spec: curveSpec(fit.Gaussian, fit.Identity, curve("x", 8)),
			data: &fit.Table{Numeric: map[string][]float64{"x": withY(func(c []float64) {
				for i := range c {
					c[i] = float64(i % 4)
				}
			}), "y": y}},
			wantErr: "size 8 needs at least 8 distinct covariate values and the data have 4",
		},
		{
			name: "collinear linear columns are aliased",
			spec: curveSpec(fit.Gaussian, fit.Identity, linear("x"), linear("x2")),
			data: &fit.Table{Numeric: map[string][]float64{"x": x, "x2": withY(func(c []float64) {
				for i := range c {
					c[i] = 3*x[i] - 1
				}
			}), "y": y}},
			check: func(t *testing.T, doc *fit.Document) {
				if doc.Terms[1].Estimate != nil || len(doc.Terms[1].Aliased) != 1 {
					t.Errorf("x2 should be aliased: %+v", doc.Terms[1])
				}
				if len(doc.Warnings) == 0 || !strings.Contains(doc.Warnings[0], "aliased") {
					t.Errorf("warnings %q", doc.Warnings)
				}
			},
		},
		{
			name: "complete separation",
			spec: curveSpec(fit.Binomial, fit.Logit, linear("x")),
			data: &fit.Table{Numeric: map[string][]float64{"x": x, "y": withY(func(c []float64) {
				for i := range c {
					c[i] = 0
					if x[i] > 5 {
						c[i] = 1
					}
				}
			})}},
			wantErr: "separation",
		},
		{
			name: "every row missing",
			spec: curveSpec(fit.Gaussian, fit.Identity, curve("x", 8)),
			data: &fit.Table{Numeric: map[string][]float64{"x": withY(func(c []float64) {
				for i := range c {
					c[i] = math.NaN()
				}
			}), "y": y}},
			wantErr: "none of the 200 rows is usable: 200 missing x",
		},
		{
			name:    "a single factor level",
			spec:    curveSpec(fit.Gaussian, fit.Identity, factor("site")),
			data:    &fit.Table{Numeric: map[string][]float64{"y": y}, Text: map[string][]string{"site": repeat("S07", len(y))}},
			wantErr: `column "site" has a single level ("S07")`,
		},
		{
			name:    "missing column",
			spec:    curveSpec(fit.Gaussian, fit.Identity, curve("flow", 8)),
			data:    &fit.Table{Numeric: map[string][]float64{"x": x, "y": y}},
			wantErr: "flow",
		},
		{
			name: "constant response",
			spec: curveSpec(fit.Gaussian, fit.Identity, curve("x", 8)),
			data: &fit.Table{Numeric: map[string][]float64{"x": x, "y": withY(func(c []float64) {
				for i := range c {
					c[i] = 4
				}
			})}},
			check: func(t *testing.T, doc *fit.Document) {
				if doc.DevianceExplained != 0 || math.IsNaN(doc.Scale) {
					t.Errorf("explained %g scale %g", doc.DevianceExplained, doc.Scale)
				}
			},
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			doc, err := fit.Fit(context.Background(), tc.spec, tc.data, fit.Options{})
			if tc.wantErr != "" {
				if err == nil {
					t.Fatalf("no error; want one containing %q", tc.wantErr)
				}
				if !strings.Contains(err.Error(), tc.wantErr) {
					t.Fatalf("error %q\nwant it to contain %q", err, tc.wantErr)
				}
				if !strings.Contains(err.Error(), `model "m"`) {
					t.Errorf("error %q does not name the model", err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			assertFinite(t, doc)
			if tc.check != nil {
				tc.check(t, doc)
			}
		})
	}
}

func repeat(s string, n int) []string {
	out := make([]string, n)
	for i := range out {
		out[i] = s
	}
	return out
}

// assertFinite fails on any NaN or Inf among a document's numbers.
func assertFinite(t *testing.T, doc *fit.Document) {
	t.Helper()
	check := func(what string, v float64) {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			t.Errorf("%s is %g", what, v)
		}
	}
	for _, v := range []float64{doc.Deviance, doc.NullDeviance, doc.DevianceExplained, doc.Scale, doc.EDFTotal, doc.AIC, doc.Intercept.Estimate, doc.Intercept.SE} {
		check("summary", v)
	}
	for i, v := range doc.Coefficients {
		check("coefficient", v)
		for _, c := range doc.Covariance[i] {
			check("covariance", c)
		}
	}
	for _, term := range doc.Terms {
		if term.Grid != nil {
			for i := range term.Grid.X {
				check(term.Name+" grid", term.Grid.Fit[i])
				check(term.Name+" grid se", term.Grid.SE[i])
			}
		}
	}
}

// An unseen factor level at prediction time is an error naming the line
// and column.
func TestPredictUnseenLevel(t *testing.T) {
	x, y := rows(60, 2)
	sites := make([]string, len(x))
	for i := range sites {
		sites[i] = []string{"A", "B", "C"}[i%3]
	}
	spec := curveSpec(fit.Gaussian, fit.Identity, curve("x", 6), factor("site"))
	doc, err := fit.Fit(context.Background(), spec, &fit.Table{Numeric: map[string][]float64{"x": x, "y": y}, Text: map[string][]string{"site": sites}}, fit.Options{})
	if err != nil {
		t.Fatal(err)
	}
	newSites := append([]string(nil), sites[:5]...)
	newSites[3] = "Z"
	err = fit.Predict(context.Background(), doc, &fit.Table{Numeric: map[string][]float64{"x": x[:5]}, Text: map[string][]string{"site": newSites}}, func(fit.Prediction) error { return nil })
	var rowErr *fit.RowError
	if !errors.As(err, &rowErr) || rowErr.Line != 5 || rowErr.Column != "site" || !strings.Contains(err.Error(), `level "Z"`) {
		t.Fatalf("error %v; want a RowError at line 5, column site, naming level Z", err)
	}
}
