package fit

import (
	"math"
)

// penalty is one quadratic penalty λ βᵀSβ acting on the coefficients
// [start, start+size) of the constrained parametrisation.
type penalty struct {
	term        int       // index of the term it belongs to
	start, size int       // coefficient range
	s           []float64 // size×size, row-major
	root        []float64 // rank×size with rootᵀroot = s
	rank        int
	fixed       float64 // > 0: λ fixed by the user; no selection
}

// penaltyBlock groups the penalties acting on one coefficient range (one
// for a curve, one per margin for a surface), for log|S_λ|₊.
type penaltyBlock struct {
	start, size int
	pens        []int // indices into the penalty list
}

// newPenalty builds a penalty from its matrix, finding its rank and a
// square root by eigendecomposition.
func newPenalty(term, start, size int, s []float64, fixed float64) (penalty, bool) {
	vals, vecs, ok := symEigen(s, size)
	if !ok {
		return penalty{}, false
	}
	top := vals[len(vals)-1]
	var root []float64
	rank := 0
	for i := len(vals) - 1; i >= 0; i-- {
		if vals[i] <= top*1e-10 {
			break
		}
		sq := math.Sqrt(vals[i])
		for j := 0; j < size; j++ {
			root = append(root, sq*vecs.At(j, i))
		}
		rank++
	}
	return penalty{term: term, start: start, size: size, s: s, root: root, rank: rank, fixed: fixed}, true
}

// problem is a penalised weighted least-squares problem in the constrained
// parametrisation: minimise ‖f − Rβ‖² + r0 + Σ_j λ_j βᵀS_jβ, where R (p×p,
// upper triangular) and f come from a QR (or Cholesky) factorisation of the
// weighted model matrix and r0 is the residual the factorisation left over.
// It is the working model of one PIRLS step (Wood 2011, §3; Wood, Goude &
// Shaw 2015 for the factor-then-penalise form).
type problem struct {
	p      int
	r      []float64 // p×p upper triangular
	f      []float64
	r0     float64
	n      float64 // number of observations
	shift  float64 // added to the intercept of every solution (see passState.zShift)
	pens   []penalty
	blocks []penaltyBlock
}

// solution is the minimiser of a problem at fixed λ with what the smoothing
// criteria need.
type solution struct {
	lambda  []float64
	beta    []float64
	hinv    []float64 // (RᵀR + S_λ)⁻¹, p×p
	logDetH float64
	rss     float64   // ‖f − Rβ‖² + r0
	bsb     []float64 // βᵀS_jβ per penalty
	ok      bool
}

// solve minimises the penalised least-squares objective at λ through the QR
// factorisation of [R; √λ_j E_j] (E_jᵀE_j = S_j), which avoids forming
// RᵀR + S_λ and squaring its condition number.
func (pr *problem) solve(lambda []float64) solution {
	p := pr.p
	rows := p
	for j := range pr.pens {
		rows += pr.pens[j].rank
	}
	a := make([]float64, rows*(p+1))
	for i := 0; i < p; i++ {
		copy(a[i*(p+1):i*(p+1)+p], pr.r[i*p:i*p+p])
		a[i*(p+1)+p] = pr.f[i]
	}
	row := p
	for j, pen := range pr.pens {
		sl := math.Sqrt(lambda[j])
		for k := 0; k < pen.rank; k++ {
			for c := 0; c < pen.size; c++ {
				a[row*(p+1)+pen.start+c] = sl * pen.root[k*pen.size+c]
			}
			row++
		}
	}
	raug := qrInPlace(a, rows, p+1)
	rt := make([]float64, p*p)
	beta := make([]float64, p)
	logDet := 0.0
	for i := 0; i < p; i++ {
		copy(rt[i*p:i*p+p], raug[i*(p+1):i*(p+1)+p])
		beta[i] = raug[i*(p+1)+p]
		logDet += 2 * math.Log(math.Abs(rt[i*p+i]))
	}
	sol := solution{lambda: append([]float64(nil), lambda...), logDetH: logDet}
	if !upperSolve(rt, p, beta, false) {
		return sol
	}
	rinv, ok := upperInverse(rt, p)
	if !ok {
		return sol
	}
	// H⁻¹ = R̃⁻¹R̃⁻ᵀ.
	hinv := make([]float64, p*p)
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			s := 0.0
			for k := j; k < p; k++ {
				s += rinv[i*p+k] * rinv[j*p+k]
			}
			hinv[i*p+j], hinv[j*p+i] = s, s
		}
	}
	// Residual ‖f − Rβ‖² + r0.
	rss := pr.r0
	for i := 0; i < p; i++ {
		e := pr.f[i]
		for k := i; k < p; k++ {
			e -= pr.r[i*p+k] * beta[k]
		}
		rss += e * e
	}
	sol.beta, sol.hinv, sol.rss, sol.ok = beta, hinv, rss, true
	sol.bsb = make([]float64, len(pr.pens))
	for j, pen := range pr.pens {
		sol.bsb[j] = quadForm(pen.s, beta[pen.start:pen.start+pen.size])
	}
	beta[0] += pr.shift // the intercept column is unpenalised
	return sol
}

// penaltyValue is βᵀS_λβ.
func (s *solution) penaltyValue() float64 {
	v := 0.0
	for j, b := range s.bsb {
		v += s.lambda[j] * b
	}
	return v
}

// quadForm returns xᵀSx for the n×n row-major S.
func quadForm(s, x []float64) float64 {
	n := len(x)
	v := 0.0
	for i := 0; i < n; i++ {
		r := 0.0
		for j := 0; j < n; j++ {
			r += s[i*n+j] * x[j]
		}
		v += x[i] * r
	}
	return v
}

