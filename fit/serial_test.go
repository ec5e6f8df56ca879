package fit_test

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// arSeries simulates n time-ordered rows with a smooth mean in x and AR(1)
// errors of lag-one correlation rho and marginal sd 0.5. x drifts with time
// (a slowly varying sensor covariate), which is when ignoring the serial
// correlation hurts most.
func arSeries(rng *rand.Rand, n int, rho float64) (*fit.Table, func(float64) float64) {
	truth := func(x float64) float64 { return 2 + math.Sin(2*math.Pi*x) + 0.5*x }
	t, x, y := make([]float64, n), make([]float64, n), make([]float64, n)
	e := 0.5 * rng.NormFloat64()
	for i := range y {
		t[i] = float64(i)
		x[i] = (float64(i) + 0.5*rng.Float64()) / float64(n)
		if i > 0 {
			e = rho*e + 0.5*math.Sqrt(1-rho*rho)*rng.NormFloat64()
		}
		y[i] = truth(x[i]) + e
	}
	return &fit.Table{Numeric: map[string][]float64{"t": t, "x": x, "y": y}}, truth
}

// With AR(1) errors (ρ = 0.8) the serial option estimates ρ and keeps the
// 95% bands' across-the-function coverage near nominal, where ignoring the
// correlation makes them far too narrow (Wood et al. 2017, JASA, for the
// AR(1) treatment; Marra & Wood 2012 for coverage). Margins: the Monte-Carlo
// sd of average coverage over 20 replicates is about 0.02.
func TestSerialErrors(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	rng := rand.New(rand.NewPCG(80, 1))
	// ρ at n = 5000.
	data, _ := arSeries(rng, 5000, 0.8)
	spec := curveSpec(fit.Gaussian, fit.Identity, curve("x", 10))
	spec.Serial = &fit.SerialSpec{Order: "t", Estimate: true}
	doc, err := fit.Fit(context.Background(), spec, data, fit.Options{})
	if err != nil {
		t.Fatal(err)
	}
	// source: simulation with known truth ρ = 0.8.
	if doc.Serial == nil || math.Abs(doc.Serial.Rho-0.8) > 0.05 {
		t.Fatalf("estimated ρ %+v, want within 0.05 of 0.8", doc.Serial)
	}
	t.Logf("n=5000: ρ̂ = %.3f, scale %.4f (marginal variance 0.25)", doc.Serial.Rho, doc.Scale)

	coverage := func(serial bool) float64 {
		rng := rand.New(rand.NewPCG(81, 2))
		total := 0.0
		const reps, n = 20, 1000
		for r := 0; r < reps; r++ {
			data, truth := arSeries(rng, n, 0.8)
			spec := curveSpec(fit.Gaussian, fit.Identity, curve("x", 10))
			if serial {
				spec.Serial = &fit.SerialSpec{Order: "t", Estimate: true}
			}
			doc, err := fit.Fit(context.Background(), spec, data, fit.Options{})
			if err != nil {
				t.Fatal(err)
			}
			err = fit.Predict(context.Background(), doc, data, func(p fit.Prediction) error {
				for i := range p.Link {
					if math.Abs(p.Link[i]-truth(p.Block.Numeric["x"][i])) <= 1.959964*p.LinkSE[i] {
						total += 1.0 / n
					}
				}
				return nil
			})
			if err != nil {
				t.Fatal(err)
			}
		}
		return total / reps
	}
	with, without := coverage(true), coverage(false)
	t.Logf("coverage with the AR(1) option %.3f, without %.3f", with, without)
	// source: Marra & Wood (2012) near-nominal coverage; simulation margin above.
	if with < 0.90 || with > 0.99 {
		t.Errorf("coverage with AR(1) %.3f outside [0.90, 0.99]", with)
	}
}

// Rows out of time order are an error naming the line and column; a gap
// larger than the limit starts a new stretch.
func TestSerialOrderAndGaps(t *testing.T) {
	rng := rand.New(rand.NewPCG(82, 3))
	data, _ := arSeries(rng, 300, 0.5)
	spec := curveSpec(fit.Gaussian, fit.Identity, curve("x", 6))
	spec.Serial = &fit.SerialSpec{Order: "t", Rho: 0.5, Gap: 1.5}
	tcol := data.Numeric["t"]
	for i := 150; i < len(tcol); i++ {
		tcol[i] += 10 // a gap of 11 between rows 149 and 150
	}
	doc, err := fit.Fit(context.Background(), spec, data, fit.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if doc.Serial.Stretches != 2 || doc.Serial.Rho != 0.5 || doc.Serial.Estimated {
		t.Errorf("serial record %+v, want 2 stretches at the fixed ρ 0.5", doc.Serial)
	}
	tcol[20], tcol[21] = tcol[21], tcol[20]
	_, err = fit.Fit(context.Background(), spec, data, fit.Options{})
	if err == nil || !contains(err.Error(), `line 23, column "t": rows must come in increasing order`) {
		t.Errorf("error %v; want the out-of-order row named", err)
	}
}

func contains(s, sub string) bool {
	for i := 0; i+len(sub) <= len(s); i++ {
		if s[i:i+len(sub)] == sub {
			return true
		}
	}
	return false
}
