package fit_test

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/fit/csvsource"
)

// nestedReference is testdata/reference/nested/<case>/expected.json.
type nestedReference struct {
	Source string   `json:"source"`
	Family string   `json:"family"`
	N      int      `json:"n"`
	Drop   []string `json:"drop"`
	Full   struct {
		Deviance float64  `json:"deviance"`
		Params   int      `json:"params"`
		AIC      *float64 `json:"aic"`
	} `json:"full"`
	Reduced struct {
		Deviance float64  `json:"deviance"`
		Params   int      `json:"params"`
		AIC      *float64 `json:"aic"`
	} `json:"reduced"`
	Test struct {
		Name      string   `json:"name"`
		Statistic float64  `json:"statistic"`
		PValue    float64  `json:"p_value"`
		DFDiff    float64  `json:"df_diff"`
		DFDenom   *float64 `json:"df_denom"`
	} `json:"test"`
}

// fitNested fits the full model of a reference case and the model without
// drop, on the same rows, and compares them.
func fitNested(t *testing.T, dir string, drop []string) (full, reduced *fit.Document, c *fit.NestedComparison) {
	t.Helper()
	raw, err := os.ReadFile(filepath.Join(dir, "model.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	spec, err := fit.ParseSpec(raw)
	if err != nil {
		t.Fatal(err)
	}
	src, err := csvsource.Open(filepath.Join(dir, "data.csv"))
	if err != nil {
		t.Fatal(err)
	}
	return fitPair(t, spec, src, drop)
}

func fitPair(t *testing.T, spec *fit.Spec, src fit.Source, drop []string) (full, reduced *fit.Document, c *fit.NestedComparison) {
	t.Helper()
	ctx := context.Background()
	full, err := fit.Fit(ctx, spec, src, fit.Options{})
	if err != nil {
		t.Fatalf("full fit: %v", err)
	}
	rs, err := fit.WithoutTerms(spec, drop)
	if err != nil {
		t.Fatal(err)
	}
	reduced, err = fit.Fit(ctx, rs, fit.SameRows(src, spec), fit.Options{})
	if err != nil {
		t.Fatalf("reduced fit: %v", err)
	}
	c, err = fit.CompareNested(full, reduced)
	if err != nil {
		t.Fatal(err)
	}
	return full, reduced, c
}

// Dropping terms from models without curves must reproduce the classical
// tests: the nested-model F test of linear regression (gaussian), the
// likelihood-ratio test (poisson) and its F analogue with the Pearson scale
// (gamma), all from statsmodels (see testdata/reference/nested/nested.py).
func TestNestedMatchesReference(t *testing.T) {
	cases, _ := filepath.Glob(filepath.Join(referenceDir, "nested", "*", "expected.json"))
	if len(cases) < 4 {
		t.Fatalf("want four nested-model reference cases, found %d", len(cases))
	}
	for _, exp := range cases {
		dir := filepath.Dir(exp)
		t.Run(filepath.Base(dir), func(t *testing.T) {
			var ref nestedReference
			readJSON(t, exp, &ref)
			full, reduced, c := fitNested(t, dir, ref.Drop)
			if c.Test != ref.Test.Name {
				t.Fatalf("test %q, want %q", c.Test, ref.Test.Name)
			}
			if c.Statistic == nil || c.PValue == nil {
				t.Fatal("no statistic or p-value")
			}
			check := func(what string, got, want, tol float64) {
				t.Helper()
				if e := relErr(got, want); e > tol {
					t.Errorf("%s = %.12g, want %.12g (relative error %.2g > %.0e; source: %s)", what, got, want, e, tol, ref.Source)
				}
			}
			// source: statsmodels (ref.Source): OLS.compare_f_test for the
			// gaussian cases; GLM deviances with scipy.stats.chi2.sf (poisson)
			// or the Pearson scale with scipy.stats.f.sf (gamma).
			check("statistic", *c.Statistic, ref.Test.Statistic, 1e-8)
			check("p-value", *c.PValue, ref.Test.PValue, 1e-8)
			check("Δdf", c.DFChange, ref.Test.DFDiff, 1e-8)
			check("full deviance", full.Deviance, ref.Full.Deviance, 1e-8)
			check("reduced deviance", reduced.Deviance, ref.Reduced.Deviance, 1e-8)
			check("ΔD", c.DevianceChange, ref.Reduced.Deviance-ref.Full.Deviance, 1e-8)
			if ref.Test.DFDenom != nil {
				check("denominator df", c.DenominatorDF, *ref.Test.DFDenom, 1e-8)
			}
			if ref.Family == "poisson" && ref.Full.AIC != nil && ref.Reduced.AIC != nil {
				// source: statsmodels GLM aic (−2 llf + 2 p), same convention as ours.
				check("full AIC", full.AIC, *ref.Full.AIC, 1e-8)
				check("reduced AIC", reduced.AIC, *ref.Reduced.AIC, 1e-8)
			}
			if c.Approximate {
				t.Error("approximate is set for a model without curves")
			}
			if strings.Join(c.Dropped, ",") != strings.Join(ref.Drop, ",") {
				t.Errorf("dropped %v, want %v", c.Dropped, ref.Drop)
			}
			if full.N != ref.N || reduced.N != ref.N {
				t.Errorf("n = %d and %d, want %d", full.N, reduced.N, ref.N)
			}
		})
	}
}

// Published 5% points put the p-value at 0.05: the test statistic is
// referred to the right distribution with the right degrees of freedom.
func TestNestedPValueAtTablePoints(t *testing.T) {
	cases := []struct {
		name    string
		family  fit.Family
		dD, dfR float64 // ΔD and the residual df of the full fit
		scale   float64
		edfDrop float64
		wantP   float64
		tol     float64
		source  string
	}{
		// from memory: χ²(1) upper 5% point 3.841459 (standard χ² tables).
		{"chi-square 1 df", fit.Poisson, 3.841459, 20, 1, 1, 0.05, 1e-6, "χ²(1) 5% point 3.841459"},
		// from memory: χ²(2) upper 5% point 5.991465 (= −2 ln 0.05, exact).
		{"chi-square 2 df", fit.Binomial, -2 * math.Log(0.05), 20, 1, 2, 0.05, 1e-12, "χ²(2) 5% point −2 ln 0.05"},
		// from memory: F(2, 10) upper 5% point 4.10 as printed (3 figures).
		{"F 2 and 10 df", fit.Gaussian, 2 * 4.10 * 1.5, 10, 1.5, 2, 0.05, 0.01, "F(2,10) 5% point 4.10"},
		// from memory: F(1, ∞)-like: F(1, 1000) 5% point ≈ 3.851 (χ²(1)/1 limit 3.841).
		{"F 1 and 1000 df", fit.Gamma, 3.851, 1000, 1, 1, 0.05, 0.01, "F(1,1000) 5% point 3.851"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			n := int(tc.dfR) + 3 // the full fit: intercept and two terms
			full := nestedDoc(tc.family, n, 10, "a", "b")
			full.Scale = tc.scale
			reduced := nestedDoc(tc.family, n, 10+tc.dD, "a")
			reduced.EDFTotal = full.EDFTotal - tc.edfDrop
			c, err := fit.CompareNested(full, reduced)
			if err != nil {
				t.Fatal(err)
			}
			if c.PValue == nil {
				t.Fatal("no p-value")
			}
			// source: see source (published tables, from memory).
			if e := relErr(*c.PValue, tc.wantP); e > tc.tol {
				t.Errorf("p = %.10g, want %g (%s; relative error %.2g > %g)", *c.PValue, tc.wantP, tc.source, e, tc.tol)
			}
		})
	}
}

// nestedDoc is a minimal converged fit document with linear terms named
// terms, for checking CompareNested's rules.
func nestedDoc(fam fit.Family, n int, deviance float64, terms ...string) *fit.Document {
	link := map[fit.Family]fit.Link{fit.Gaussian: fit.Identity, fit.Poisson: fit.Log, fit.Binomial: fit.Logit, fit.Gamma: fit.Inverse}[fam]
	d := &fit.Document{
		Model: "m", Family: fam, Link: link, N: n, Deviance: deviance, NullDeviance: 100,
		Scale: 1, ScaleEstimated: fam == fit.Gaussian || fam == fit.Gamma,
		EDFTotal: float64(1 + len(terms)), ResidualDF: float64(n - 1 - len(terms)),
		AIC:         deviance + 2*float64(1+len(terms)),
		Convergence: fit.Convergence{Converged: true},
		Spec:        &fit.Spec{Name: "m", Response: "y", Family: fam, Link: link},
	}
	for _, name := range terms {
		d.Terms = append(d.Terms, fit.TermResult{Name: name, Kind: fit.Linear, Columns: []string{name}})
		d.Spec.Terms = append(d.Spec.Terms, fit.TermSpec{Kind: fit.Linear, Columns: []string{name}})
	}
	return d
}

func TestCompareNestedErrors(t *testing.T) {
	cases := []struct {
		name   string
		change func(full, reduced *fit.Document) (*fit.Document, *fit.Document)
		want   string
	}{
		{"different n", func(f, r *fit.Document) (*fit.Document, *fit.Document) { r.N = 29; return f, r },
			"the fits used different rows (n = 30 in the full fit, 29 in the reduced one)"},
		{"different rows, same n", func(f, r *fit.Document) (*fit.Document, *fit.Document) { r.NullDeviance = 101; return f, r },
			"the fits used different rows (null deviance 100 in the full fit, 101 in the reduced one"},
		{"different family", func(f, r *fit.Document) (*fit.Document, *fit.Document) {
			r.Family, r.Spec.Family = fit.Gamma, fit.Gamma
			return f, r
		}, "the family differs (gaussian in the full fit, gamma in the reduced one)"},
		{"different link", func(f, r *fit.Document) (*fit.Document, *fit.Document) { r.Link = fit.Log; return f, r },
			"the link differs (identity in the full fit, log in the reduced one)"},
		{"different response", func(f, r *fit.Document) (*fit.Document, *fit.Document) { r.Spec.Response = "z"; return f, r },
			"the response differs (y in the full fit, z in the reduced one)"},
		{"weights in one only", func(f, r *fit.Document) (*fit.Document, *fit.Document) { f.Spec.Weights = "w"; return f, r },
			"the weights column differs (w in the full fit, none in the reduced one)"},
		{"different offset", func(f, r *fit.Document) (*fit.Document, *fit.Document) { r.Spec.Offset = "log_t"; return f, r },
			"the offset column differs (none in the full fit, log_t in the reduced one)"},
		{"term not in full", func(f, r *fit.Document) (*fit.Document, *fit.Document) {
			return f, nestedDoc(fit.Gaussian, 30, 12, "a", "c")
		}, "the reduced fit has a term the full one lacks: linear c (the full fit's terms: a, b)"},
		{"term of another kind", func(f, r *fit.Document) (*fit.Document, *fit.Document) {
			r.Terms[0].Kind = fit.Curve
			return f, r
		}, "term a is a linear in the full fit but a curve in the reduced one"},
		{"nothing dropped", func(f, r *fit.Document) (*fit.Document, *fit.Document) {
			return f, nestedDoc(fit.Gaussian, 30, 10, "b", "a")
		}, "the reduced fit has every term of the full one; nothing was dropped"},
		{"unconverged", func(f, r *fit.Document) (*fit.Document, *fit.Document) { f.Convergence.Converged = false; return f, r },
			"the full fit did not converge"},
		{"no spec", func(f, r *fit.Document) (*fit.Document, *fit.Document) { r.Spec = nil; return f, r },
			"the reduced fit's document carries no model spec"},
		{"nil document", func(f, r *fit.Document) (*fit.Document, *fit.Document) { return f, nil },
			"a fit document is missing"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			full, reduced := tc.change(nestedDoc(fit.Gaussian, 30, 10, "a", "b"), nestedDoc(fit.Gaussian, 30, 12, "a"))
			c, err := fit.CompareNested(full, reduced)
			if err == nil {
				t.Fatalf("no error; comparison %+v", c)
			}
			if !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %q\nlacks %q", err, tc.want)
			}
		})
	}
}

