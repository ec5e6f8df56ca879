package fit_test

import (
	"math"
	"path/filepath"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

type coefRef struct {
	Estimate float64 `json:"estimate"`
	SE       float64 `json:"se"`
}

type glmReference struct {
	Source       string                        `json:"source"`
	N            int                           `json:"n"`
	Intercept    coefRef                       `json:"intercept"`
	Linear       map[string]coefRef            `json:"linear"`
	Factor       map[string]map[string]coefRef `json:"factor"`
	Deviance     float64                       `json:"deviance"`
	NullDeviance float64                       `json:"null_deviance"`
	Scale        float64                       `json:"scale"`
	DFResid      float64                       `json:"df_resid"`
	LLF          float64                       `json:"llf"`
}

// checkGLM compares a document with reference values at relative tolerance tol.
func checkGLM(t *testing.T, doc *fit.Document, ref glmReference, tol float64, checkNull bool) {
	t.Helper()
	near := func(what string, got, want float64) {
		t.Helper()
		e := relErr(got, want)
		if math.Abs(want) < 1e-10 {
			e = math.Abs(got - want) // an exact zero: compare absolutely
		}
		if e > tol {
			t.Errorf("%s = %.12g, want %.12g (relative error %.2g > %.0e; source: %s)", what, got, want, e, tol, ref.Source)
		}
	}
	near("intercept", doc.Intercept.Estimate, ref.Intercept.Estimate)
	near("intercept se", doc.Intercept.SE, ref.Intercept.SE)
	for _, term := range doc.Terms {
		switch term.Kind {
		case fit.Linear:
			want, ok := ref.Linear[term.Name]
			if !ok {
				t.Errorf("term %q not in the reference", term.Name)
				continue
			}
			near(term.Name, *term.Estimate, want.Estimate)
			near(term.Name+" se", *term.SE, want.SE)
		case fit.Factor:
			levels := ref.Factor[term.Name]
			if len(levels) != len(term.Levels) {
				t.Errorf("factor %q: %d levels, reference has %d", term.Name, len(term.Levels), len(levels))
			}
			for lv, want := range levels {
				got := term.Levels[lv]
				near(term.Name+"="+lv, got.Estimate, want.Estimate)
				near(term.Name+"="+lv+" se", got.SE, want.SE)
			}
		}
	}
	near("deviance", doc.Deviance, ref.Deviance)
	if checkNull {
		near("null deviance", doc.NullDeviance, ref.NullDeviance)
	}
	near("scale", doc.Scale, ref.Scale)
	if math.Abs(doc.ResidualDF-ref.DFResid) > 1e-9 {
		t.Errorf("residual df %g, want %g", doc.ResidualDF, ref.DFResid)
	}
	if ref.N != 0 && doc.N != ref.N {
		t.Errorf("n = %d, want %d", doc.N, ref.N)
	}
}

// Models with only linear and factor terms are GLMs: they must agree with
// statsmodels' GLM in coefficients, standard errors and deviance.
func TestParametricModelsMatchGLM(t *testing.T) {
	cases, _ := filepath.Glob(filepath.Join(referenceDir, "glm", "*", "expected.json"))
	if len(cases) < 7 {
		t.Fatalf("want reference sets for every family and link, found %d", len(cases))
	}
	for _, exp := range cases {
		dir := filepath.Dir(exp)
		t.Run(filepath.Base(dir), func(t *testing.T) {
			t.Parallel()
			var ref glmReference
			readJSON(t, exp, &ref)
			doc := fitCase(t, dir, "model.yaml")
			// source: statsmodels GLM (ref.Source), default IRLS, nonrobust covariance.
			checkGLM(t, doc, ref, 1e-7, true)
		})
	}
}

// Dobson (1990, p. 93): Poisson model of counts on outcome and treatment
// factors; residual deviance 5.129 on 4 df.
func TestDobsonPoissonExample(t *testing.T) {
	dir := filepath.Join(referenceDir, "dobson")
	var ref struct {
		Published struct {
			Intercept coefRef                       `json:"intercept"`
			Factor    map[string]map[string]coefRef `json:"factor"`
			Deviance  float64                       `json:"deviance"`
			DF        float64                       `json:"df_resid"`
		} `json:"published"`
		Statsmodels glmReference `json:"statsmodels"`
	}
	readJSON(t, filepath.Join(dir, "expected.json"), &ref)
	doc := fitCase(t, dir, "model.yaml")
	// source: Dobson (1990), An Introduction to Generalized Linear Models, p. 93 (from memory): 4 decimals printed.
	if math.Abs(doc.Deviance-5.129) > 5e-4 {
		t.Errorf("deviance %.5f, want 5.129", doc.Deviance)
	}
	if math.Abs(doc.ResidualDF-4) > 1e-9 {
		t.Errorf("residual df %g, want 4", doc.ResidualDF)
	}
	if math.Abs(doc.Intercept.Estimate-3.045) > 5e-4 {
		t.Errorf("intercept %.4f, want 3.045", doc.Intercept.Estimate)
	}
	for _, term := range doc.Terms {
		for lv, want := range ref.Published.Factor[term.Name] {
			got := term.Levels[lv]
			// source: Dobson (1990), p. 93, printed to 4 significant digits (from memory).
			if math.Abs(got.Estimate-want.Estimate) > 5e-4 || math.Abs(got.SE-want.SE) > 5e-4 {
				t.Errorf("%s=%s: %.4f (se %.4f), want %.4f (se %.4f)", term.Name, lv, got.Estimate, got.SE, want.Estimate, want.SE)
			}
		}
	}
	// source: statsmodels GLM on the same data, for a tight check.
	if ref.Statsmodels.Source != "" {
		checkGLM(t, doc, ref.Statsmodels, 1e-7, true)
	}
}

// NIST StRD Longley: a notoriously ill-conditioned linear regression. Every
// coefficient and standard error must carry at least 7 correct significant
// digits (log relative error, as NIST scores it).
func TestLongleyCertifiedValues(t *testing.T) {
	dir := filepath.Join(referenceDir, "longley")
	var ref struct {
		Source    string `json:"source"`
		Certified struct {
			Intercept  coefRef            `json:"intercept"`
			Linear     map[string]coefRef `json:"linear"`
			ResidualSD float64            `json:"residual_sd"`
			RSquared   float64            `json:"r_squared"`
		} `json:"certified"`
	}
	readJSON(t, filepath.Join(dir, "expected.json"), &ref)
	for _, householder := range []bool{false, true} {
		doc := fitCaseWith(t, dir, "model.yaml", fit.Options{Householder: householder})
		worst := math.Inf(1)
		digits := func(what string, got, want float64) {
			t.Helper()
			lre := -math.Log10(relErr(got, want))
			worst = math.Min(worst, lre)
			// source: NIST StRD Longley certified values (see ref.Source).
			if lre < 7 {
				t.Errorf("%s = %.15g, certified %.15g: %.1f correct digits, want ≥ 7", what, got, want, lre)
			}
		}
		digits("intercept", doc.Intercept.Estimate, ref.Certified.Intercept.Estimate)
		digits("intercept se", doc.Intercept.SE, ref.Certified.Intercept.SE)
		for _, term := range doc.Terms {
			want := ref.Certified.Linear[term.Name]
			digits(term.Name, *term.Estimate, want.Estimate)
			digits(term.Name+" se", *term.SE, want.SE)
		}
		digits("residual sd", math.Sqrt(doc.Scale), ref.Certified.ResidualSD)
		digits("R²", doc.DevianceExplained, ref.Certified.RSquared)
		t.Logf("accumulation %s: at least %.1f correct digits everywhere", doc.Convergence.Accumulation, worst)
	}
}
