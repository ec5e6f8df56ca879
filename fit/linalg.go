package fit

import (
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
	"gonum.org/v1/gonum/mat"
)

// qrInPlace overwrites the rows×cols row-major matrix a with its Householder
// QR factorisation and returns the cols×cols upper-triangular factor R (a
// fresh slice; when rows < cols, the rows beyond the first rows are zero).
func qrInPlace(a []float64, rows, cols int) []float64 {
	g := blas64.General{Rows: rows, Cols: cols, Stride: cols, Data: a}
	tau := make([]float64, min(rows, cols))
	work := make([]float64, 1)
	lapack64.Geqrf(g, tau, work, -1)
	work = make([]float64, int(work[0]))
	lapack64.Geqrf(g, tau, work, len(work))
	r := make([]float64, cols*cols)
	for i := 0; i < min(rows, cols); i++ {
		for j := i; j < cols; j++ {
			r[i*cols+j] = a[i*cols+j]
		}
	}
	return r
}

// pivotedQR returns the column pivoting of a Householder QR with column
// pivoting (LAPACK dgeqp3) of the rows×cols matrix a (which it overwrites)
// and the magnitudes of R's diagonal in pivot order.
func pivotedQR(a []float64, rows, cols int) (perm []int, diag []float64) {
	g := blas64.General{Rows: rows, Cols: cols, Stride: cols, Data: a}
	jpvt := make([]int, cols)
	for i := range jpvt {
		jpvt[i] = -1
	}
	tau := make([]float64, min(rows, cols))
	work := make([]float64, 1)
	lapack64.Geqp3(g, jpvt, tau, work, -1)
	work = make([]float64, int(work[0]))
	lapack64.Geqp3(g, jpvt, tau, work, len(work))
	diag = make([]float64, min(rows, cols))
	for i := range diag {
		diag[i] = math.Abs(a[i*cols+i])
	}
	return jpvt, diag
}

// upperInverse returns R⁻¹ for the n×n upper-triangular R, or false when R
// is exactly singular.
func upperInverse(r []float64, n int) ([]float64, bool) {
	inv := append([]float64(nil), r...)
	t := blas64.Triangular{N: n, Stride: n, Data: inv, Uplo: blas.Upper, Diag: blas.NonUnit}
	ok := lapack64.Trtri(t)
	return inv, ok
}

// upperSolve solves R x = b (trans false) or Rᵀ x = b (trans true) in place.
func upperSolve(r []float64, n int, b []float64, trans bool) bool {
	t := blas64.Triangular{N: n, Stride: n, Data: r, Uplo: blas.Upper, Diag: blas.NonUnit}
	tr := blas.NoTrans
	if trans {
		tr = blas.Trans
	}
	return lapack64.Trtrs(tr, t, blas64.General{Rows: n, Cols: 1, Stride: 1, Data: b})
}

// symEigen returns the eigenvalues (ascending) and eigenvectors (columns)
// of the symmetric n×n row-major matrix a.
func symEigen(a []float64, n int) ([]float64, *mat.Dense, bool) {
	var es mat.EigenSym
	ok := es.Factorize(mat.NewSymDense(n, append([]float64(nil), a...)), true)
	if !ok {
		return nil, nil, false
	}
	var v mat.Dense
	es.VectorsTo(&v)
	return es.Values(nil), &v, true
}

// nullSpace returns an orthonormal basis (k×q, row-major) of the null
// space of the r×k constraint matrix c and its dimension q. Rows may be
// linearly dependent (tensor-product constraints are): the rank is read off
// the singular values, and the basis is the right singular vectors of the
// negligible ones (Golub & Van Loan 2013, §2.4).
func nullSpace(c []float64, r, k int) ([]float64, int) {
	if r == 0 {
		z := make([]float64, k*k)
		for i := 0; i < k; i++ {
			z[i*k+i] = 1
		}
		return z, k
	}
	// Pad to at least k rows so that the full V is available.
	rows := max(r, k)
	padded := make([]float64, rows*k)
	copy(padded, c[:r*k])
	var svd mat.SVD
	if !svd.Factorize(mat.NewDense(rows, k, padded), mat.SVDFull) {
		return nil, 0
	}
	vals := svd.Values(nil)
	var v mat.Dense
	svd.VTo(&v)
	tol := 1e-10 * vals[0]
	rank := 0
	for _, s := range vals {
		if s > tol {
			rank++
		}
	}
	q := k - rank
	z := make([]float64, k*q)
	for i := 0; i < k; i++ {
		for j := 0; j < q; j++ {
			z[i*q+j] = v.At(i, rank+j)
		}
	}
	return z, q
}

// matMul returns a·b for row-major a (n×m) and b (m×k).
func matMul(a, b []float64, n, m, k int) []float64 {
	out := make([]float64, n*k)
	blas64.Gemm(blas.NoTrans, blas.NoTrans, 1,
		blas64.General{Rows: n, Cols: m, Stride: m, Data: a},
		blas64.General{Rows: m, Cols: k, Stride: k, Data: b}, 0,
		blas64.General{Rows: n, Cols: k, Stride: k, Data: out})
	return out
}

// matTMul returns aᵀ·b for row-major a (m×n) and b (m×k).
func matTMul(a, b []float64, m, n, k int) []float64 {
	out := make([]float64, n*k)
	blas64.Gemm(blas.Trans, blas.NoTrans, 1,
		blas64.General{Rows: m, Cols: n, Stride: n, Data: a},
		blas64.General{Rows: m, Cols: k, Stride: k, Data: b}, 0,
		blas64.General{Rows: n, Cols: k, Stride: k, Data: out})
	return out
}
