package network

import (
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
)

// blockedBand is the half bandwidth from which the factorisation is left to
// LAPACK's blocked band Cholesky (gonum's Dpbtrf switches to its blocked
// code at a block size of 32); narrower bands, the common case of ladders,
// are factorised here by the same unblocked algorithm without its per-row
// BLAS calls, which dominated the cost at half bandwidths of 2 to 10.
const blockedBand = 32

// bandFactor is the Cholesky factor Uᵀ U of a symmetric positive definite
// band matrix: U by rows from the diagonal, u[i*(k+1)+j-i] = U[i][j]. gonum's
// mat.BandCholesky also estimates the condition number on every
// factorisation, which costs O(n²) and dominated large networks, so it is
// not used; the residual test, not a condition estimate, decides
// convergence.
type bandFactor struct {
	n, k int
	u    []float64
}

// factorBand factorises in place the n×n matrix of half bandwidth k stored
// by rows from the diagonal: data[i*(k+1)+j-i] = A[i][j] for i <= j <= i+k.
// It reports false when the matrix is not positive definite.
func factorBand(n, k int, data []float64) (*bandFactor, bool) {
	f := &bandFactor{n: n, k: k, u: data}
	if k >= blockedBand {
		_, ok := lapack64.Pbtrf(blas64.SymmetricBand{Uplo: blas.Upper, N: n, K: k, Stride: k + 1, Data: data})
		return f, ok
	}
	// Row j of U is the scaled row j of what remains of A; its outer
	// product is taken off the trailing block (LAPACK's Dpbtf2, upper).
	w := k + 1
	for j := range n {
		ajj := data[j*w]
		if !(ajj > 0) {
			return f, false
		}
		ajj = math.Sqrt(ajj)
		data[j*w] = ajj
		kn := min(k, n-j-1)
		if kn == 0 {
			continue
		}
		row := data[j*w+1 : j*w+1+kn]
		r := 1 / ajj
		for i := range row {
			row[i] *= r
		}
		for i, xi := range row {
			t := -xi
			a := data[(j+1+i)*w : (j+1+i)*w+kn-i]
			for c, v := range row[i:] {
				a[c] += v * t
			}
		}
	}
	return f, true
}

// solve overwrites x with A^-1 x: Uᵀ y = x forwards, then U x = y
// backwards.
func (f *bandFactor) solve(x []float64) {
	n, k, u := f.n, f.k, f.u
	w := k + 1
	for i := range n {
		b := min(k, i)
		var sum float64
		for j := range b {
			sum += x[i-b+j] * u[(i-b+j)*w+b-j]
		}
		x[i] = (x[i] - sum) / u[i*w]
	}
	for i := n - 1; i >= 0; i-- {
		b := min(k, n-i-1)
		row := u[i*w+1 : i*w+1+b]
		var sum float64
		for j, v := range x[i+1 : i+1+b] {
			sum += v * row[j]
		}
		x[i] = (x[i] - sum) / u[i*w]
	}
}
