package fit

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"
)

// ksStatistic returns the Kolmogorov–Smirnov distance between the empirical
// distribution of u and the uniform distribution on [0, 1].
func ksStatistic(u []float64) float64 {
	s := slices.Clone(u)
	slices.Sort(s)
	n := float64(len(s))
	d := 0.0
	for i, v := range s {
		d = math.Max(d, math.Max(float64(i+1)/n-v, v-float64(i)/n))
	}
	return d
}

// ksCritical1 is the 1% critical value of the KS distance for N draws,
// 1.628/√N (source: Kolmogorov–Smirnov tables, asymptotic form; Marsaglia,
// Tsang & Wang 2003, J. Stat. Softw. 8(18)).
func ksCritical1(n int) float64 { return 1.628 / math.Sqrt(float64(n)) }

// With integer r the mixture is a chi-square and its ratio to χ²_d/d is
// r·F(r, d); the inversion must reproduce those tails.
func TestPValueMixtureMatchesChiSquareAndF(t *testing.T) {
	for _, r := range []float64{1, 2, 3, 7, 20} {
		mix := newChiMix([]float64{1}, []float64{r})
		for _, x := range []float64{0.05, 0.5, 1, r, 2 * r, 10 + 3*r, 30 + 4*r} {
			// source: gonum stat/distuv ChiSquared.Survival, v0.17.0.
			want := distuv.ChiSquared{K: r}.Survival(x)
			if want < tailSwitch {
				continue // the saddlepoint's region: TestPValueFarTail
			}
			got := mix.survival(x)
			if math.Abs(got-want) > 1e-7*want+1e-12 {
				t.Errorf("χ²_%g tail at %g: %.10g, want %.10g", r, x, got, want)
			}
			for _, d := range []float64{3, 25, 390.5, 1e5} {
				// source: gonum stat/distuv F.Survival, v0.17.0.
				wantF := distuv.F{D1: r, D2: d}.Survival(x / r)
				gotF := mix.ratioSurvival(x, d)
				if wantF > 1e-9 && math.Abs(gotF-wantF) > 1e-6*wantF+1e-11 {
					t.Errorf("r·F(%g, %g) tail at %g: %.10g, want %.10g", r, d, x, gotF, wantF)
				}
			}
		}
	}
}

// Far in the tail the saddlepoint takes over from the inversion: its
// relative error there is a few per cent at most (source: Kuonen 1999,
// Biometrika 86, Table 1, errors of a few per cent or less; values checked
// against the chi-square tail from gonum stat/distuv v0.17.0).
func TestPValueFarTail(t *testing.T) {
	for _, r := range []float64{1, 2, 5} {
		mix := newChiMix([]float64{1}, []float64{r})
		for _, x := range []float64{60, 100, 200} {
			want := distuv.ChiSquared{K: r}.Survival(x)
			got := mix.survival(x)
			if math.Abs(got-want) > 0.15*want {
				t.Errorf("χ²_%g tail at %g: %.4g, want %.4g", r, x, got, want)
			}
		}
	}
}

// For Q = ζ₁χ²₁ + ζ₂χ²₁ the tail has a one-dimensional integral in polar
// coordinates: with (a, b) standard normal, a = ρcosθ, b = ρsinθ and
// ρ²/2 ~ Exp(1), P(Q > x) = (1/π)∫_0^π exp(−x/(2(ζ₁cos²θ + ζ₂sin²θ))) dθ
// (common practice (no source): the polar form of the bivariate normal).
// The periodic integrand makes the trapezoidal rule exact to rounding.
func TestPValueMixtureMatchesPolarForm(t *testing.T) {
	for _, nu := range []float64{0.1, 0.5, 0.9} {
		root := math.Sqrt(1 - nu*nu)
		z1, z2 := (1+nu+root)/2, (1+nu-root)/2
		mix := newChiMix([]float64{z1, z2}, []float64{1, 1})
		for _, x := range []float64{0.1, 1, 3, 8, 20} {
			const k = 2000
			want := 0.0
			for i := 0; i < k; i++ {
				th := math.Pi * (float64(i) + 0.5) / k
				want += math.Exp(-x / (2 * (z1*math.Cos(th)*math.Cos(th) + z2*math.Sin(th)*math.Sin(th))))
			}
			want /= k
			if got := mix.survival(x); math.Abs(got-want) > 1e-7*want+1e-12 {
				t.Errorf("ν=%g x=%g: %.10g, polar form %.10g", nu, x, got, want)
			}
		}
	}
}

