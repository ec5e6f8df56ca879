package fit

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
	"gonum.org/v1/gonum/mat"
)

// Concurvity measures how far a term can be reproduced by the other terms
// of the model: the additive-model counterpart of collinearity.
//
// Geometry. With the working weights W at convergence, two coefficient
// vectors a, b of the model matrix X give functions whose inner product over
// the data is ⟨Xa, Xb⟩_W = aᵀXᵀWXb = (Ra)ᵀ(Rb), R the fit's triangular
// factor (RᵀR = XᵀWX). So the columns of R carry the whole geometry of the
// model matrix and no pass over the rows is needed. A term's functions are
// taken with their weighted mean removed (that constant is the intercept's:
// the measures do not depend on how a term is centred). Write T for the
// space these span and O for the span of the intercept and every other
// term's columns, P_O for the W-orthogonal projection onto O.
//
//   - Worst = max over f in T of ‖P_O f‖²/‖f‖²: the largest squared
//     canonical correlation between T and O (Hotelling 1936, "Relations
//     between two sets of variates", Biometrika 28), i.e. cos² of the
//     smallest principal angle between the subspaces. 0: every function the
//     term can take is orthogonal to everything else; 1: some function it
//     can take is exactly a combination of the other terms. Curves and
//     surfaces span wiggly functions the penalty may never let them use, so
//     Worst is a property of the design, not of the estimate.
//   - Fitted is the same ratio for the term's fitted values f̂ = X_jβ̂_j
//     (0 when f̂ is zero): how much of what the term actually estimated
//     could have been produced by the other terms. Fitted ≤ Worst.
//   - Partner names the single other term that, with the intercept,
//     reproduces most of the term (largest Worst computed against that
//     term alone), and PartnerWorst is that value; Partner is empty when
//     the term has no other term to compare with or is orthogonal to all
//     of them.
//
// A linear or factor term whose every column was aliased (fixed at zero) has
// Worst 1 and Fitted 0 and no partner: its column is exactly a combination
// of earlier ones (see the aliasing warning; no concurvity warning is added).
// A factor with some levels aliased is measured on the levels it kept.
type Concurvity struct {
	Worst        float64 `json:"worst"`
	Fitted       float64 `json:"fitted"`
	Partner      string  `json:"partner,omitempty"`
	PartnerWorst float64 `json:"partner_worst,omitempty"`
}

// concurvityWarnAt is the Worst above which a fit warns. Above 0.9 at most
// 10% of the squared size of some function the term can take — √0.1 ≈ 32%
// of its size — is beyond the reach of the other terms, so the data can
// move that function between the term and the others almost freely: its
// curve and standard errors become unstable. For a linear term this is the
// familiar variance-inflation factor VIF = 1/(1 − R²) of 10, a common rule
// of thumb for harmful collinearity (common practice, no source).
const concurvityWarnAt = 0.9

// concurvityRankTol is the relative size below which a direction of a set
// of columns (each scaled to unit length) counts as absent: the same level
// at which alias.go calls a column aliased.
const concurvityRankTol = aliasTolerance

// concurvityZeroTol is the size, relative to the largest column of R, below
// which a column is treated as identically zero on the data.
const concurvityZeroTol = 1e-13

