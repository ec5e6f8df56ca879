package fit_test

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// Each curve's density strip counts the rows along its axis: the counts
// add up to the rows of the curve (its level's, for a by-level curve), and
// a covariate drawn twice as often on the left half has about twice the
// rows there (simulation with known truth; below the 50 000-row sample
// the counts are exact).
func TestCurveDensity(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 17))
	const n = 3000
	data := sites(rng, n, []string{"S05", "S07"}, []float64{1, 2}, []float64{0, 0.5})
	x := data.Numeric["x"]
	for i := range x {
		// Two thirds of the rows in [0, 12.5), one third in [12.5, 25].
		if i%3 == 0 {
			x[i] = 12.5 + 12.5*rng.Float64()
		} else {
			x[i] = 12.5 * rng.Float64()
		}
	}
	spec := curveSpec(fit.Gaussian, fit.Identity,
		fit.TermSpec{Kind: fit.Curve, Columns: []string{"x"}, Basis: fit.Cubic, Knots: fit.QuantileKnots, Size: []int{8}},
		fit.TermSpec{Kind: fit.Curve, Columns: []string{"x"}, Basis: fit.Cubic, Knots: fit.EvenKnots, Size: []int{6}, By: "site"},
		factor("site"))
	doc, err := fit.Fit(context.Background(), spec, data, fit.Options{})
	if err != nil {
		t.Fatal(err)
	}
	sum := func(d []float64) float64 {
		s := 0.0
		for _, v := range d {
			s += v
		}
		return s
	}
	whole := doc.Terms[0].Grid.Density
	if len(whole) == 0 || math.Abs(sum(whole)-n) > 1e-9 {
		t.Fatalf("density of x adds up to %g, want %d", sum(whole), n)
	}
	half := len(whole) / 2
	left, right := sum(whole[:half]), sum(whole[half:])
	if r := left / right; math.Abs(r-2) > 0.25 {
		t.Errorf("left/right rows %g/%g = %.2f, want about 2", left, right, r)
	}
	for _, k := range []int{1, 2} {
		if got := sum(doc.Terms[k].Grid.Density); math.Abs(got-n/2) > 1e-9 {
			t.Errorf("%s: density adds up to %g, want the level's %d rows", doc.Terms[k].Name, got, n/2)
		}
	}
}