// Under the model the test assumes (f = Rβ̂ exactly Gaussian with
// covariance RVRᵀ), T for non-integer r follows the stated mixture: the
// p-values of simulated statistics are uniform. This checks the rank-r
// pseudo-inverse of Wood (2013, §3) and its null eigenvalues
// ζ± = (1 + ν ± √(1 − ν²))/2 together. 4000 draws (2000 when the scale
// is estimated); KS at the 1% level
// (source: Kolmogorov–Smirnov tables, 1.628/√N).
func TestPValueUniformUnderIdealModel(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	t.Parallel()
	const q = 6
	rng := rand.New(rand.NewPCG(41, 2))
	// A covariance with decaying eigenvalues, like a penalised term's.
	a := make([]float64, q*q)
	for i := range a {
		a[i] = rng.NormFloat64()
	}
	v := matTMul(a, a, q, q, q)
	for i := 0; i < q; i++ {
		for j := 0; j < q; j++ {
			v[i*q+j] *= math.Pow(0.4, float64(i+j)/2)
		}
	}
	xtwx := matTMul(a, a, q, q, q)
	// V's square root for drawing β̂.
	vals, vecs, _ := symEigen(v, q)
	l := make([]float64, q*q)
	for i := 0; i < q; i++ {
		for j := 0; j < q; j++ {
			l[i*q+j] = vecs.At(i, j) * math.Sqrt(math.Max(vals[j], 0))
		}
	}
	for _, r := range []float64{1.3, 2.5, 3.9} {
		for _, estimated := range []bool{false, true} {
			const d = 12.0
			draws := 4000
			if estimated {
				draws = 2000
			}
			p := make([]float64, draws)
			z := make([]float64, q)
			for k := range p {
				for i := range z {
					z[i] = rng.NormFloat64()
				}
				beta := matMul(l, z, q, q, 1)
				vk := v
				if estimated {
					// V carries φ̂ = φ·χ²_d/d.
					s := 0.0
					for i := 0; i < int(d); i++ {
						e := rng.NormFloat64()
						s += e * e
					}
					vk = make([]float64, q*q)
					for i := range vk {
						vk[i] = v[i] * s / d
					}
				}
				zt, ok := zeroTest(beta, vk, xtwx, nil, q, 0, r, estimated, d)
				if !ok {
					t.Fatal("zero test failed")
				}
				p[k] = zt.PValue
			}
			ks := ksStatistic(p)
			// source: Kolmogorov–Smirnov tables (1% level, 1.628/√N).
			if ks > ksCritical1(draws) {
				t.Errorf("r=%g estimated=%v: KS distance %.4f above the 1%% critical value %.4f", r, estimated, ks, ksCritical1(draws))
			}
		}
	}
}

