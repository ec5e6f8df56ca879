package alerts

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"testing"
)

// bhReference is testdata/reference/fdr/bh.json, written by make_bh.py
// beside it.
type bhReference struct {
	Source string `json:"source"`
	Cases  []struct {
		Name   string     `json:"name"`
		Q      float64    `json:"q"`
		P      []*float64 `json:"p"` // null: a missing p-value
		Reject []bool     `json:"reject"`
	} `json:"cases"`
}

func TestBenjaminiHochbergReference(t *testing.T) {
	b, err := os.ReadFile(filepath.Join("..", "testdata", "reference", "fdr", "bh.json"))
	if err != nil {
		t.Fatal(err)
	}
	var ref bhReference
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatalf("bh.json: %v", err)
	}
	if len(ref.Cases) == 0 {
		t.Fatal("bh.json has no cases")
	}
	for _, c := range ref.Cases {
		t.Run(c.Name, func(t *testing.T) {
			p := make([]float64, len(c.P))
			for i, v := range c.P {
				p[i] = math.NaN()
				if v != nil {
					p[i] = *v
				}
			}
			got := BenjaminiHochberg(p, c.Q)
			// source: statsmodels 0.13.5 multipletests(p, alpha=q,
			// method="fdr_bh"), with missing p-values left out of the
			// family (testdata/reference/fdr/make_bh.py).
			if !slices.Equal(got, c.Reject) {
				t.Errorf("q=%g p=%v:\n got  %v\n want %v", c.Q, p, got, c.Reject)
			}
		})
	}
}

func TestBenjaminiHochbergPaperExample(t *testing.T) {
	// source: Benjamini & Hochberg (1995), JRSS B 57, section 4: of the
	// fifteen p-values of their example, BH at q = 0.05 rejects the four
	// smallest (recalled from memory; statsmodels agrees, see bh.json).
	p := []float64{0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344,
		0.0459, 0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.000}
	got := BenjaminiHochberg(p, 0.05)
	for i, r := range got {
		if r != (i < 4) {
			t.Fatalf("discoveries %v, want the four smallest", got)
		}
	}
}

func TestBenjaminiHochbergEdges(t *testing.T) {
	// Definitions from Benjamini & Hochberg (1995), section 3 (no outside
	// numbers): an empty family, and levels that allow nothing.
	if got := BenjaminiHochberg(nil, 0.1); len(got) != 0 {
		t.Errorf("empty family: %v", got)
	}
	p := []float64{0, 1e-9, 0.5}
	for _, q := range []float64{0, -0.1, math.NaN()} {
		if got := BenjaminiHochberg(p, q); slices.Contains(got, true) {
			t.Errorf("q=%g: discoveries %v, want none", q, got)
		}
	}
	// q = 1 rejects everything present (every p ≤ 1 = m/m·q).
	got := BenjaminiHochberg([]float64{0.9, math.NaN(), 1}, 1)
	if want := []bool{true, false, true}; !slices.Equal(got, want) {
		t.Errorf("q=1: %v, want %v", got, want)
	}
	// The input is not reordered.
	in := []float64{0.3, 0.001, math.NaN(), 0.02}
	cp := slices.Clone(in)
	BenjaminiHochberg(in, 0.1)
	for i := range in {
		if in[i] != cp[i] && !(math.IsNaN(in[i]) && math.IsNaN(cp[i])) {
			t.Fatalf("input changed: %v, was %v", in, cp)
		}
	}
}

// onesided is the upper-tail p-value of a standard normal z: 1 − Φ(z).
func onesided(z float64) float64 { return 0.5 * math.Erfc(z/math.Sqrt2) }

func TestBenjaminiHochbergGlobalNullSimulation(t *testing.T) {
	if testing.Short() {
		t.Skip("Monte-Carlo simulation; skipped with -short")
	}
	const (
		reps = 20000
		m    = 20
		q    = 0.1
	)
	rng := rand.New(rand.NewPCG(1995, 57))
	p := make([]float64, m)
	hits := 0
	for range reps {
		for i := range p {
			p[i] = rng.Float64()
		}
		if slices.Contains(BenjaminiHochberg(p, q), true) {
			hits++
		}
	}
	rate := float64(hits) / reps
	// source: Simes (1986), Biometrika 73, 751–754: under the global null
	// with independent uniform p-values, P(some p₍ᵢ₎ ≤ i·q/m) = q exactly,
	// and BH makes a discovery exactly when Simes' test rejects
	// (Benjamini & Hochberg 1995, section 3). So the family-wise rate of
	// any discovery is q = 0.1.
	// Monte-Carlo margin: 4 binomial standard errors,
	// 4·√(0.1·0.9/20000) ≈ 0.0085.
	margin := 4 * math.Sqrt(q*(1-q)/reps)
	t.Logf("any-discovery rate %.4f over %d families", rate, reps)
	if math.Abs(rate-q) > margin {
		t.Errorf("any-discovery rate under the global null = %.4f, want %.2f ± %.4f", rate, q, margin)
	}
}

func TestBenjaminiHochbergFDRSimulation(t *testing.T) {
	if testing.Short() {
		t.Skip("Monte-Carlo simulation; skipped with -short")
	}
	const (
		reps = 20000
		m    = 20
		m1   = 5 // true signals: z-tests whose mean is shifted by 3
		q    = 0.1
	)
	rng := rand.New(rand.NewPCG(2001, 1165))
	p := make([]float64, m)
	var sum, sumSq float64
	found := 0
	for range reps {
		for i := range p {
			z := rng.NormFloat64()
			if i < m1 {
				z += 3
			}
			p[i] = onesided(z)
		}
		reject := BenjaminiHochberg(p, q)
		r, v := 0, 0
		for i, d := range reject {
			if d {
				r++
				if i >= m1 {
					v++
				}
			}
		}
		fdp := 0.0
		if r > 0 {
			fdp = float64(v) / float64(r)
		}
		sum += fdp
		sumSq += fdp * fdp
		found += r - v
	}
	fdr := sum / reps
	se := math.Sqrt((sumSq/reps - fdr*fdr) / reps)
	// source: Benjamini & Hochberg (1995), JRSS B 57, Theorem 1: for
	// independent test statistics FDR ≤ (m₀/m)·q = 15/20·0.1 = 0.075.
	// Monte-Carlo margin: 4 standard errors of the mean false discovery
	// proportion, estimated from the replications.
	bound := float64(m-m1) / m * q
	t.Logf("realised FDR %.4f (se %.4f), power %.3f", fdr, se, float64(found)/(reps*m1))
	if fdr > bound+4*se {
		t.Errorf("realised FDR = %.4f (se %.4f), want ≤ %.3f + %.4f", fdr, se, bound, 4*se)
	}
	if fdr > q {
		t.Errorf("realised FDR = %.4f above q = %g", fdr, q)
	}
	// Not vacuous: the procedure does find signals shifted by 3 standard
	// errors. common practice (no source): a one-sided z-test at the
	// Bonferroni level 0.1/20 = 0.005 (z = 2.576) already has power
	// Φ(3 − 2.576) ≈ 0.66, and BH is at least as powerful.
	if power := float64(found) / (reps * m1); power < 0.5 {
		t.Errorf("share of signals found = %.3f, want above 0.5", power)
	}
}
