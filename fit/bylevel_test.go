package fit_test

import (
	"context"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// sites simulates rows from several sites, each with its own temperature
// response and level (invented, fixed seed).
func sites(rng *rand.Rand, n int, names []string, amp []float64, level []float64) *fit.Table {
	x, y := make([]float64, n), make([]float64, n)
	site := make([]string, n)
	for i := range y {
		k := i % len(names)
		site[i] = names[k]
		x[i] = 25 * rng.Float64()
		y[i] = 8 + level[k] + amp[k]*math.Sin(x[i]/4) + 0.3*rng.NormFloat64()
	}
	return &fit.Table{Numeric: map[string][]float64{"x": x, "y": y}, Text: map[string][]string{"site": site}}
}

// A curve with `by` becomes one centred curve per level, each with its own
// smoothing strength: each level's curve recovers its own amplitude
// (simulation with known truth).
func TestCurvePerLevel(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 2))
	data := sites(rng, 1500, []string{"S05", "S07", "S09"}, []float64{1, 2, 0}, []float64{0, 0.5, -0.5})
	spec := curveSpec(fit.Gaussian, fit.Identity,
		fit.TermSpec{Kind: fit.Curve, Columns: []string{"x"}, Basis: fit.Cubic, Knots: fit.QuantileKnots, Size: []int{8}, By: "site"},
		factor("site"))
	doc, err := fit.Fit(context.Background(), spec, data, fit.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if len(doc.Terms) != 4 || doc.Terms[0].Name != "x[site=S05]" || doc.Terms[1].ByLevel != "S07" {
		t.Fatalf("terms %v", names(doc))
	}
	if inf := doc.Terms[1].Inference; inf == nil || inf.ZeroTest.PValue > 1e-6 || inf.StraightFits {
		t.Errorf("S07's clear curve: inference %+v", inf)
	}
	for k, want := range []float64{1, 2, 0} {
		g := doc.Terms[k].Grid
		lo, hi := math.Inf(1), math.Inf(-1)
		for _, v := range g.Fit {
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
		// The truth's range over x in [0, 25] is amp·(1 − sin(25/4)) ≈ 2·amp... use
		// the simulated truth directly: sin(x/4) spans [−1, 1] there.
		if got := (hi - lo) / 2; math.Abs(got-want) > 0.2 {
			t.Errorf("%s: half-range %.3f, want about %g", doc.Terms[k].Name, got, want)
		}
	}
	// Prediction uses each row's own curve; an unknown level is an error.
	var pred []float64
	err = fit.Predict(context.Background(), doc, &fit.Table{Numeric: map[string][]float64{"x": {2 * math.Pi, 2 * math.Pi}}, Text: map[string][]string{"site": {"S05", "S07"}}}, func(p fit.Prediction) error {
		pred = append(pred, p.Response...)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if d := pred[1] - pred[0]; math.Abs(d-1.5) > 0.3 { // S07 − S05 at sin = 1: (0.5 + 2) − (0 + 1)
		t.Errorf("S07 − S05 at the peak = %.3f, want about 1.5", d)
	}
	err = fit.Predict(context.Background(), doc, &fit.Table{Numeric: map[string][]float64{"x": {3}}, Text: map[string][]string{"site": {"S99"}}}, func(fit.Prediction) error { return nil })
	if err == nil || !strings.Contains(err.Error(), `"S99"`) {
		t.Errorf("unknown level: %v", err)
	}
}

func names(doc *fit.Document) []string {
	var out []string
	for _, t := range doc.Terms {
		out = append(out, t.Name)
	}
	return out
}

// A shrunk factor estimates the spread of the site levels: with many sites
// whose true levels have variance 0.25, the reported level variance is close
// to it, and the estimates are pulled towards zero relative to the raw site
// means (a property of ridge/random-effect estimates: common practice (no
// source)).
func TestShrunkFactor(t *testing.T) {
	rng := rand.New(rand.NewPCG(22, 3))
	const nSites, perSite = 60, 20
	var y []float64
	var site []string
	trueLevel := make([]float64, nSites)
	for s := range trueLevel {
		trueLevel[s] = 0.5 * rng.NormFloat64()
		for r := 0; r < perSite; r++ {
			site = append(site, "site"+string(rune('A'+s/26))+string(rune('a'+s%26)))
			y = append(y, 3+trueLevel[s]+rng.NormFloat64())
		}
	}
	spec := curveSpec(fit.Gaussian, fit.Identity, fit.TermSpec{Kind: fit.Factor, Columns: []string{"site"}, Shrink: true})
	doc, err := fit.Fit(context.Background(), spec, &fit.Table{Numeric: map[string][]float64{"y": y}, Text: map[string][]string{"site": site}}, fit.Options{})
	if err != nil {
		t.Fatal(err)
	}
	term := doc.Terms[0]
	if !term.Shrunk || term.LevelVariance == nil || len(term.Levels) != nSites {
		t.Fatalf("term %+v", term)
	}
	// source: simulation with known truth, level variance 0.25 (sd 0.5);
	// its estimate from 60 levels has a standard error of about 0.06.
	if v := *term.LevelVariance; v < 0.12 || v > 0.45 {
		t.Errorf("level variance %.3f, want near 0.25", v)
	}
	if math.Abs(doc.Scale-1) > 0.1 {
		t.Errorf("scale %.3f, want about 1", doc.Scale)
	}
	t.Logf("level variance %.3f, edf %.1f of %d levels", *term.LevelVariance, term.EDF, nSites)
}
