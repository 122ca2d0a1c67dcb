package lsq

import "math"

// Cholesky factorises the k×k symmetric positive definite a in place into
// its lower factor L (a = L Lᵀ); the upper triangle is left as it was.
func Cholesky(a []float64, k int) bool {
	for j := range k {
		s := a[j*k+j]
		for p := range j {
			s -= a[j*k+p] * a[j*k+p]
		}
		if !(s > 0) {
			return false
		}
		ljj := math.Sqrt(s)
		a[j*k+j] = ljj
		for i := j + 1; i < k; i++ {
			s := a[i*k+j]
			for p := range j {
				s -= a[i*k+p] * a[j*k+p]
			}
			a[i*k+j] = s / ljj
		}
	}
	return true
}

// CholSolve solves L Lᵀ x = b in place, L from Cholesky.
func CholSolve(l []float64, k int, b []float64) {
	for i := range k {
		s := b[i]
		for p := range i {
			s -= l[i*k+p] * b[p]
		}
		b[i] = s / l[i*k+i]
	}
	for i := k - 1; i >= 0; i-- {
		s := b[i]
		for p := i + 1; p < k; p++ {
			s -= l[p*k+i] * b[p]
		}
		b[i] = s / l[i*k+i]
	}
}
