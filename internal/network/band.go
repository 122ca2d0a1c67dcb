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
	rd   []float64 // 1/U[i][i]: the solves multiply, which is shorter on their critical path than dividing
}

// factorBand factorises in place the n×n matrix of half bandwidth k stored
// by rows from the diagonal: data[i*(k+1)+j-i] = A[i][j] for i <= j <= i+k,
// and fills rd (length n) with the reciprocals of U's diagonal. It reports
// false when the matrix is not positive definite.
func factorBand(n, k int, data, rd []float64) (*bandFactor, bool) {
	f := &bandFactor{n: n, k: k, u: data, rd: rd[:n]}
	if k >= blockedBand {
		_, ok := lapack64.Pbtrf(blas64.SymmetricBand{Uplo: blas.Upper, N: n, K: k, Stride: k + 1, Data: data})
		if ok {
			for i := range f.rd {
				f.rd[i] = 1 / data[i*(k+1)]
			}
		}
		return f, ok
	}
	if k == 2 {
		return f, factorBand2(n, data, f.rd)
	}
	// Row j of U is the scaled row j of what remains of A; its outer
	// product is taken off the trailing block (LAPACK's Dpbtf2, upper).
	w := k + 1
	for j := range n {
		o := j * w
		ajj := data[o]
		if !(ajj > 0) {
			return f, false
		}
		ajj = math.Sqrt(ajj)
		data[o] = ajj
		kn := min(k, n-j-1)
		r := 1 / ajj
		rd[j] = r
		for i := 1; i <= kn; i++ {
			data[o+i] *= r
		}
		for i := 1; i <= kn; i++ {
			t := -data[o+i]
			ro := o + i*w - i // row j+i, indexed by column offset from j
			for c := i; c <= kn; c++ {
				data[ro+c] += data[o+c] * t
			}
		}
	}
	return f, true
}

// factorBand2 is factorBand's loop written out for half bandwidth 2, the
// bandwidth of Build's ladders, with the same operations in the same order.
func factorBand2(n int, data, rd []float64) bool {
	rd = rd[:n]
	for j := range n {
		o := j * 3
		ajj := data[o]
		if !(ajj > 0) {
			return false
		}
		ajj = math.Sqrt(ajj)
		data[o] = ajj
		r := 1 / ajj
		rd[j] = r
		switch {
		case j+2 < n:
			x0, x1 := data[o+1]*r, data[o+2]*r
			data[o+1], data[o+2] = x0, x1
			t := -x0
			data[o+3] += x0 * t
			data[o+4] += x1 * t
			data[o+6] += x1 * -x1
		case j+1 < n:
			x0 := data[o+1] * r
			data[o+1] = x0
			data[o+3] += x0 * -x0
		}
	}
	return true
}

// solve overwrites x with A^-1 x: Uᵀ y = x forwards, then U x = y
// backwards.
func (f *bandFactor) solve(x []float64) {
	n, k, u, rd := f.n, f.k, f.u, f.rd
	if k == 2 && n >= 2 {
		solveBand2(n, u, rd, x)
		return
	}
	w := k + 1
	for i := range n {
		b := min(k, i)
		var sum float64
		for j := range b {
			sum += x[i-b+j] * u[(i-b+j)*w+b-j]
		}
		x[i] = (x[i] - sum) * rd[i]
	}
	for i := n - 1; i >= 0; i-- {
		b := min(k, n-i-1)
		var sum float64
		for j := range b {
			sum += x[i+1+j] * u[i*w+1+j]
		}
		x[i] = (x[i] - sum) * rd[i]
	}
}

// solveBand2 is solve's loops written out for half bandwidth 2 and n >= 2,
// with the same operations in the same order.
func solveBand2(n int, u, rd, x []float64) {
	u = u[:3*n]
	rd = rd[:n]
	x = x[:n]
	x[0] *= rd[0]
	x[1] = (x[1] - x[0]*u[1]) * rd[1]
	for i := 2; i < n; i++ {
		sum := x[i-2] * u[3*i-4]
		sum += x[i-1] * u[3*i-2]
		x[i] = (x[i] - sum) * rd[i]
	}
	i := n - 1
	x[i] *= rd[i]
	i--
	x[i] = (x[i] - x[i+1]*u[3*i+1]) * rd[i]
	for i--; i >= 0; i-- {
		sum := x[i+1] * u[3*i+1]
		sum += x[i+2] * u[3*i+2]
		x[i] = (x[i] - sum) * rd[i]
	}
}

// inverse computes the entries Z = (Uᵀ U)⁻¹ within the band by the
// recurrences of sparseFactor.inverse with U in Lᵀ's place (U Z = U⁻ᵀ,
// rows last to first): O(n k²).
func (f *bandFactor) inverse() func(a, b int) float64 {
	n, k, u, rd := f.n, f.k, f.u, f.rd
	w := k + 1
	z := make([]float64, n*w)
	at := func(i, j int) float64 {
		if i > j {
			i, j = j, i
		}
		return z[i*w+j-i]
	}
	for j := n - 1; j >= 0; j-- {
		kn := min(k, n-j-1)
		for m := j + 1; m <= j+kn; m++ {
			var s float64
			for t := 1; t <= kn; t++ {
				s += u[j*w+t] * at(j+t, m)
			}
			z[j*w+m-j] = -s * rd[j]
		}
		var s float64
		for t := 1; t <= kn; t++ {
			s += u[j*w+t] * z[j*w+t]
		}
		z[j*w] = (rd[j] - s) * rd[j]
	}
	return at
}