// hinvS returns H⁻¹S_j restricted to its non-zero columns: a p×size matrix.
func (pr *problem) hinvS(sol *solution, j int) []float64 {
	p, pen := pr.p, pr.pens[j]
	out := make([]float64, p*pen.size)
	for i := 0; i < p; i++ {
		for c := 0; c < pen.size; c++ {
			s := 0.0
			for k := 0; k < pen.size; k++ {
				s += sol.hinv[i*p+pen.start+k] * pen.s[k*pen.size+c]
			}
			out[i*pen.size+c] = s
		}
	}
	return out
}

// traceProduct returns tr(AB) for A = H⁻¹S_j and B = H⁻¹S_k given as the
// p×size matrices of their non-zero columns.
func (pr *problem) traceProduct(a []float64, j int, b []float64, k int) float64 {
	pj, pk := pr.pens[j], pr.pens[k]
	t := 0.0
	for x := 0; x < pj.size; x++ { // column start+x of A, row start+x of B
		for y := 0; y < pk.size; y++ {
			t += a[(pk.start+y)*pj.size+x] * b[(pj.start+x)*pk.size+y]
		}
	}
	return t
}

// edfPerCoefficient returns diag(F) with F = H⁻¹RᵀR, the influence of each
// coefficient (its effective degrees of freedom).
func (pr *problem) edfPerCoefficient(sol *solution) []float64 {
	p := pr.p
	// RᵀR column by column: (RᵀR)[k][i] = Σ_m R[m][k] R[m][i].
	out := make([]float64, p)
	for i := 0; i < p; i++ {
		s := 0.0
		for k := 0; k < p; k++ {
			rtr := 0.0
			for m := 0; m <= min(k, i); m++ {
				rtr += pr.r[m*p+k] * pr.r[m*p+i]
			}
			s += sol.hinv[i*p+k] * rtr
		}
		out[i] = s
	}
	return out
}

// logDetS returns log|S_λ|₊ (the product of the positive eigenvalues of the
// total penalty, block by block) and its first and second derivatives with
// respect to log λ_j. For a block with one penalty this is rank·log λ plus
// a constant; for several it uses d log|S|₊/dρ_j = λ_j tr(S⁺S_j) (Wood 2011,
// appendix B, without the re-parametrisation his method adds for extreme
// ratios of λ).
func (pr *problem) logDetS(lambda []float64) (float64, []float64, []float64) {
	m := len(pr.pens)
	grad := make([]float64, m)
	hess := make([]float64, m*m)
	total := 0.0
	for _, bl := range pr.blocks {
		q := bl.size
		sum := make([]float64, q*q)
		for _, j := range bl.pens {
			pen := pr.pens[j]
			off := pen.start - bl.start
			for a := 0; a < pen.size; a++ {
				for b := 0; b < pen.size; b++ {
					sum[(off+a)*q+off+b] += lambda[j] * pen.s[a*pen.size+b]
				}
			}
		}
		vals, vecs, ok := symEigen(sum, q)
		if !ok {
			continue
		}
		top := vals[len(vals)-1]
		// S⁺ from the positive eigenvalues.
		splus := make([]float64, q*q)
		for i, v := range vals {
			if v <= top*1e-12 {
				continue
			}
			total += math.Log(v)
			for a := 0; a < q; a++ {
				va := vecs.At(a, i) / v
				for b := 0; b < q; b++ {
					splus[a*q+b] += va * vecs.At(b, i)
				}
			}
		}
		if len(bl.pens) == 1 {
			j := bl.pens[0]
			grad[j] = float64(pr.pens[j].rank)
			continue
		}
		// P_j = S⁺S_j (q×q) for each penalty of the block.
		prod := make([][]float64, len(bl.pens))
		for ii, j := range bl.pens {
			pen := pr.pens[j]
			off := pen.start - bl.start
			pj := make([]float64, q*q)
			for a := 0; a < q; a++ {
				for b := 0; b < pen.size; b++ {
					s := 0.0
					for c := 0; c < pen.size; c++ {
						s += splus[a*q+off+c] * pen.s[c*pen.size+b]
					}
					pj[a*q+off+b] = lambda[j] * s
				}
			}
			prod[ii] = pj
			tr := 0.0
			for a := 0; a < q; a++ {
				tr += pj[a*q+a]
			}
			grad[j] = tr
		}
		for ii, j := range bl.pens {
			for kk, k := range bl.pens {
				tr := 0.0
				for a := 0; a < q; a++ {
					for b := 0; b < q; b++ {
						tr += prod[ii][a*q+b] * prod[kk][b*q+a]
					}
				}
				h := -tr
				if j == k {
					h += grad[j]
				}
				hess[j*m+k] = h
			}
		}
	}
	return total, grad, hess
}

// nullSpaceDim is M_p, the dimension of the null space of S_λ.
func (pr *problem) nullSpaceDim() int {
	rank := 0
	for _, bl := range pr.blocks {
		// The rank of a sum of positive semi-definite matrices with
		// positive weights does not depend on the weights.
		ones := make([]float64, len(pr.pens))
		for i := range ones {
			ones[i] = 1
		}
		q := bl.size
		sum := make([]float64, q*q)
		for _, j := range bl.pens {
			pen := pr.pens[j]
			off := pen.start - bl.start
			norm := 0.0
			for _, v := range pen.s {
				norm += v * v
			}
			norm = math.Sqrt(norm)
			for a := 0; a < pen.size; a++ {
				for b := 0; b < pen.size; b++ {
					sum[(off+a)*q+off+b] += pen.s[a*pen.size+b] / norm
				}
			}
		}
		vals, _, ok := symEigen(sum, q)
		if !ok {
			continue
		}
		top := vals[len(vals)-1]
		for _, v := range vals {
			if v > top*1e-10 {
				rank++
			}
		}
	}
	return pr.p - rank
}
