package fit_test

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// truth is an additive linear predictor of two covariates on [0, 1].
func truth(x1, x2 float64) float64 {
	return 0.5 + math.Sin(2*math.Pi*x1) + 0.6*math.Exp(2*x2)/3
}

// simulate draws n rows with known truth; family gaussian (σ = 0.5) or
// poisson (log link).
func simulate(rng *rand.Rand, n int, family string) *fit.Table {
	x1, x2, y := make([]float64, n), make([]float64, n), make([]float64, n)
	for i := range y {
		x1[i], x2[i] = rng.Float64(), rng.Float64()
		eta := truth(x1[i], x2[i])
		if family == "gaussian" {
			y[i] = eta + 0.5*rng.NormFloat64()
		} else {
			y[i] = float64(poissonDraw(rng, math.Exp(eta)))
		}
	}
	return &fit.Table{Numeric: map[string][]float64{"x1": x1, "x2": x2, "y": y}}
}

// poissonDraw samples a Poisson variate by inversion (fine for small means).
func poissonDraw(rng *rand.Rand, mean float64) int {
	u := rng.Float64()
	k, p := 0, math.Exp(-mean)
	cdf := p
	for u > cdf && k < 1000 {
		k++
		p *= mean / float64(k)
		cdf += p
	}
	return k
}

// Across-the-function coverage of 95% Bayesian intervals for the linear
// predictor should be close to nominal (Marra & Wood 2012, "Coverage
// properties of confidence intervals for generalized additive model
// components", Scand. J. Statist. 39): we require the average over
// replicates to lie in [0.90, 0.99]. With 60 replicates of 500 points the
// Monte-Carlo standard error of the average is below 0.01.
func TestBandCoverageSimulation(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	const replicates, n = 60, 500
	for _, family := range []string{"gaussian", "poisson"} {
		t.Run(family, func(t *testing.T) {
			t.Parallel()
			rng := rand.New(rand.NewPCG(2026, 12))
			spec := &fit.Spec{Name: "coverage", Response: "y", Family: fit.Family(family), Selection: fit.REML,
				Terms: []fit.TermSpec{
					{Kind: fit.Curve, Columns: []string{"x1"}, Basis: fit.Cubic, Knots: fit.QuantileKnots, Size: []int{10}},
					{Kind: fit.Curve, Columns: []string{"x2"}, Basis: fit.PSpline, Knots: fit.EvenKnots, Size: []int{10}},
				}}
			if family == "gaussian" {
				spec.Link = fit.Identity
			} else {
				spec.Link = fit.Log
			}
			total := 0.0
			for r := 0; r < replicates; r++ {
				data := simulate(rng, n, family)
				doc, err := fit.Fit(context.Background(), spec, data, fit.Options{})
				if err != nil {
					t.Fatal(err)
				}
				inside := 0
				err = fit.Predict(context.Background(), doc, data, func(p fit.Prediction) error {
					x1, x2 := p.Block.Numeric["x1"], p.Block.Numeric["x2"]
					for i := range p.Link {
						if math.Abs(p.Link[i]-truth(x1[i], x2[i])) <= 1.959964*p.LinkSE[i] {
							inside++
						}
					}
					return nil
				})
				if err != nil {
					t.Fatal(err)
				}
				total += float64(inside) / n
			}
			cov := total / replicates
			t.Logf("%s: average across-the-function coverage %.3f", family, cov)
			// source: Marra & Wood (2012): Bayesian intervals have close to nominal
			// across-the-function coverage; margin covers Monte-Carlo error.
			if cov < 0.90 || cov > 0.99 {
				t.Errorf("coverage %.3f outside [0.90, 0.99]", cov)
			}
		})
	}
}

// The lag-one autocorrelation of the residuals is reported in every fit:
// near 0 for independent errors, near ρ for AR(1) errors with a smooth mean
// (the residuals of a well-fitted smooth inherit the error correlation;
// common practice (no source)).
func TestResidualLag1Reported(t *testing.T) {
	rng := rand.New(rand.NewPCG(12, 1))
	const n = 3000
	x, yInd, yAR := make([]float64, n), make([]float64, n), make([]float64, n)
	e := 0.0
	for i := range x {
		x[i] = float64(i) / n
		mean := math.Sin(2 * math.Pi * x[i])
		e = 0.8*e + math.Sqrt(1-0.64)*rng.NormFloat64()
		yInd[i] = mean + rng.NormFloat64()
		yAR[i] = mean + e
	}
	spec := curveSpec(fit.Gaussian, fit.Identity, curve("x", 10))
	for _, tc := range []struct {
		name   string
		y      []float64
		lo, hi float64
	}{{"independent", yInd, -0.06, 0.06}, {"ar1", yAR, 0.7, 0.86}} {
		doc, err := fit.Fit(context.Background(), spec, &fit.Table{Numeric: map[string][]float64{"x": x, "y": tc.y}}, fit.Options{})
		if err != nil {
			t.Fatal(err)
		}
		if doc.ResidualLag1 < tc.lo || doc.ResidualLag1 > tc.hi {
			t.Errorf("%s: residual lag-one autocorrelation %.3f, want in [%g, %g]", tc.name, doc.ResidualLag1, tc.lo, tc.hi)
		}
	}
}
