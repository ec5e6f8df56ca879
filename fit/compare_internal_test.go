package fit

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"
)

// identity returns the n×n identity, row-major.
func identity(n int) []float64 {
	a := make([]float64, n*n)
	for i := 0; i < n; i++ {
		a[i*n+i] = 1
	}
	return a
}

// quantileSD is the Monte-Carlo sd of the level quantile of draws
// simulated maxima whose density at the quantile is f: √(α(1−α)/draws)/f
// (the asymptotic sd of a sample quantile; common practice (no source)).
func quantileSD(level, f float64, draws int) float64 {
	return math.Sqrt(level*(1-level)/float64(draws)) / f
}

// On a single-point grid the simultaneous critical value is the two-sided
// normal quantile, and the p-value of an observed |z| is its two-sided
// normal p-value.
func TestCompareCriticalSinglePoint(t *testing.T) {
	const draws = 100000
	sim, ok := simulateMax([]float64{1}, 1, 1, nil, []float64{4}, draws, rand.New(rand.NewPCG(1, 1)))
	if !ok || sim.se[0] != 2 {
		t.Fatalf("simulateMax: ok %v, se %v; want se 2", ok, sim)
	}
	for _, tc := range []struct{ level, want float64 }{
		{0.95, 1.959964}, // source: normal tables, z₀.₀₂₅
		{0.99, 2.575829}, // source: normal tables, z₀.₀₀₅
	} {
		got := sim.critical(tc.level)
		// Density of |Z| at the quantile: 2φ(z). Margin: 4 Monte-Carlo sds.
		margin := 4 * quantileSD(tc.level, 2*distuv.UnitNormal.Prob(tc.want), draws)
		if math.Abs(got-tc.want) > margin {
			t.Errorf("level %.2f: critical %.4f, want %.4f ± %.4f", tc.level, got, tc.want, margin)
		}
	}
	// source: normal tables, P(|Z| ≥ 1.959964) = 0.05; margin 4 binomial sds.
	if p := sim.pValue(1.959964); math.Abs(p-0.05) > 4*math.Sqrt(0.05*0.95/draws) {
		t.Errorf("p-value of |z| = 1.96: %.4f, want 0.05", p)
	}
	if p := sim.pValue(50); p != 1.0/draws {
		t.Errorf("p-value beyond every draw: %g, want the floor 1/draws", p)
	}
}

// For m independent grid points the critical value is Šidák's,
// Φ⁻¹((1 + level^{1/m})/2), since P(max|Zᵢ| ≤ c) = (2Φ(c) − 1)^m (Šidák
// 1967, JASA 62, "Rectangular confidence regions for the means of
// multivariate normal distributions").
func TestCompareCriticalSidak(t *testing.T) {
	const draws = 100000
	for _, m := range []int{5, 20} {
		sim, ok := simulateMax(identity(m), m, m, nil, identity(m), draws, rand.New(rand.NewPCG(2, uint64(m))))
		if !ok {
			t.Fatal("simulateMax failed")
		}
		for _, level := range []float64{0.95, 0.99} {
			// source: Šidák (1967), with gonum distuv.UnitNormal.Quantile v0.17.0.
			want := distuv.UnitNormal.Quantile((1 + math.Pow(level, 1/float64(m))) / 2)
			// The density of the maximum at c: m(2Φ(c)−1)^{m−1}·2φ(c).
			f := float64(m) * math.Pow(2*distuv.UnitNormal.CDF(want)-1, float64(m-1)) * 2 * distuv.UnitNormal.Prob(want)
			margin := 4 * quantileSD(level, f, draws)
			if got := sim.critical(level); math.Abs(got-want) > margin {
				t.Errorf("m = %d, level %.2f: critical %.4f, want Šidák's %.4f ± %.4f", m, level, got, want, margin)
			}
		}
	}
}

// simulateMax is the simulation behind simultaneousCritical: with the same
// generator it gives the same critical value, exactly.
func TestCompareSimulationMatchesBand(t *testing.T) {
	const m, q = 50, 6
	rng := rand.New(rand.NewPCG(3, 3))
	g := make([]float64, m*q)
	for i := 0; i < m; i++ {
		x := float64(i) / (m - 1)
		for j := 0; j < q; j++ {
			g[i*q+j] = math.Cos(float64(j) * math.Pi * x)
		}
	}
	l := make([]float64, q*q)
	for i := range l {
		l[i] = rng.NormFloat64()
	}
	v := matMul(l, transpose(l, q, q), q, q, q)
	want, wantSE, ok := simultaneousCritical(g, m, q, nil, v, 0.95, 5000, rand.New(rand.NewPCG(4, 4)))
	sim, ok2 := simulateMax(g, m, q, nil, v, 5000, rand.New(rand.NewPCG(4, 4)))
	if !ok || !ok2 {
		t.Fatal("simulation failed")
	}
	if got := sim.critical(0.95); got != want {
		t.Errorf("critical %v, simultaneousCritical %v", got, want)
	}
	for i := range wantSE {
		if sim.se[i] != wantSE[i] {
			t.Fatalf("se[%d] %v, want %v", i, sim.se[i], wantSE[i])
		}
	}
}

// Holm's step-down adjustment, worked by hand from its definition (Holm
// 1979, Scand. J. Statist. 6, "A simple sequentially rejective multiple
// test procedure"): sorted p = 0.005, 0.01, 0.03, 0.04 are multiplied by 4,
// 3, 2, 1 (0.02, 0.03, 0.06, 0.04) and made non-decreasing.
func TestCompareHolm(t *testing.T) {
	p := []float64{0.01, 0.04, 0.03, 0.005}
	want := []float64{0.03, 0.06, 0.06, 0.02}
	got := adjustP(p, "holm")
	for i := range want {
		if math.Abs(got[i]-want[i]) > 1e-15 {
			t.Errorf("holm %v, want %v", got, want)
			break
		}
	}
	if got := adjustP([]float64{0.6, 0.5}, "holm"); got[0] != 1 || got[1] != 1 {
		t.Errorf("adjusted p-values are capped at 1: %v", got)
	}
	if got := adjustP(p, "none"); got[1] != 0.04 {
		t.Errorf("none adjusts: %v", got)
	}
}