// With r equal to the full rank the statistic is the Wald statistic
// β̂ᵀV⁻¹β̂ referred to χ²_q (known scale) or q·F(q, d) (estimated), and it
// does not depend on the parametrisation: β → Aβ, V → AVAᵀ,
// XᵀWX → A⁻ᵀXᵀWXA⁻¹ leave T unchanged for any r (Wood 2013, §2).
func TestPValueWaldCaseAndInvariance(t *testing.T) {
	const q = 4
	rng := rand.New(rand.NewPCG(5, 8))
	m := make([]float64, q*q)
	for i := range m {
		m[i] = rng.NormFloat64()
	}
	v := matTMul(m, m, q, q, q)
	for i := 0; i < q; i++ {
		v[i*q+i] += 0.5
	}
	xtwx := matMul(m, transpose(m, q, q), q, q, q)
	for i := 0; i < q; i++ {
		xtwx[i*q+i] += 1
	}
	beta := []float64{0.8, -1.1, 0.3, 2.0}
	// β̂ᵀV⁻¹β̂ by solving with V's eigen-decomposition.
	vals, vecs, _ := symEigen(v, q)
	wald := 0.0
	for i := 0; i < q; i++ {
		c := 0.0
		for j := 0; j < q; j++ {
			c += vecs.At(j, i) * beta[j]
		}
		wald += c * c / vals[i]
	}
	zt, ok := zeroTest(beta, v, xtwx, nil, q, 0, q, false, 0)
	if !ok || math.Abs(zt.Statistic-wald) > 1e-9*wald {
		t.Fatalf("full-rank statistic %.10g, want β̂ᵀV⁻¹β̂ = %.10g", zt.Statistic, wald)
	}
	// source: gonum stat/distuv ChiSquared.Survival and F.Survival, v0.17.0.
	if want := (distuv.ChiSquared{K: q}).Survival(wald); math.Abs(zt.PValue-want) > 1e-7*want {
		t.Errorf("known-scale p-value %.8g, want %.8g", zt.PValue, want)
	}
	zf, _ := zeroTest(beta, v, xtwx, nil, q, 0, q, true, 40)
	if want := (distuv.F{D1: q, D2: 40}).Survival(wald / q); math.Abs(zf.PValue-want) > 1e-6*want {
		t.Errorf("estimated-scale p-value %.8g, want %.8g", zf.PValue, want)
	}
	if zt.Method != zeroMethodChisq || zf.Method != zeroMethodF {
		t.Errorf("methods %q, %q", zt.Method, zf.Method)
	}
	// Reparametrise with a random invertible A.
	amat := make([]float64, q*q)
	for i := range amat {
		amat[i] = rng.NormFloat64()
	}
	for i := 0; i < q; i++ {
		amat[i*q+i] += 3
	}
	ainv := make([]float64, q*q)
	copy(ainv, amat)
	inv, ok := invert(ainv, q)
	if !ok {
		t.Fatal("singular A")
	}
	beta2 := matMul(amat, beta, q, q, 1)
	v2 := matMul(matMul(amat, v, q, q, q), transpose(amat, q, q), q, q, q)
	x2 := matMul(matMul(transpose(inv, q, q), xtwx, q, q, q), inv, q, q, q)
	// Grid rows of the term's functions, which map as G → G·A⁻¹.
	const pts = 30
	grid := make([]float64, pts*q)
	for i := 0; i < pts; i++ {
		for j := 0; j < q; j++ {
			grid[i*q+j] = math.Cos(float64(j+1) * float64(i) / pts * 2.5)
		}
	}
	grid2 := matMul(grid, inv, pts, q, q)
	for _, r := range []float64{1, 1.6, 2.25, 3.5} {
		a, _ := zeroTest(beta, v, xtwx, grid, q, pts, r, false, 0)
		b, _ := zeroTest(beta2, symmetrised(v2, q), symmetrised(x2, q), grid2, q, pts, r, false, 0)
		// common practice (no source): invariance up to rounding.
		if math.Abs(a.Statistic-b.Statistic) > 1e-7*a.Statistic {
			t.Errorf("r=%g: T=%.10g, after reparametrisation %.10g", r, a.Statistic, b.Statistic)
		}
	}
}

func symmetrised(a []float64, n int) []float64 {
	out := slices.Clone(a)
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			out[i*n+j] = (a[i*n+j] + a[j*n+i]) / 2
		}
	}
	return out
}

// invert returns the inverse of the n×n matrix a by Gauss–Jordan
// elimination with partial pivoting (test helper).
func invert(a []float64, n int) ([]float64, bool) {
	m := slices.Clone(a)
	inv := make([]float64, n*n)
	for i := 0; i < n; i++ {
		inv[i*n+i] = 1
	}
	for c := 0; c < n; c++ {
		p := c
		for r := c + 1; r < n; r++ {
			if math.Abs(m[r*n+c]) > math.Abs(m[p*n+c]) {
				p = r
			}
		}
		if m[p*n+c] == 0 {
			return nil, false
		}
		for k := 0; k < n; k++ {
			m[c*n+k], m[p*n+k] = m[p*n+k], m[c*n+k]
			inv[c*n+k], inv[p*n+k] = inv[p*n+k], inv[c*n+k]
		}
		d := m[c*n+c]
		for k := 0; k < n; k++ {
			m[c*n+k] /= d
			inv[c*n+k] /= d
		}
		for r := 0; r < n; r++ {
			if r == c {
				continue
			}
			f := m[r*n+c]
			for k := 0; k < n; k++ {
				m[r*n+k] -= f * m[c*n+k]
				inv[r*n+k] -= f * inv[c*n+k]
			}
		}
	}
	return inv, true
}

