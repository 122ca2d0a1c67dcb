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

// BandCholesky factorises in place the k×k symmetric positive definite
// matrix of half bandwidth bw stored by rows from the diagonal,
// a[i*(bw+1)+j-i] = A[i][j] for i <= j <= min(i+bw, k-1) (a has k*(bw+1)
// entries; those past the last column are not read), into Uᵀ U with U in
// the same layout: LAPACK's dpbtf2 (upper) written out, O(k bw²) instead
// of the dense O(k³), for the node matrices of ladders, whose half
// bandwidth is a few nodes however long the ladder.
func BandCholesky(a []float64, k, bw int) bool {
	w := bw + 1
	for j := range k {
		o := j * w
		ajj := a[o]
		if !(ajj > 0) {
			return false
		}
		ajj = math.Sqrt(ajj)
		a[o] = ajj
		kn := min(bw, k-j-1)
		r := 1 / ajj
		for i := 1; i <= kn; i++ {
			a[o+i] *= r
		}
		for i := 1; i <= kn; i++ {
			t := a[o+i]
			ro := (j+i)*w - i // row j+i, indexed by column offset from j
			for c := i; c <= kn; c++ {
				a[ro+c] -= a[o+c] * t
			}
		}
	}
	return true
}

// BandCholSolve solves Uᵀ U x = b in place, U from BandCholesky. The
// forward pass starts at b's first non-zero entry: the rows before it
// would only turn +0 into +0 (a right-hand side with a few entries, as the
// local Jacobian's are, saves half the pass). Half bandwidths 2 and 3, a
// ladder's, have their loops written out, with the same operations in the
// same order.
func BandCholSolve(u []float64, k, bw int, b []float64) {
	w := bw + 1
	first := 0
	for first < k && b[first] == 0 && !math.Signbit(b[first]) {
		first++
	}
	switch {
	case bw == 2 && k >= 2:
		for i := first; i < k; i++ {
			s := b[i]
			if i >= 2 {
				s -= u[(i-2)*w+2] * b[i-2]
			}
			if i >= 1 {
				s -= u[(i-1)*w+1] * b[i-1]
			}
			b[i] = s / u[i*w]
		}
		for i := k - 1; i >= 0; i-- {
			s := b[i]
			if i+1 < k {
				s -= u[i*w+1] * b[i+1]
			}
			if i+2 < k {
				s -= u[i*w+2] * b[i+2]
			}
			b[i] = s / u[i*w]
		}
		return
	case bw == 3 && k >= 3:
		for i := first; i < k; i++ {
			s := b[i]
			if i >= 3 {
				s -= u[(i-3)*w+3] * b[i-3]
			}
			if i >= 2 {
				s -= u[(i-2)*w+2] * b[i-2]
			}
			if i >= 1 {
				s -= u[(i-1)*w+1] * b[i-1]
			}
			b[i] = s / u[i*w]
		}
		for i := k - 1; i >= 0; i-- {
			s := b[i]
			if i+1 < k {
				s -= u[i*w+1] * b[i+1]
			}
			if i+2 < k {
				s -= u[i*w+2] * b[i+2]
			}
			if i+3 < k {
				s -= u[i*w+3] * b[i+3]
			}
			b[i] = s / u[i*w]
		}
		return
	}
	for i := first; i < k; i++ {
		s := b[i]
		for p := max(0, i-bw); p < i; p++ {
			s -= u[p*w+i-p] * b[p]
		}
		b[i] = s / u[i*w]
	}
	for i := k - 1; i >= 0; i-- {
		s := b[i]
		for p := i + 1; p <= min(k-1, i+bw); p++ {
			s -= u[i*w+p-i] * b[p]
		}
		b[i] = s / u[i*w]
	}
}