// Δdf ≤ 0 gives no test (not p = 1), and a negative ΔD gives p = 1.
func TestCompareNestedEdgeCases(t *testing.T) {
	t.Run("no degrees of freedom", func(t *testing.T) {
		full := nestedDoc(fit.Poisson, 30, 10, "a", "b")
		reduced := nestedDoc(fit.Poisson, 30, 14, "a")
		reduced.EDFTotal = full.EDFTotal + 0.2
		c, err := fit.CompareNested(full, reduced)
		if err != nil {
			t.Fatal(err)
		}
		if c.Test != "none" || c.Statistic != nil || c.PValue != nil || len(c.Notes) == 0 {
			t.Errorf("test %q, statistic %v, p %v, notes %q; want none, absent, absent, a note", c.Test, c.Statistic, c.PValue, c.Notes)
		}
		if c.LowerAIC != "full" {
			t.Errorf("lower AIC %q, want full", c.LowerAIC)
		}
	})
	t.Run("reduced fits better", func(t *testing.T) {
		full := nestedDoc(fit.Gamma, 30, 10, "a", "b")
		reduced := nestedDoc(fit.Gamma, 30, 9.5, "a")
		c, err := fit.CompareNested(full, reduced)
		if err != nil {
			t.Fatal(err)
		}
		if c.Test != "F" || c.PValue == nil || *c.PValue != 1 || *c.Statistic >= 0 || len(c.Notes) == 0 {
			t.Errorf("test %q, statistic %v, p %v, notes %q; want F, negative, 1, a note", c.Test, c.Statistic, c.PValue, c.Notes)
		}
	})
}

