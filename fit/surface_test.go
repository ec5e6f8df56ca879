package fit_test

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// A tensor-product surface recovers a smooth function of two covariates
// (simulation with known truth, fixed seeds, n = 2000): its mean squared
// error against the truth is well below that of the best additive fit (two
// curves), and its 95% bands cover the truth at 0.90–0.99 of the data points
// on average over replicates (Marra & Wood 2012 for the across-the-function
// coverage of Bayesian bands; the Monte-Carlo sd of the average over 20
// replicates is about 0.01).
func TestSurfaceRecoversKnownFunction(t *testing.T) {
	const n, replicates = 2000, 20
	truth := func(a, b float64) float64 { return 1 + math.Sin(3*a)*math.Cos(3*b) }
	for _, b := range []fit.Basis{fit.PSpline, fit.Cubic} {
		t.Run(string(b), func(t *testing.T) {
			t.Parallel()
			rng := rand.New(rand.NewPCG(3, 9))
			knots := fit.EvenKnots
			if b == fit.Cubic {
				knots = fit.QuantileKnots
			}
			surface := curveSpec(fit.Gaussian, fit.Identity, fit.TermSpec{Kind: fit.Surface, Columns: []string{"x1", "x2"}, Basis: b, Knots: knots, Size: []int{6, 6}})
			additive := curveSpec(fit.Gaussian, fit.Identity, curve("x1", 8), curve("x2", 8))
			var mseSurface, mseAdditive, coverage float64
			for r := 0; r < replicates; r++ {
				x1, x2, y := make([]float64, n), make([]float64, n), make([]float64, n)
				for i := range y {
					x1[i], x2[i] = rng.Float64(), rng.Float64()
					y[i] = truth(x1[i], x2[i]) + 0.2*rng.NormFloat64()
				}
				data := &fit.Table{Numeric: map[string][]float64{"x1": x1, "x2": x2, "y": y}}
				for k, spec := range []*fit.Spec{surface, additive} {
					doc, err := fit.Fit(context.Background(), spec, data, fit.Options{})
					if err != nil {
						t.Fatal(err)
					}
					if k == 0 {
						assertFinite(t, doc)
						if g := doc.Terms[0].SurfaceGrid; g == nil || len(g.Fit) != 40 || len(doc.Terms[0].Smoothing) != 2 {
							t.Fatal("want a 40×40 surface grid and one smoothing strength per margin")
						}
					}
					err = fit.Predict(context.Background(), doc, data, func(p fit.Prediction) error {
						for i := range p.Link {
							want := truth(p.Block.Numeric["x1"][i], p.Block.Numeric["x2"][i])
							e := p.Link[i] - want
							if k == 0 {
								mseSurface += e * e / n
								if math.Abs(e) <= 1.959964*p.LinkSE[i] {
									coverage += 1.0 / n
								}
							} else {
								mseAdditive += e * e / n
							}
						}
						return nil
					})
					if err != nil {
						t.Fatal(err)
					}
				}
			}
			mseSurface /= replicates
			mseAdditive /= replicates
			coverage /= replicates
			t.Logf("%s: MSE surface %.5f, additive %.5f; coverage %.3f", b, mseSurface, mseAdditive, coverage)
			// source: simulation with known truth; the truth has a strong interaction.
			if mseSurface > 0.25*mseAdditive {
				t.Errorf("surface MSE %.5f is not clearly below the additive fit's %.5f", mseSurface, mseAdditive)
			}
			// source: Marra & Wood (2012), across-the-function coverage near nominal.
			if coverage < 0.90 || coverage > 0.99 {
				t.Errorf("coverage %.3f outside [0.90, 0.99]", coverage)
			}
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

// Grid points far from every observation are marked: with data only in the
// lower-left triangle x1 + x2 < 1, the upper-right corner is far and the
// lower-left corner is not.
func TestSurfaceGridMarksFarPoints(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 1))
	var x1, x2, y []float64
	for len(y) < 800 {
		a, b := rng.Float64(), rng.Float64()
		if a+b >= 1 {
			continue
		}
		x1, x2 = append(x1, a), append(x2, b)
		y = append(y, a*b+0.1*rng.NormFloat64())
	}
	spec := curveSpec(fit.Gaussian, fit.Identity, fit.TermSpec{Kind: fit.Surface, Columns: []string{"x1", "x2"}, Basis: fit.PSpline, Knots: fit.EvenKnots, Size: []int{5, 5}})
	doc, err := fit.Fit(context.Background(), spec, &fit.Table{Numeric: map[string][]float64{"x1": x1, "x2": x2, "y": y}}, fit.Options{})
	if err != nil {
		t.Fatal(err)
	}
	g := doc.Terms[0].SurfaceGrid
	last := len(g.X1) - 1
	if len(g.X1) != 40 || !g.Far[last][last] || g.Far[0][0] {
		t.Errorf("grid %d points a side; far at the top corner %v, at the origin %v", len(g.X1), g.Far[last][last], g.Far[0][0])
	}
}

// A surface after a curve split by a factor still finds its own data
// sample: its grid is not all marked far.
func TestSurfaceAfterByCurveKeepsItsSample(t *testing.T) {
	rng := rand.New(rand.NewPCG(6, 6))
	data := sites(rng, 900, []string{"A", "B", "C"}, []float64{1, 1, 1}, []float64{0, 0, 0})
	x2 := make([]float64, 900)
	for i := range x2 {
		x2[i] = rng.Float64()
	}
	data.Numeric["x2"] = x2
	spec := curveSpec(fit.Gaussian, fit.Identity,
		fit.TermSpec{Kind: fit.Curve, Columns: []string{"x"}, Basis: fit.Cubic, Knots: fit.QuantileKnots, Size: []int{5}, By: "site"},
		factor("site"),
		fit.TermSpec{Kind: fit.Surface, Columns: []string{"x", "x2"}, Basis: fit.PSpline, Knots: fit.EvenKnots, Size: []int{4, 4}})
	doc, err := fit.Fit(context.Background(), spec, data, fit.Options{})
	if err != nil {
		t.Fatal(err)
	}
	g := doc.Terms[len(doc.Terms)-1].SurfaceGrid
	far := 0
	for i := range g.Far {
		for j := range g.Far[i] {
			if g.Far[i][j] {
				far++
			}
		}
	}
	if far > len(g.Far)*len(g.Far[0])/4 {
		t.Errorf("%d of %d grid points marked far from uniform data", far, len(g.Far)*len(g.Far[0]))
	}
}
