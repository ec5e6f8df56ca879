package fit_test

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// benchTable makes n rows of the benchmark model's covariates: four smooth
// effects and two linear ones.
func benchTable(n int, family string) *fit.Table {
	rng := rand.New(rand.NewPCG(42, uint64(n)))
	cols := map[string][]float64{}
	for _, c := range []string{"x1", "x2", "x3", "x4", "z1", "z2", "y"} {
		cols[c] = make([]float64, n)
	}
	for i := 0; i < n; i++ {
		x1, x2, x3, x4 := rng.Float64(), rng.Float64(), rng.Float64(), rng.Float64()
		z1, z2 := rng.NormFloat64(), rng.NormFloat64()
		eta := 0.3 + 0.5*math.Sin(2*math.Pi*x1) + 0.4*x2*x2 + 0.3*math.Exp(-3*x3) + 0.2*math.Cos(3*x4) + 0.1*z1 - 0.1*z2
		cols["x1"][i], cols["x2"][i], cols["x3"][i], cols["x4"][i] = x1, x2, x3, x4
		cols["z1"][i], cols["z2"][i] = z1, z2
		if family == "gaussian" {
			cols["y"][i] = eta + 0.5*rng.NormFloat64()
		} else {
			cols["y"][i] = float64(poissonDraw(rng, math.Exp(eta)))
		}
	}
	return &fit.Table{Numeric: cols}
}

// benchSpec is the benchmark model: 4 curves of size 10 and 2 linear terms.
func benchSpec(family string) *fit.Spec {
	link := fit.Identity
	if family == "poisson" {
		link = fit.Log
	}
	return curveSpec(fit.Family(family), link, curve("x1", 10), curve("x2", 10), curve("x3", 10), curve("x4", 10), linear("z1"), linear("z2"))
}

// BenchmarkFit times a REML fit of the benchmark model. bench/run.sh
// compares it with numpy forming XᵀX of a matrix of the same size.
func BenchmarkFit(b *testing.B) {
	for _, family := range []string{"gaussian", "poisson"} {
		for _, n := range []int{10_000, 100_000, 1_000_000} {
			b.Run(fmt.Sprintf("%s/n=%d", family, n), func(b *testing.B) {
				data := benchTable(n, family)
				spec := benchSpec(family)
				b.ReportAllocs()
				b.ResetTimer()
				for b.Loop() {
					doc, err := fit.Fit(context.Background(), spec, data, fit.Options{})
					if err != nil {
						b.Fatal(err)
					}
					b.ReportMetric(float64(len(doc.Coefficients)), "coefficients")
					b.ReportMetric(float64(doc.Convergence.Passes), "passes")
				}
			})
		}
	}
}

// BenchmarkTerms times the richer terms against a plain curve at the same
// n: surfaces of size [5,5] and [10,10], and a curve per site for 50 sites.
func BenchmarkTerms(b *testing.B) {
	for _, n := range []int{100_000, 1_000_000} {
		rng := rand.New(rand.NewPCG(7, uint64(n)))
		x1, x2, y := make([]float64, n), make([]float64, n), make([]float64, n)
		site := make([]string, n)
		for i := range y {
			x1[i], x2[i] = rng.Float64(), rng.Float64()
			site[i] = fmt.Sprintf("S%02d", i%50)
			y[i] = math.Sin(3*x1[i])*math.Cos(2*x2[i]) + float64(i%50)/50 + 0.3*rng.NormFloat64()
		}
		data := &fit.Table{Numeric: map[string][]float64{"x1": x1, "x2": x2, "y": y}, Text: map[string][]string{"site": site}}
		cases := []struct {
			name string
			spec *fit.Spec
		}{
			{"plain-curve", curveSpec(fit.Gaussian, fit.Identity, curve("x1", 10))},
			{"surface-5x5", curveSpec(fit.Gaussian, fit.Identity, fit.TermSpec{Kind: fit.Surface, Columns: []string{"x1", "x2"}, Basis: fit.PSpline, Knots: fit.EvenKnots, Size: []int{5, 5}})},
			{"surface-10x10", curveSpec(fit.Gaussian, fit.Identity, fit.TermSpec{Kind: fit.Surface, Columns: []string{"x1", "x2"}, Basis: fit.PSpline, Knots: fit.EvenKnots, Size: []int{10, 10}})},
		}
		if n == 100_000 {
			cases = append(cases, struct {
				name string
				spec *fit.Spec
			}{"curve-per-site-50", curveSpec(fit.Gaussian, fit.Identity,
				fit.TermSpec{Kind: fit.Curve, Columns: []string{"x1"}, Basis: fit.Cubic, Knots: fit.QuantileKnots, Size: []int{10}, By: "site"}, factor("site"))})
		}
		for _, c := range cases {
			b.Run(fmt.Sprintf("%s/n=%d", c.name, n), func(b *testing.B) {
				for b.Loop() {
					if _, err := fit.Fit(context.Background(), c.spec, data, fit.Options{}); err != nil {
						b.Fatal(err)
					}
				}
			})
		}
	}
}

// Starting a large poisson fit from a fit to a sample of its rows changes
// only the number of passes, not the fit (to the convergence tolerance).
func TestSampleStartChangesNothingButPasses(t *testing.T) {
	if testing.Short() {
		t.Skip("large fit")
	}
	data := benchTable(250_000, "poisson")
	spec := benchSpec("poisson")
	with, err := fit.Fit(context.Background(), spec, data, fit.Options{})
	if err != nil {
		t.Fatal(err)
	}
	without, err := fit.Fit(context.Background(), spec, data, fit.Options{NoSampleStart: true})
	if err != nil {
		t.Fatal(err)
	}
	if d := math.Abs(with.Deviance-without.Deviance) / without.Deviance; d > 1e-8 {
		t.Errorf("deviance %.12g vs %.12g", with.Deviance, without.Deviance)
	}
	for i := range with.Coefficients {
		se := math.Sqrt(without.Covariance[i][i])
		if math.Abs(with.Coefficients[i]-without.Coefficients[i]) > 1e-4*se {
			t.Errorf("coefficient %d: %.10g vs %.10g (se %.3g)", i, with.Coefficients[i], without.Coefficients[i], se)
		}
	}
	t.Logf("passes over all rows: %d with the sample start, %d without", with.Convergence.Passes, without.Convergence.Passes)
}