// The critical value for m independent standard normal grid values is the
// Šidák value Φ⁻¹((1 + 0.95^{1/m})/2) (source: Šidák 1967, JASA 62; for
// m = 1 it is 1.96, source: normal tables). The Monte-Carlo standard error
// of a 95% quantile from 10 000 draws is √(0.05·0.95/10⁴)/f(c) with f the
// density of the maximum at c; we allow four of them.
func TestCriticalValueIndependentPoints(t *testing.T) {
	for _, m := range []int{1, 5, 40} {
		g := make([]float64, m*m)
		for i := 0; i < m; i++ {
			g[i*m+i] = 1
		}
		v := slices.Clone(g)
		rng := rand.New(rand.NewPCG(uint64(m), 17))
		c, se, ok := simultaneousCritical(g, m, m, nil, v, 0.95, bandDraws, rng)
		if !ok {
			t.Fatal("critical value failed")
		}
		for _, s := range se {
			if math.Abs(s-1) > 1e-12 {
				t.Fatalf("se %g, want 1", s)
			}
		}
		std := distuv.UnitNormal
		want := std.Quantile((1 + math.Pow(0.95, 1/float64(m))) / 2)
		// Density of max|z| over m independent points at want.
		dens := float64(m) * 2 * std.Prob(want) * math.Pow(2*std.CDF(want)-1, float64(m-1))
		mcse := math.Sqrt(0.05*0.95/bandDraws) / dens
		if math.Abs(c-want) > 4*mcse {
			t.Errorf("m=%d: critical value %.4f, Šidák %.4f (Monte-Carlo s.e. %.4f)", m, c, want, mcse)
		}
		if m == 1 && math.Abs(c-1.96) > 4*mcse { // source: normal tables, z₀.₉₇₅ = 1.96
			t.Errorf("single point: %.4f, want 1.96", c)
		}
	}
}

// Perfectly correlated grid values (one coefficient) behave as a single
// point whatever the grid: c = 1.96 (source: normal tables).
func TestCriticalValueOneDirection(t *testing.T) {
	const m = 50
	g := make([]float64, m)
	for i := range g {
		g[i] = 0.5 + float64(i)/m
	}
	rng := rand.New(rand.NewPCG(3, 3))
	c, _, _ := simultaneousCritical(g, m, 1, nil, []float64{1}, 0.95, bandDraws, rng)
	mcse := math.Sqrt(0.05*0.95/bandDraws) / (2 * distuv.UnitNormal.Prob(1.96))
	if math.Abs(c-1.96) > 4*mcse {
		t.Errorf("critical value %.4f, want 1.96 ± %.3f", c, 4*mcse)
	}
}

// The pruned maximum of maxAbsDraws is exact: it equals the brute-force
// maximum over every row for the same draws (common practice (no source)).
func TestCriticalMaximaExact(t *testing.T) {
	const m, q, draws = 120, 7, 500
	a := make([]float64, m*q)
	for i := 0; i < m; i++ {
		x := float64(i) / (m - 1)
		for j := 0; j < q; j++ {
			a[i*q+j] = math.Cos(float64(j+1)*3*x) / (1 + float64(j))
		}
	}
	for _, groups := range [][][]int{nil, tiles(12, 10, 3)} {
		got := maxAbsDraws(a, m, q, groups, draws, rand.New(rand.NewPCG(9, 9)))
		rng := rand.New(rand.NewPCG(9, 9))
		z := make([]float64, q)
		for d := 0; d < draws; d++ {
			for j := range z {
				z[j] = rng.NormFloat64()
			}
			want := 0.0
			for i := 0; i < m; i++ {
				s := 0.0
				for j := range z {
					s += a[i*q+j] * z[j]
				}
				want = math.Max(want, math.Abs(s))
			}
			if got[d] != want && math.Abs(got[d]-want) > 1e-14*want {
				t.Fatalf("draw %d: pruned maximum %.17g, brute force %.17g", d, got[d], want)
			}
		}
	}
}