// concurvity fills TermResult.Concurvity for each term and warns about the
// terms whose Worst exceeds concurvityWarnAt. It reads only R and β̂.
//
// Method (Björck & Golub 1973, "Numerical methods for computing angles
// between linear subspaces", Math. Comp. 27): orthonormal bases of both
// subspaces by Householder QR with column pivoting (rank from its
// diagonal, Golub & Van Loan 2013 §5.4.1), then the singular values of
// Q_OᵀQ_T (cosines of the principal angles) and of (I − Q_OQ_Oᵀ)Q_T (their
// sines). Large cosines are taken from the sines, which keeps a Worst near
// 1 accurate; nothing is inverted.
func (f *fitter) concurvity(doc *Document, st *pirlsState) error {
	d, pr := st.d, st.pr
	if pr == nil || len(d.terms) != len(doc.Terms) {
		return fmt.Errorf("concurvity: %d terms in the design, %d in the document", len(d.terms), len(doc.Terms))
	}
	p := pr.p
	beta := st.eval.sol.beta
	if len(pr.r) != p*p || len(beta) != p {
		return fmt.Errorf("concurvity: R is %d values and β %d for %d coefficients", len(pr.r), len(beta), p)
	}
	if !allFiniteValues(pr.r) || !allFiniteValues(beta) {
		return nil // nothing trustworthy to say; the fit reports its own trouble
	}
	blocks := make([][]int, len(d.terms))
	for i, t := range d.terms {
		blocks[i] = coefRange(t.cstart, t.q)
	}
	res := concurvityFromR(pr.r, p, blocks, beta)
	for i, c := range res {
		if c == nil {
			continue
		}
		if c.partner >= 0 {
			c.Partner = d.terms[c.partner].name
		}
		doc.Terms[i].Concurvity = &c.Concurvity
		if d.terms[i].q == 0 || c.Worst <= concurvityWarnAt {
			continue
		}
		with := "the other terms together"
		if c.Partner != "" {
			with = fmt.Sprintf("term %q (%.4f by itself)", c.Partner, c.PartnerWorst)
		}
		own := 100 * math.Sqrt(1-c.Worst)
		f.warn = append(f.warn, fmt.Sprintf("term %q can be almost reproduced by the other terms (concurvity %.4f > %g: some shape it can take is only %.2g%% its own), most of all by %s: its estimate and standard errors may be unstable; consider removing or merging one of them",
			d.terms[i].name, c.Worst, concurvityWarnAt, own, with))
	}
	return nil
}

// termConcurvity is a Concurvity with its partner as a term index (-1:
// none).
type termConcurvity struct {
	Concurvity
	partner int
}

// concurvityFromR computes the measures for each block of coefficient
// indices (column 0 of the p×p R is the intercept and belongs to no block;
// an empty block is a fully aliased term). beta holds the coefficients.
func concurvityFromR(r []float64, p int, blocks [][]int, beta []float64) []*termConcurvity {
	g := newRGeometry(r, p)
	// T_j: each term's columns with the weighted mean removed.
	own := make([]*orthoBasis, len(blocks))
	// O_k: intercept and term k alone, for the partner search.
	pair := make([]*orthoBasis, len(blocks))
	for j, b := range blocks {
		if len(b) == 0 {
			continue
		}
		own[j] = g.basis(b, true)
		pair[j] = g.basis(append([]int{0}, b...), false)
	}
	out := make([]*termConcurvity, len(blocks))
	for j, b := range blocks {
		c := &termConcurvity{partner: -1}
		out[j] = c
		if len(b) == 0 {
			c.Worst = 1
			continue
		}
		if own[j].rank == 0 {
			continue // the term is constant on the data: nothing to reproduce
		}
		inBlock := make([]bool, p)
		for _, col := range b {
			inBlock[col] = true
		}
		var others []int
		for col := 0; col < p; col++ {
			if !inBlock[col] {
				others = append(others, col)
			}
		}
		rest := g.basis(others, false)
		c.Worst = largestCos2(rest, own[j])
		c.Fitted = math.Min(c.Worst, fittedCos2(g, rest, b, beta))
		for k := range blocks {
			if k == j || pair[k] == nil {
				continue
			}
			if v := largestCos2(pair[k], own[j]); v > c.PartnerWorst {
				c.PartnerWorst, c.partner = v, k
			}
		}
		if c.PartnerWorst <= 1e-12 {
			c.PartnerWorst, c.partner = 0, -1
		}
	}
	return out
}

// rGeometry holds R's columns and the unit vector of the intercept column,
// the constant function in the W inner product.
type rGeometry struct {
	r    []float64
	p    int
	one  []float64 // R e₀ / ‖R e₀‖
	zero float64   // absolute size below which a column is zero
}

