package fit_test

import (
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/fit/csvsource"
)

// referenceDir is where the outside reference values live (see
// testdata/reference/README.md for how each set was produced).
const referenceDir = "../testdata/reference"

// fitCase fits model file spec to data.csv in dir.
func fitCase(t *testing.T, dir, specFile string) *fit.Document {
	t.Helper()
	return fitCaseWith(t, dir, specFile, fit.Options{})
}

// fitCaseWith is fitCase with options.
func fitCaseWith(t *testing.T, dir, specFile string, opt fit.Options) *fit.Document {
	t.Helper()
	raw, err := os.ReadFile(filepath.Join(dir, specFile))
	if err != nil {
		t.Fatal(err)
	}
	spec, err := fit.ParseSpec(raw)
	if err != nil {
		t.Fatalf("%s: %v", specFile, err)
	}
	src, err := csvsource.Open(filepath.Join(dir, "data.csv"))
	if err != nil {
		t.Fatal(err)
	}
	doc, err := fit.Fit(context.Background(), spec, src, opt)
	if err != nil {
		t.Fatalf("%s: %v", specFile, err)
	}
	return doc
}

func readJSON(t *testing.T, path string, v any) {
	t.Helper()
	raw, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(raw, v); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
}

func relErr(got, want float64) float64 {
	if want == 0 {
		return math.Abs(got)
	}
	return math.Abs(got-want) / math.Abs(want)
}

// predictRows evaluates the fitted mean at each row of data.csv in dir.
func predictRows(t *testing.T, doc *fit.Document, dir string) []float64 {
	t.Helper()
	src, err := csvsource.Open(filepath.Join(dir, "data.csv"))
	if err != nil {
		t.Fatal(err)
	}
	var out []float64
	err = fit.Predict(context.Background(), doc, src, func(p fit.Prediction) error {
		out = append(out, p.Response...)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

type splineReference struct {
	Source string `json:"source"`
	Fixed  struct {
		Lam    float64   `json:"lam"`
		Fitted []float64 `json:"fitted"`
	} `json:"fixed"`
	GCV *struct {
		Lam    float64   `json:"lam"`
		Fitted []float64 `json:"fitted"`
	} `json:"gcv"`
}

// A cubic curve with a knot at every distinct value and a fixed smoothing
// strength is the cubic smoothing spline; GCV selection must find the same
// λ as scipy's GCV search.
func TestCubicReproducesSmoothingSpline(t *testing.T) {
	cases, _ := filepath.Glob(filepath.Join(referenceDir, "smoothing_spline", "*", "expected.json"))
	if len(cases) < 2 {
		t.Fatalf("want at least two smoothing-spline reference sets, found %d", len(cases))
	}
	for _, exp := range cases {
		dir := filepath.Dir(exp)
		t.Run(filepath.Base(dir), func(t *testing.T) {
			var ref splineReference
			readJSON(t, exp, &ref)
			doc := fitCase(t, dir, "model_fixed.yaml")
			got := predictRows(t, doc, dir)
			worst := 0.0
			for i, w := range ref.Fixed.Fitted {
				worst = math.Max(worst, relErr(got[i], w))
			}
			// source: scipy.interpolate.make_smoothing_spline (ref.Source), fixed lam.
			if worst > 1e-8 {
				t.Errorf("fixed λ=%g: worst relative error %.3g, want ≤ 1e-8", ref.Fixed.Lam, worst)
			}
			if ref.GCV == nil {
				return
			}
			if _, err := os.Stat(filepath.Join(dir, "model_gcv.yaml")); err != nil {
				return
			}
			doc = fitCase(t, dir, "model_gcv.yaml")
			got = predictRows(t, doc, dir)
			worst = 0
			for i, w := range ref.GCV.Fitted {
				worst = math.Max(worst, relErr(got[i], w))
			}
			// source: scipy.interpolate.make_smoothing_spline (ref.Source), lam=None (GCV).
			if worst > 1e-4 {
				t.Errorf("GCV: worst relative error %.3g, want ≤ 1e-4 (our λ %g, scipy's %g)", worst, doc.Terms[0].Smoothing[0], ref.GCV.Lam)
			}
		})
	}
}
