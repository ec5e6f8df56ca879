package fit

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sync"
)

// TermInference holds tests about one curve or surface: whether it could be
// zero everywhere, and whether it could be a straight line (a plane for a
// surface) within its simultaneous band.
type TermInference struct {
	// ZeroTest tests that the term is zero at every data point.
	ZeroTest ZeroTest `json:"zero_test"`
	// SimultaneousLevel is the level of the simultaneous band (0.95).
	SimultaneousLevel float64 `json:"simultaneous_level"`
	// SimultaneousCritical is c of the simultaneous band f̂(x) ± c·se(x) over
	// the grid: the level quantile of the largest standardised posterior
	// deviation over the grid (1.96 for a single point).
	SimultaneousCritical float64 `json:"simultaneous_critical"`
	// StraightMaxRatio is min over straight lines ℓ of
	// max_x |f̂(x) − ℓ(x)|/(c·se(x)): at most 1 when some line fits inside
	// the band. "Straight" is a line a + b·x for a curve (the curve is
	// centred, so the line has its own intercept), a constant for a cyclic
	// curve, and a plane a + b·x₁ + c·x₂ for a surface.
	StraightMaxRatio float64 `json:"straight_max_ratio"`
	// StraightFits reports StraightMaxRatio ≤ 1.
	StraightFits bool `json:"straight_fits"`
	// EDF is the term's effective degrees of freedom (as TermResult.EDF).
	EDF float64 `json:"edf"`
}

// inferTerms fills TermResult.Inference for each curve and surface. v is the
// posterior covariance of the reported coefficients (pc×pc, row-major).
//
// A term whose inference cannot be computed (a numerical failure) keeps a
// nil Inference and the document gets a warning; the fit itself stands.
func (f *fitter) inferTerms(doc *Document, st *pirlsState, v []float64) error {
	d, pr := st.d, st.pr
	p := d.pc
	if pr == nil || pr.p != p || len(st.eval.sol.hinv) != p*p || len(v) != p*p {
		return nil
	}
	var todo []int
	for i, t := range d.terms {
		if t.penalised() && t.q > 0 && i < len(doc.Terms) {
			todo = append(todo, i)
		}
	}
	if len(todo) == 0 {
		return nil
	}
	// F = H⁻¹RᵀR (its term blocks give Wood's rank) and RᵀR (whose term
	// blocks are XᵀWX).
	rtr := matTMul(pr.r, pr.r, p, p, p)
	fm := matMul(st.eval.sol.hinv, rtr, p, p, p)
	// Terms are independent: share them among the workers.
	errs := make([]error, len(d.terms))
	next := make(chan int)
	var wg sync.WaitGroup
	for w := 0; w < min(f.opt.Workers, len(todo)); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				doc.Terms[i].Inference, errs[i] = inferTerm(d.terms[i], &doc.Terms[i], i, doc, fm, rtr, v, p)
			}
		}()
	}
	for _, i := range todo {
		next <- i
	}
	close(next)
	wg.Wait()
	for _, i := range todo {
		if errs[i] != nil {
			f.warn = append(f.warn, fmt.Sprintf("term %q: no inference (%v)", d.terms[i].name, errs[i]))
		}
	}
	return nil
}

// inferTerm computes one term's inference from its coefficient block
// [t.cstart, t.cstart+t.q).
func inferTerm(t *termDesign, tr *TermResult, index int, doc *Document, fm, rtr, v []float64, p int) (*TermInference, error) {
	start, q := t.cstart, t.q
	beta := doc.Coefficients[start : start+q]
	vj := block(v, p, start, q)
	tg := gridOf(t, tr)
	if tg == nil {
		return nil, fmt.Errorf("no grid for a %s term", tr.Kind)
	}
	r := woodRank(fm, p, start, q)
	if math.IsNaN(r) {
		r = tr.EDF
	}
	zt, ok := zeroTest(beta, vj, block(rtr, p, start, q), tg.g, q, tg.m, r, doc.ScaleEstimated, doc.ResidualDF)
	if !ok {
		return nil, fmt.Errorf("the zero test could not be computed (singular covariance)")
	}
	inf := &TermInference{ZeroTest: zt, EDF: tr.EDF, SimultaneousLevel: bandLevel}
	// A fixed seed per term: the same document always gets the same band.
	rng := rand.New(rand.NewPCG(0x63757276, uint64(index)))
	crit, se, ok := simultaneousCritical(tg.g, tg.m, q, tg.groups, vj, bandLevel, bandDraws, rng)
	if !ok {
		return nil, fmt.Errorf("the term's grid values have no posterior variance")
	}
	fhat := matMul(tg.g, beta, tg.m, q, 1)
	w := make([]float64, tg.m)
	big := 0.0
	for _, s := range se {
		big = max(big, s)
	}
	for i, s := range se {
		w[i] = crit * max(s, big*1e-10)
	}
	ratio, err := minimaxRatio(fhat, w, tg.line, tg.m, tg.k)
	if err != nil {
		return nil, fmt.Errorf("straight-line check: %w", err)
	}
	inf.SimultaneousCritical = crit
	inf.StraightMaxRatio = ratio
	inf.StraightFits = ratio <= 1
	return inf, nil
}

// block returns the q×q diagonal block of the p×p row-major a starting at
// (start, start).
func block(a []float64, p, start, q int) []float64 {
	out := make([]float64, q*q)
	for i := 0; i < q; i++ {
		copy(out[i*q:(i+1)*q], a[(start+i)*p+start:(start+i)*p+start+q])
	}
	return out
}