func newRGeometry(r []float64, p int) *rGeometry {
	g := &rGeometry{r: r, p: p, one: make([]float64, p)}
	big := 0.0
	for c := 0; c < p; c++ {
		big = math.Max(big, g.colNorm(c))
	}
	g.zero = concurvityZeroTol * big
	if n0 := g.colNorm(0); n0 > 0 {
		for i := 0; i < p; i++ {
			g.one[i] = r[i*p] / n0
		}
	}
	return g
}

func (g *rGeometry) colNorm(c int) float64 {
	s := 0.0
	for i := 0; i < g.p; i++ {
		s += g.r[i*g.p+c] * g.r[i*g.p+c]
	}
	return math.Sqrt(s)
}

// orthoBasis is an orthonormal basis: q is rows×rank, row-major.
type orthoBasis struct {
	q    []float64
	rows int
	rank int
}

// basis returns an orthonormal basis of the span of R's columns cols, with
// the constant direction projected out first when centre is set. A column
// whose remainder is negligible next to its original length (or zero on the
// data) is left out, and the rank is read from a pivoted QR of the columns
// scaled to unit length, so dependent columns are fine.
func (g *rGeometry) basis(cols []int, centre bool) *orthoBasis {
	p, m := g.p, len(cols)
	a := make([]float64, p*m)
	var keep []int
	for k, c := range cols {
		orig := g.colNorm(c)
		for i := 0; i < p; i++ {
			a[i*m+k] = g.r[i*p+c]
		}
		if centre {
			dot := 0.0
			for i := 0; i < p; i++ {
				dot += g.one[i] * a[i*m+k]
			}
			for i := 0; i < p; i++ {
				a[i*m+k] -= dot * g.one[i]
			}
		}
		n := 0.0
		for i := 0; i < p; i++ {
			n += a[i*m+k] * a[i*m+k]
		}
		n = math.Sqrt(n)
		if n <= g.zero || n <= concurvityRankTol*orig {
			continue
		}
		for i := 0; i < p; i++ {
			a[i*m+k] /= n
		}
		keep = append(keep, k)
	}
	kc := len(keep)
	if kc == 0 {
		return &orthoBasis{rows: p}
	}
	b := make([]float64, p*kc)
	for i := 0; i < p; i++ {
		for jj, k := range keep {
			b[i*kc+jj] = a[i*m+k]
		}
	}
	gen := blas64.General{Rows: p, Cols: kc, Stride: kc, Data: b}
	jpvt := make([]int, kc)
	for i := range jpvt {
		jpvt[i] = -1
	}
	tau := make([]float64, min(p, kc))
	work := make([]float64, 1)
	lapack64.Geqp3(gen, jpvt, tau, work, -1)
	work = make([]float64, max(int(work[0]), 3*kc+1))
	lapack64.Geqp3(gen, jpvt, tau, work, len(work))
	rank := 0
	for i := 0; i < len(tau); i++ {
		if math.Abs(b[i*kc+i]) > concurvityRankTol*math.Abs(b[0]) {
			rank++
		}
	}
	if rank == 0 {
		return &orthoBasis{rows: p}
	}
	qg := blas64.General{Rows: p, Cols: rank, Stride: kc, Data: b}
	lapack64.Orgqr(qg, tau[:rank], work, -1)
	work = make([]float64, max(int(work[0]), rank))
	lapack64.Orgqr(qg, tau[:rank], work, len(work))
	q := make([]float64, p*rank)
	for i := 0; i < p; i++ {
		copy(q[i*rank:i*rank+rank], b[i*kc:i*kc+rank])
	}
	return &orthoBasis{q: q, rows: p, rank: rank}
}