// The best uniform approximation of x² on [0, 1] by a straight line is
// x − 1/8, with largest error 1/8 attained at 0, 1/2 and 1 (source:
// Chebyshev equioscillation theorem; e.g. Powell 1981, "Approximation
// Theory and Methods", ch. 7). On a grid containing those points the
// minimax ratio with unit widths is 1/8; with widths 1/4 it is 1/2.
func TestStraightMinimaxKnownCase(t *testing.T) {
	const m = 101
	f, w, line := make([]float64, m), make([]float64, m), make([]float64, 2*m)
	for i := range f {
		x := float64(i) / (m - 1)
		f[i], w[i] = x*x, 1
		line[2*i], line[2*i+1] = 1, x
	}
	got, err := minimaxRatio(f, w, line, m, 2)
	if err != nil || math.Abs(got-0.125) > 1e-10 {
		t.Errorf("minimax error %.12g (%v), want 1/8", got, err)
	}
	for i := range w {
		w[i] = 0.25
	}
	if got, _ := minimaxRatio(f, w, line, m, 2); math.Abs(got-0.5) > 1e-10 {
		t.Errorf("ratio %.12g, want 1/2", got)
	}
	// An exact line needs no band at all.
	for i := range f {
		f[i] = 3 - 2*line[2*i+1]
	}
	if got, _ := minimaxRatio(f, w, line, m, 2); got > 1e-10 {
		t.Errorf("ratio %.3g for an exact line, want 0", got)
	}
}

// On random weighted problems the LP optimum equals the best vertex of
// the primal: the minimum over triples of points and sign patterns of the
// t solving the three equalities, among those feasible everywhere
// (common practice (no source): vertex enumeration of a 3-variable LP).
func TestStraightMinimaxMatchesVertexEnumeration(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 4))
	for trial := 0; trial < 20; trial++ {
		const m = 12
		f, w, line := make([]float64, m), make([]float64, m), make([]float64, 2*m)
		for i := range f {
			x := float64(i)/(m-1) + 0.01*rng.Float64()
			f[i] = math.Sin(4*x) + 0.3*rng.NormFloat64()
			w[i] = 0.2 + rng.Float64()
			line[2*i], line[2*i+1] = 1, x
		}
		got, err := minimaxRatio(f, w, line, m, 2)
		if err != nil {
			t.Fatal(err)
		}
		best := math.Inf(1)
		for i := 0; i < m; i++ {
			for j := i + 1; j < m; j++ {
				for k := j + 1; k < m; k++ {
					for s := 0; s < 8; s++ {
						idx := []int{i, j, k}
						// Rows: a + b·x_l + σ_l t w_l = f_l.
						mat := make([]float64, 9)
						rhs := make([]float64, 3)
						for r, l := range idx {
							sg := 1.0
							if s>>r&1 == 1 {
								sg = -1
							}
							mat[r*3], mat[r*3+1], mat[r*3+2] = 1, line[2*l+1], sg*w[l]
							rhs[r] = f[l]
						}
						inv, ok := invert(mat, 3)
						if !ok {
							continue
						}
						sol := matMul(inv, rhs, 3, 3, 1)
						tt := sol[2]
						if tt < 0 {
							continue
						}
						feasible := true
						for l := 0; l < m; l++ {
							if math.Abs(f[l]-sol[0]-sol[1]*line[2*l+1]) > tt*w[l]*(1+1e-9)+1e-12 {
								feasible = false
								break
							}
						}
						if feasible {
							best = math.Min(best, tt)
						}
					}
				}
			}
		}
		if math.Abs(got-best) > 1e-8*(1+best) {
			t.Errorf("trial %d: LP %.12g, vertex enumeration %.12g", trial, got, best)
		}
	}
}

// orderStatistic agrees with sorting, ties included (common practice (no
// source)).
func TestCriticalOrderStatistic(t *testing.T) {
	rng := rand.New(rand.NewPCG(6, 6))
	for trial := 0; trial < 200; trial++ {
		n := 1 + rng.IntN(300)
		x := make([]float64, n)
		for i := range x {
			x[i] = float64(rng.IntN(20)) // many ties
			if trial%2 == 0 {
				x[i] = rng.NormFloat64()
			}
		}
		k := rng.IntN(n)
		sorted := slices.Clone(x)
		slices.Sort(sorted)
		if got := orderStatistic(x, k); got != sorted[k] {
			t.Fatalf("n=%d k=%d: %g, want %g", n, k, got, sorted[k])
		}
	}
}
