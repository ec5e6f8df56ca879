package fit_test

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// degradeTruth is an invented smooth truth on the link scale: a curve in x
// on [0, 10] plus a line in z. bump adds amp·sin over the upper half of x
// (a changed curve: the reference no longer fits there).
func degradeTruth(x, z, amp float64) float64 {
	eta := 0.8 + 0.6*math.Sin(x/1.6) + 0.3*z
	if x > 5 {
		eta += amp * math.Sin(math.Pi*(x-5)/5)
	}
	return eta
}

// degradeRows draws n rows from the truth: gaussian with σ = 0.5, or
// poisson with a log link. t numbers the rows from start (a time column).
func degradeRows(rng *rand.Rand, n int, family fit.Family, amp, start float64) *fit.Table {
	x, z, y, tcol := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
	for i := range n {
		x[i], z[i], tcol[i] = 10*rng.Float64(), rng.NormFloat64(), start+float64(i)
		eta := degradeTruth(x[i], z[i], amp)
		if family == fit.Gaussian {
			y[i] = eta + 0.5*rng.NormFloat64()
		} else {
			y[i] = float64(poissonDraw(rng, math.Exp(eta)))
		}
	}
	return &fit.Table{Numeric: map[string][]float64{"x": x, "z": z, "y": y, "t": tcol}}
}

func degradeSpec(family fit.Family) *fit.Spec {
	link := fit.Identity
	if family == fit.Poisson {
		link = fit.Log
	}
	return &fit.Spec{Name: "degrade", Response: "y", Family: family, Link: link, Selection: fit.REML,
		Terms: []fit.TermSpec{
			{Kind: fit.Curve, Columns: []string{"x"}, Basis: fit.Cubic, Knots: fit.QuantileKnots, Size: []int{10}},
			{Kind: fit.Linear, Columns: []string{"z"}},
		}}
}

func degradeFit(t *testing.T, family fit.Family, rows *fit.Table) *fit.Document {
	t.Helper()
	doc, err := fit.Fit(context.Background(), degradeSpec(family), rows, fit.Options{TimeColumn: "t"})
	if err != nil {
		t.Fatal(err)
	}
	return doc
}

var degradeTol = fit.Tolerance{DevianceIncrease: 0.15}

// With the same truth in both windows, the reference predicts the
// candidate's rows about as well as the candidate does once the candidate's
// in-sample optimism 2·φ·EDF is added back (source: Efron 1986, "How biased
// is the apparent error rate of a prediction rule?", JASA 81: the expected
// optimism of the apparent deviance is 2·Σ cov(μ̂ᵢ, yᵢ)/φ·φ, which is 2·φ·EDF
// for a linear smoother and to first order for a GLM). The same holds on
// held-out rows with no correction.
//
// Monte-Carlo margin: the ratio's spread comes from the reference's
// estimation error, Σ(μ̂_ref − μ)² plus its cross term with the noise, of
// order φ·√(6·EDF) on a deviance of order φ·n; with EDF ≈ 8 and n = 1000
// that is a standard deviation of about 0.007 per replicate (0.006 to 0.009
// measured, held-out rows adding their own noise) and 0.002 for the mean of
// 20. We require the mean within 1 ± 0.02 (about ten standard errors,
// leaving room for the first-order bias of the optimism, of order
// EDF/n ≈ 0.01) and every replicate below the 1.15 breach line.
func TestDegradationSameTruthNearOne(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	const replicates, n = 20, 1000
	for _, family := range []fit.Family{fit.Gaussian, fit.Poisson} {
		for _, heldOut := range []bool{false, true} {
			name := string(family) + "/fitted-rows"
			if heldOut {
				name = string(family) + "/held-out"
			}
			t.Run(name, func(t *testing.T) {
				t.Parallel()
				rng := rand.New(rand.NewPCG(1986, 81))
				sum, sumSq := 0.0, 0.0
				for r := range replicates {
					ref := degradeFit(t, family, degradeRows(rng, n, family, 0, 0))
					candRows := degradeRows(rng, n, family, 0, n)
					cand := degradeFit(t, family, candRows)
					scored := candRows
					if heldOut {
						scored = degradeRows(rng, n, family, 0, 2*n)
					}
					d, err := fit.PredictiveDegradation(context.Background(), ref, cand, scored, degradeTol, heldOut)
					if err != nil {
						t.Fatal(err)
					}
					if d.Rows != n {
						t.Fatalf("replicate %d: scored %d rows, want %d", r, d.Rows, n)
					}
					if want := 2 * cand.Scale * cand.EDFTotal; !heldOut && math.Abs(d.Optimism-want) > 1e-12*want || heldOut && d.Optimism != 0 {
						t.Errorf("replicate %d: optimism %g, want %g (held out: 0)", r, d.Optimism, want)
					}
					// source: Efron 1986 (see above); margin: common practice (no source),
					// the breach line itself.
					if d.Breach || d.Ratio > 1.15 {
						t.Errorf("replicate %d: ratio %.4f breaches with the truth unchanged", r, d.Ratio)
					}
					sum += d.Ratio
					sumSq += d.Ratio * d.Ratio
				}
				mean := sum / replicates
				sd := math.Sqrt((sumSq - replicates*mean*mean) / (replicates - 1))
				t.Logf("%s: mean ratio %.4f, standard deviation %.4f over %d replicates", name, mean, sd, replicates)
				// source: Efron 1986 (expected ratio 1); Monte-Carlo margin stated above.
				if math.Abs(mean-1) > 0.02 {
					t.Errorf("mean ratio %.4f, want 1 ± 0.02", mean)
				}
			})
		}
	}
}

