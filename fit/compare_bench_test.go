package fit_test

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// compareBenchTable makes n rows for the comparison benchmark: six smooth
// effects and one surface of two further columns (invented, fixed seed).
func compareBenchTable(n int, seed uint64) *fit.Table {
	rng := rand.New(rand.NewPCG(700, seed))
	cols := map[string][]float64{}
	names := []string{"x1", "x2", "x3", "x4", "x5", "x6", "u", "v"}
	for _, c := range append(names, "y") {
		cols[c] = make([]float64, n)
	}
	for i := 0; i < n; i++ {
		eta := 0.0
		for k, c := range names {
			x := rng.Float64()
			cols[c][i] = x
			if k < 6 {
				eta += 0.3 * math.Sin(float64(k+1)*x)
			}
		}
		eta += math.Sin(3*cols["u"][i]) * math.Cos(3*cols["v"][i])
		cols["y"][i] = eta + 0.5*rng.NormFloat64()
	}
	return &fit.Table{Numeric: cols}
}

// BenchmarkCompare times one comparison of two fits with six curves (size
// 10) and one tensor-product surface (5×5), including the 10 000-draw
// simulations of every critical value and p-value (run with -cpu 1 for the
// one-core figure).
func BenchmarkCompare(b *testing.B) {
	spec := curveSpec(fit.Gaussian, fit.Identity, curve("x1", 10), curve("x2", 10), curve("x3", 10),
		curve("x4", 10), curve("x5", 10), curve("x6", 10),
		fit.TermSpec{Kind: fit.Surface, Columns: []string{"u", "v"}, Basis: fit.PSpline, Knots: fit.EvenKnots, Size: []int{5, 5}})
	ref := mustFit(b, spec, compareBenchTable(5000, 1), fit.Options{})
	cand := mustFit(b, spec, compareBenchTable(5000, 2), fit.Options{})
	tol := fit.DefaultTolerance()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := fit.Compare(ref, cand, tol); err != nil {
			b.Fatal(err)
		}
	}
}
