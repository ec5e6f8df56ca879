package main

import (
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// The parts of the summary the river-sonde golden file does not reach: a
// surface, aliased coefficients, numeric factor levels, a fixed scale, an
// unconverged fit and a stopped smoothing search.
func TestSummaryParts(t *testing.T) {
	est, se := 0.25, 0.5
	doc := &fit.Document{
		Model: "particulates", Family: fit.Poisson, Link: fit.Log,
		Spec:              &fit.Spec{Response: "pm10_count"},
		DevianceExplained: 0.4321, Scale: 1, EDFTotal: 7.5, AIC: 1234.56,
		Criterion:   fit.Criterion{Name: "ubre", Value: 0.1234, Iterations: 40, Converged: false},
		Convergence: fit.Convergence{Converged: false, Iterations: 100, RelativeChange: 0.0012, Passes: 102},
		Data:        fit.DataRecord{RowsRead: 10, RowsUsed: 10},
		Terms: []fit.TermResult{
			{Name: "wind,hour", Kind: fit.Surface, Columns: []string{"wind", "hour"}, EDF: 5.25, Smoothing: []float64{12345, 0.5},
				SurfaceGrid: &fit.SurfaceGrid{X1: []float64{0, 10}, X2: []float64{0, 23}, Fit: [][]float64{{-1, 0}, {0.5, 1}}}},
			{Name: "humidity", Kind: fit.Linear, Columns: []string{"humidity"}, Estimate: &est, SE: &se, Aliased: []string{"humidity"}},
			{Name: "station", Kind: fit.Factor, Columns: []string{"station"}, Reference: "2",
				Levels: map[string]fit.Estimate{"10": {Estimate: 1, SE: 0.1}, "9": {Estimate: -1, SE: 0.1}}},
		},
	}
	var b strings.Builder
	if err := writeSummary(&b, doc); err != nil {
		t.Fatal(err)
	}
	got := b.String()
	for _, want := range []string{
		"model particulates\n  NOT CONVERGED: the fit stopped after 100 iterations",
		"  response    pm10_count · poisson family · log link\n",
		"  rows        10 used of 10 read\n",
		"  explained   43.2% of the deviance\n",
		"  smoothing   strengths chosen by ubre · score 0.1234 · 40 search steps (stopped early)\n",
		"  converged   NO · stopped after 100 iterations (relative change 0.0012) · 102 passes over the rows\n",
		"surface   wind × hour  edf 5.25 · strengths 1.23e+04, 0.5\n",
		"effect -1.00 … +1.00 over wind 0.0 … 10.0 and hour 0.0 … 23.0\n",
		"aliased, fixed at zero: humidity\n",
		"9          -1.00 ± 0.10\n", "10         +1.00 ± 0.10\n",
	} {
		if !strings.Contains(got, want) {
			t.Errorf("the summary lacks %q:\n%s", want, got)
		}
	}
	if strings.Index(got, "9          -1.00") > strings.Index(got, "10         +1.00") {
		t.Errorf("numeric levels are not in numeric order:\n%s", got)
	}
	if strings.Contains(got, "  scale ") {
		t.Errorf("the summary shows the poisson family's fixed scale:\n%s", got)
	}
}
