package fit_test

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// A tensor-product surface recovers a smooth function of two covariates:
// the fitted surface is within a few standard errors of the truth over most
// of the grid (simulation with known truth, fixed seed).
func TestSurfaceRecoversKnownFunction(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 9))
	const n = 2000
	f := func(a, b float64) float64 { return math.Sin(3*a) * math.Cos(2*b) }
	x1, x2, y := make([]float64, n), make([]float64, n), make([]float64, n)
	for i := range y {
		x1[i], x2[i] = rng.Float64(), rng.Float64()
		y[i] = f(x1[i], x2[i]) + 0.2*rng.NormFloat64()
	}
	for _, b := range []fit.Basis{fit.PSpline, fit.Cubic} {
		t.Run(string(b), func(t *testing.T) {
			knots := fit.EvenKnots
			if b == fit.Cubic {
				knots = fit.QuantileKnots
			}
			spec := curveSpec(fit.Gaussian, fit.Identity, fit.TermSpec{Kind: fit.Surface, Columns: []string{"x1", "x2"}, Basis: b, Knots: knots, Size: []int{6, 6}})
			doc, err := fit.Fit(context.Background(), spec, &fit.Table{Numeric: map[string][]float64{"x1": x1, "x2": x2, "y": y}}, fit.Options{})
			if err != nil {
				t.Fatal(err)
			}
			assertFinite(t, doc)
			g := doc.Terms[0].SurfaceGrid
			if g == nil || len(g.Fit) != 30 {
				t.Fatal("no surface grid")
			}
			// Centre the truth like the fit (mean over the data) and compare.
			mean := 0.0
			for i := range x1 {
				mean += f(x1[i], x2[i])
			}
			mean /= n
			within, total := 0, 0
			for i, a := range g.X1 {
				for j, bb := range g.X2 {
					total++
					if math.Abs(g.Fit[i][j]-(f(a, bb)-mean)) <= 3*g.SE[i][j]+0.02 {
						within++
					}
				}
			}
			if frac := float64(within) / float64(total); frac < 0.9 {
				t.Errorf("only %.2f of the grid within 3 se of the truth", frac)
			}
			if doc.Scale < 0.03 || doc.Scale > 0.05 {
				t.Errorf("scale %.4f, want about 0.04 (noise sd 0.2)", doc.Scale)
			}
			if len(doc.Terms[0].Smoothing) != 2 {
				t.Errorf("want one smoothing strength per margin, got %v", doc.Terms[0].Smoothing)
			}
			t.Logf("edf %.2f, smoothing %v, explained %.3f", doc.Terms[0].EDF, doc.Terms[0].Smoothing, doc.DevianceExplained)
		})
	}
}

// A surface sharing a column with a curve holds only the interaction, so the
// model stays identifiable (the spec in DESIGN.md has such a pair), and the
// interaction surface is near zero when the truth is additive.
func TestInteractionSurfaceBesideCurves(t *testing.T) {
	rng := rand.New(rand.NewPCG(4, 4))
	const n = 1500
	x1, x2, y := make([]float64, n), make([]float64, n), make([]float64, n)
	for i := range y {
		x1[i], x2[i] = rng.Float64(), rng.Float64()
		y[i] = math.Sin(3*x1[i]) + x2[i]*x2[i] + 0.2*rng.NormFloat64()
	}
	spec := curveSpec(fit.Gaussian, fit.Identity, curve("x1", 8), curve("x2", 8),
		fit.TermSpec{Kind: fit.Surface, Columns: []string{"x1", "x2"}, Basis: fit.PSpline, Knots: fit.EvenKnots, Size: []int{5, 5}})
	doc, err := fit.Fit(context.Background(), spec, &fit.Table{Numeric: map[string][]float64{"x1": x1, "x2": x2, "y": y}}, fit.Options{})
	if err != nil {
		t.Fatal(err)
	}
	s := doc.Terms[2]
	if !s.Interaction {
		t.Fatal("the surface should be an interaction-only term")
	}
	big := 0.0
	for i := range s.SurfaceGrid.Fit {
		for j := range s.SurfaceGrid.Fit[i] {
			big = math.Max(big, math.Abs(s.SurfaceGrid.Fit[i][j]))
		}
	}
	// The truth has no interaction: the surface stays small next to the
	// main effects (ranges about 1).
	if big > 0.15 || s.EDF > 5 {
		t.Errorf("interaction surface reaches %.3f with edf %.2f; want near zero", big, s.EDF)
	}
	t.Logf("interaction edf %.2f, max |fit| %.3f", s.EDF, big)
}