func TestWithoutTerms(t *testing.T) {
	spec, err := fit.ParseSpec([]byte(`name: m
response: y
family: gaussian
terms:
  - curve: x
  - linear: z
  - factor: site
  - surface: [x, z]
    size: [5, 5]
`))
	if err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		drop      []string
		wantName  string
		wantTerms string
	}{
		{[]string{"z"}, "m without z", "x site x,z"},
		{[]string{"z,x"}, "m without x,z", "x z site"}, // a surface named in either order
		{[]string{"x , z", "site"}, "m without site, x,z", "x z"},
		{[]string{"x", "z", "site", "x,z"}, "m without x, z, site, x,z", ""}, // intercept only
	}
	for _, tc := range cases {
		got, err := fit.WithoutTerms(spec, tc.drop)
		if err != nil {
			t.Fatalf("%v: %v", tc.drop, err)
		}
		var names []string
		for _, term := range got.Terms {
			names = append(names, term.Name())
		}
		if got.Name != tc.wantName || strings.Join(names, " ") != tc.wantTerms {
			t.Errorf("%v: name %q, terms %v; want %q, %s", tc.drop, got.Name, names, tc.wantName, tc.wantTerms)
		}
	}
	if spec.Name != "m" || len(spec.Terms) != 4 {
		t.Errorf("WithoutTerms changed its input: %q with %d terms", spec.Name, len(spec.Terms))
	}
	_, err = fit.WithoutTerms(spec, []string{"flow", "z", "x × z"})
	var ute *fit.UnknownTermsError
	if !errors.As(err, &ute) {
		t.Fatalf("error %v, want an *UnknownTermsError", err)
	}
	want := `model "m" has no terms "flow", "x × z"; its terms are x, z, site, x,z`
	if err.Error() != want {
		t.Errorf("error %q\nwant  %q", err, want)
	}
}

