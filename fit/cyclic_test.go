package fit_test

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// A cyclic curve of hour of day joins at midnight: the fitted curve has the
// same value at 0 and 24, and hour 25 predicts like hour 1.
func TestCyclicCurveFit(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 8))
	const n = 600
	hour, y := make([]float64, n), make([]float64, n)
	for i := range y {
		hour[i] = 24 * rng.Float64()
		y[i] = 5 + 2*math.Sin(2*math.Pi*hour[i]/24) + 0.3*rng.NormFloat64()
	}
	for _, knots := range []fit.KnotRule{fit.EvenKnots, fit.QuantileKnots} {
		spec := curveSpec(fit.Gaussian, fit.Identity, fit.TermSpec{Kind: fit.Curve, Columns: []string{"hour"}, Basis: fit.Cyclic, Knots: knots, Size: []int{8}, Period: []float64{0, 24}})
		doc, err := fit.Fit(context.Background(), spec, &fit.Table{Numeric: map[string][]float64{"hour": hour, "y": y}}, fit.Options{})
		if err != nil {
			t.Fatal(err)
		}
		g := doc.Terms[0].Grid
		last := len(g.X) - 1
		if g.X[0] != 0 || g.X[last] != 24 || math.Abs(g.Fit[0]-g.Fit[last]) > 1e-9 {
			t.Errorf("%s knots: grid runs %g..%g with fits %g and %g", knots, g.X[0], g.X[last], g.Fit[0], g.Fit[last])
		}
		var pred []float64
		err = fit.Predict(context.Background(), doc, &fit.Table{Numeric: map[string][]float64{"hour": {1, 25, -23}}}, func(p fit.Prediction) error {
			pred = append(pred, p.Response...)
			return nil
		})
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(pred[0]-pred[1]) > 1e-9 || math.Abs(pred[0]-pred[2]) > 1e-9 {
			t.Errorf("%s knots: hours 1, 25, −23 predict %v", knots, pred)
		}
		// The truth's amplitude is 2: the fit at hour 6 is near +2 (centred).
		if math.Abs(pred[0]-(5+2*math.Sin(2*math.Pi/24))) > 0.2 {
			t.Errorf("%s knots: fit at hour 1 is %g", knots, pred[0])
		}
	}
}

// A surface with a cyclic margin joins across the period: at every value of
// the other column, the surface at hour 0 equals the surface at hour 24.
func TestSurfaceWithCyclicMargin(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	const n = 1500
	hour, temp, y := make([]float64, n), make([]float64, n), make([]float64, n)
	for i := range y {
		hour[i], temp[i] = 24*rng.Float64(), 25*rng.Float64()
		y[i] = math.Sin(2*math.Pi*hour[i]/24)*temp[i]/10 + 0.2*rng.NormFloat64()
	}
	spec := curveSpec(fit.Gaussian, fit.Identity, fit.TermSpec{Kind: fit.Surface, Columns: []string{"hour", "temp"},
		Bases: []fit.Basis{fit.Cyclic, fit.PSpline}, Periods: [][]float64{{0, 24}, nil}, Knots: fit.EvenKnots, Size: []int{8, 5}})
	doc, err := fit.Fit(context.Background(), spec, &fit.Table{Numeric: map[string][]float64{"hour": hour, "temp": temp, "y": y}}, fit.Options{})
	if err != nil {
		t.Fatal(err)
	}
	g := doc.Terms[0].SurfaceGrid
	last := len(g.X1) - 1
	if g.X1[0] != 0 || g.X1[last] != 24 {
		t.Fatalf("hour grid %g..%g, want the period 0..24", g.X1[0], g.X1[last])
	}
	for j := range g.X2 {
		if d := math.Abs(g.Fit[0][j] - g.Fit[last][j]); d > 1e-9 {
			t.Errorf("temp %.2f: surface differs by %g between hour 0 and 24", g.X2[j], d)
		}
	}
}