// project returns Q_Oᵀv (o.rank×k) and v − Q_OQ_Oᵀv (rows×k) for the
// rows×k matrix v, projecting twice so the remainder stays orthogonal to O
// to rounding ("twice is enough": Parlett 1980, The Symmetric Eigenvalue
// Problem, §6.9).
func (o *orthoBasis) project(v []float64, k int) (coef, rem []float64) {
	n := o.rows
	rem = append([]float64(nil), v...)
	coef = make([]float64, o.rank*k)
	if o.rank == 0 {
		return coef, rem
	}
	qm := blas64.General{Rows: n, Cols: o.rank, Stride: o.rank, Data: o.q}
	rm := blas64.General{Rows: n, Cols: k, Stride: k, Data: rem}
	step := make([]float64, o.rank*k)
	sm := blas64.General{Rows: o.rank, Cols: k, Stride: k, Data: step}
	for pass := 0; pass < 2; pass++ {
		blas64.Gemm(blas.Trans, blas.NoTrans, 1, qm, rm, 0, sm)
		blas64.Gemm(blas.NoTrans, blas.NoTrans, -1, qm, sm, 1, rm)
		for i := range coef {
			coef[i] += step[i]
		}
	}
	return coef, rem
}

// largestCos2 returns the largest squared cosine of the principal angles
// between the subspaces o and t: from the cosines when it is at most ½,
// else as 1 − (smallest sine)² (Björck & Golub 1973, §3).
func largestCos2(o, t *orthoBasis) float64 {
	if o.rank == 0 || t.rank == 0 {
		return 0
	}
	coef, rem := o.project(t.q, t.rank)
	cos, ok := singularValuesOf(coef, o.rank, t.rank)
	if !ok {
		return 0
	}
	c2 := cos[0] * cos[0]
	if c2 <= 0.5 {
		return clampUnit(c2)
	}
	sin := 0.0 // more directions of T than room outside O: one lies in O
	if t.rank <= t.rows-o.rank {
		s, ok := singularValuesOf(rem, t.rows, t.rank)
		if !ok {
			return clampUnit(c2)
		}
		sin = s[len(s)-1]
	}
	return clampUnit(1 - sin*sin)
}

// fittedCos2 returns ‖P_O f̂‖²/‖f̂‖² for the term's fitted values f̂ = R_j β_j
// with their weighted mean removed, or 0 when f̂ is zero (to rounding next
// to the sizes of its parts).
func fittedCos2(g *rGeometry, o *orthoBasis, block []int, beta []float64) float64 {
	p := g.p
	v := make([]float64, p)
	size := 0.0
	for _, c := range block {
		if beta[c] == 0 {
			continue
		}
		size += math.Abs(beta[c]) * g.colNorm(c)
		for i := 0; i < p; i++ {
			v[i] += g.r[i*p+c] * beta[c]
		}
	}
	dot := 0.0
	for i := 0; i < p; i++ {
		dot += g.one[i] * v[i]
	}
	n := 0.0
	for i := 0; i < p; i++ {
		v[i] -= dot * g.one[i]
		n += v[i] * v[i]
	}
	n = math.Sqrt(n)
	if size == 0 || n <= 1e-10*size || n <= g.zero {
		return 0
	}
	for i := range v {
		v[i] /= n
	}
	coef, rem := o.project(v, 1)
	c2 := 0.0
	for _, x := range coef {
		c2 += x * x
	}
	if c2 <= 0.5 {
		return clampUnit(c2)
	}
	s2 := 0.0
	for _, x := range rem {
		s2 += x * x
	}
	return clampUnit(1 - s2)
}

// singularValues returns the singular values (descending) of the r×c
// row-major matrix a, or false if the SVD did not converge.
func singularValuesOf(a []float64, r, c int) ([]float64, bool) {
	var svd mat.SVD
	if !svd.Factorize(mat.NewDense(r, c, append([]float64(nil), a...)), mat.SVDNone) {
		return nil, false
	}
	return svd.Values(nil), true
}

func coefRange(start, n int) []int {
	out := make([]int, n)
	for i := range out {
		out[i] = start + i
	}
	return out
}

func allFiniteValues(x []float64) bool {
	for _, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return false
		}
	}
	return true
}

func clampUnit(x float64) float64 {
	if !(x > 0) {
		return 0
	}
	return math.Min(x, 1)
}