// simulatedCSV is invented data for exercising the comparison (not a
// reference): y depends on a curve in x and a line in z; w is noise; rows
// listed in missingW have no w.
func simulatedCSV(n int, missingW map[int]bool) fit.Source {
	r := rand.New(rand.NewPCG(11, 29))
	var b strings.Builder
	b.WriteString("y,x,z,w\n")
	for i := range n {
		x, z, w := r.Float64()*10, r.NormFloat64(), r.NormFloat64()
		y := math.Sin(x) + 0.5*z + 0.3*r.NormFloat64()
		ws := fmt.Sprintf("%.6f", w)
		if missingW[i] {
			ws = "NA"
		}
		fmt.Fprintf(&b, "%.6f,%.6f,%.6f,%s\n", y, x, z, ws)
	}
	text := b.String()
	src, err := csvsource.New("simulated.csv", func() (io.ReadCloser, error) {
		return io.NopCloser(strings.NewReader(text)), nil
	})
	if err != nil {
		panic(err)
	}
	return src
}

// SameRows keeps out of the reduced fit the rows the full fit dropped for a
// missing value in a dropped term's column; without it the fits see
// different rows and CompareNested refuses them.
func TestSameRows(t *testing.T) {
	spec, err := fit.ParseSpec([]byte("name: sim\nresponse: y\nfamily: gaussian\nterms:\n  - curve: x\n  - linear: z\n  - linear: w\n"))
	if err != nil {
		t.Fatal(err)
	}
	src := simulatedCSV(200, map[int]bool{3: true, 50: true, 199: true})
	full, reduced, c := fitPair(t, spec, src, []string{"w"})
	if full.N != 197 || reduced.N != 197 {
		t.Errorf("n = %d (full) and %d (reduced), want 197 (200 rows, 3 without w)", full.N, reduced.N)
	}
	// common practice (no source): with a curve the degrees of freedom are
	// effective ones and the test approximate.
	if !c.Approximate || c.Test != "F" || c.PValue == nil || *c.PValue < 0 || *c.PValue > 1 {
		t.Errorf("approximate %v, test %q, p %v; want true, F, a probability", c.Approximate, c.Test, c.PValue)
	}

	rs, _ := fit.WithoutTerms(spec, []string{"w"})
	other, err := fit.Fit(context.Background(), rs, src, fit.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := fit.CompareNested(full, other); err == nil || !strings.Contains(err.Error(), "different rows") {
		t.Errorf("comparing fits over 197 and %d rows: error %v, want one about different rows", other.N, err)
	}
}

// Dropping every term leaves the intercept-only model, whose deviance is
// the null deviance (an invariant, no outside source needed).
func TestNestedInterceptOnly(t *testing.T) {
	spec, err := fit.ParseSpec([]byte("name: sim\nresponse: y\nfamily: gaussian\nterms:\n  - curve: x\n  - linear: z\n"))
	if err != nil {
		t.Fatal(err)
	}
	full, reduced, c := fitPair(t, spec, simulatedCSV(150, nil), []string{"x", "z"})
	if e := relErr(reduced.Deviance, full.NullDeviance); e > 1e-10 {
		t.Errorf("intercept-only deviance %.12g, null deviance %.12g", reduced.Deviance, full.NullDeviance)
	}
	if e := relErr(reduced.EDFTotal, 1); e > 1e-10 {
		t.Errorf("intercept-only edf %.12g, want 1", reduced.EDFTotal)
	}
	if len(c.Reduced.Terms) != 0 || len(c.Dropped) != 2 {
		t.Errorf("reduced terms %v, dropped %v", c.Reduced.Terms, c.Dropped)
	}
	// common practice (no source): sin over 1.6 periods plus a line, noise
	// sd 0.3, 150 rows: both terms are needed beyond any doubt.
	if c.PValue == nil || *c.PValue > 1e-10 || c.LowerAIC != "full" {
		t.Errorf("p = %v, lower AIC %q; want p < 1e-10 and the full model", c.PValue, c.LowerAIC)
	}
}