// When the curve has changed over half its range by 0.6 (1.2 noise standard
// deviations), the reference's deviance on the new rows grows by about
// the mean squared change, 0.6²/2 · ½ ≈ 0.09 per row on a noise variance
// of 0.25: a ratio near 1.36, well above the breach line 1.15
// (common practice (no source): the deviance of a misspecified mean adds
// its squared bias; the margin 0.21 is over 20 times the ratio's
// Monte-Carlo standard deviation of about 0.01).
func TestDegradationChangedTruthBreaches(t *testing.T) {
	rng := rand.New(rand.NewPCG(1986, 3))
	const n = 1000
	ref := degradeFit(t, fit.Gaussian, degradeRows(rng, n, fit.Gaussian, 0, 0))
	candRows := degradeRows(rng, n, fit.Gaussian, 0.6, n)
	cand := degradeFit(t, fit.Gaussian, candRows)
	d, err := fit.PredictiveDegradation(context.Background(), ref, cand, candRows, degradeTol, false)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("ratio %.4f (reference deviance %.1f, candidate %.1f + optimism %.1f)", d.Ratio, d.ReferenceDeviance, d.CandidateDeviance, d.Optimism)
	if d.Ratio < 1.25 || !d.Breach {
		t.Errorf("ratio %.4f (breach %v), want clearly above 1.15", d.Ratio, d.Breach)
	}
}

// The check reads the response: rows without it are an error that names
// the column, as are rows that are not the candidate's own (or, held out,
// are exactly its own).
func TestDegradationErrors(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 7))
	refRows := degradeRows(rng, 300, fit.Gaussian, 0, 0)
	candRows := degradeRows(rng, 300, fit.Gaussian, 0, 300)
	other := degradeRows(rng, 300, fit.Gaussian, 0, 600)
	ref, cand := degradeFit(t, fit.Gaussian, refRows), degradeFit(t, fit.Gaussian, candRows)
	noY := &fit.Table{Numeric: map[string][]float64{"x": candRows.Numeric["x"], "z": candRows.Numeric["z"], "t": candRows.Numeric["t"]}}
	noT := &fit.Table{Numeric: map[string][]float64{"x": candRows.Numeric["x"], "z": candRows.Numeric["z"], "y": candRows.Numeric["y"]}}

	ctx := context.Background()
	cases := []struct {
		name    string
		src     fit.Source
		heldOut bool
		want    string
		is      error
	}{
		{"no response", noY, false, `the rows lack the response column "y" of model "degrade"`, nil},
		{"no time column", noT, false, `lack the time column "t"`, nil},
		{"other rows as fitted", other, false, "fitted on 300 rows with fingerprint", fit.ErrNotFittedRows},
		{"fitted rows as held out", candRows, true, "exactly the rows", fit.ErrNotFittedRows},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := fit.PredictiveDegradation(ctx, ref, cand, c.src, degradeTol, c.heldOut)
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error %v, want one containing %q", err, c.want)
			}
			if c.is != nil && !errors.Is(err, c.is) {
				t.Errorf("error %v does not wrap %v", err, c.is)
			}
		})
	}

	// Held-out rows may lack the time column; a mostly-fitted "held-out"
	// set is refused.
	if _, err := fit.PredictiveDegradation(ctx, ref, cand, other, degradeTol, true); err != nil {
		t.Errorf("held-out rows: %v", err)
	}
	mixed := &fit.Table{Numeric: map[string][]float64{}}
	for _, col := range []string{"x", "z", "y", "t"} {
		mixed.Numeric[col] = append(append([]float64(nil), candRows.Numeric[col]...), other.Numeric[col][:30]...)
	}
	if _, err := fit.PredictiveDegradation(ctx, ref, cand, mixed, degradeTol, true); !errors.Is(err, fit.ErrNotFittedRows) {
		t.Errorf("held-out rows that are 90%% the candidate's: error %v, want ErrNotFittedRows", err)
	}

	// Different models are refused before any row is read.
	pois := degradeFit(t, fit.Poisson, &fit.Table{Numeric: map[string][]float64{
		"x": refRows.Numeric["x"], "z": refRows.Numeric["z"], "t": refRows.Numeric["t"], "y": degradeCounts(refRows.Numeric["y"])}})
	if _, err := fit.PredictiveDegradation(ctx, pois, cand, candRows, degradeTol, false); err == nil || !strings.Contains(err.Error(), "not fits of the same model") {
		t.Errorf("different families: error %v", err)
	}
}

// degradeCounts turns a gaussian response into non-negative whole numbers.
func degradeCounts(y []float64) []float64 {
	out := make([]float64, len(y))
	for i, v := range y {
		out[i] = math.Max(0, math.Round(v))
	}
	return out
}
