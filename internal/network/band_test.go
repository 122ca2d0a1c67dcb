package network

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
)

// randomBand returns a random symmetric diagonally dominant (hence
// positive definite) n×n band matrix of half bandwidth k in the storage of
// factorBand, with a fixed seed.
func randomBand(n, k int, seed uint64) []float64 {
	rng := rand.New(rand.NewPCG(seed, 1))
	w := k + 1
	a := make([]float64, n*w)
	for i := range n {
		for d := 1; d <= k && i+d < n; d++ {
			v := rng.Float64() - 0.5
			a[i*w+d] = v
			a[i*w] += math.Abs(v)
			a[(i+d)*w] += math.Abs(v)
		}
		a[i*w] += 0.1 + rng.Float64()
	}
	return a
}

// bandMul returns A x for the band matrix a of factorBand's storage.
func bandMul(n, k int, a, x []float64) []float64 {
	w := k + 1
	y := make([]float64, n)
	for i := range n {
		y[i] += a[i*w] * x[i]
		for d := 1; d <= k && i+d < n; d++ {
			y[i] += a[i*w+d] * x[i+d]
			y[i+d] += a[i*w+d] * x[i]
		}
	}
	return y
}

// TestBandFactor checks the band Cholesky by its definition: the solution x
// of A x = b must give back b when multiplied by A (to 1e-12 relative), for
// narrow bands (factorised here) and wide ones (LAPACK's blocked code); and
// narrow factors must equal LAPACK's unblocked Dpbtf2 to the last bit, as
// the loop is the same algorithm.
func TestBandFactor(t *testing.T) {
	for _, tc := range []struct{ n, k int }{{1, 0}, {7, 0}, {50, 1}, {3, 2}, {4, 2}, {200, 2}, {200, 3}, {200, 5}, {300, 31}, {300, 40}} {
		t.Run(fmt.Sprintf("n=%d,k=%d", tc.n, tc.k), func(t *testing.T) {
			a := randomBand(tc.n, tc.k, uint64(tc.n*100+tc.k))
			orig := append([]float64(nil), a...)
			want := append([]float64(nil), a...)
			f, ok := factorBand(tc.n, tc.k, a, make([]float64, tc.n))
			if !ok {
				t.Fatal("factorBand: not positive definite")
			}
			if tc.k < blockedBand {
				_, ok := lapack64.Pbtrf(blas64.SymmetricBand{Uplo: blas.Upper, N: tc.n, K: tc.k, Stride: tc.k + 1, Data: want})
				if !ok {
					t.Fatal("Pbtrf: not positive definite")
				}
				for i := range a {
					if a[i] != want[i] {
						t.Fatalf("factor element %d = %v, LAPACK %v", i, a[i], want[i])
					}
				}
			}
			rng := rand.New(rand.NewPCG(7, 7))
			b := make([]float64, tc.n)
			for i := range b {
				b[i] = rng.NormFloat64()
			}
			x := append([]float64(nil), b...)
			f.solve(x)
			back := bandMul(tc.n, tc.k, orig, x)
			for i := range b {
				if math.Abs(back[i]-b[i]) > 1e-12*(1+math.Abs(b[i])) {
					t.Fatalf("(A A^-1 b)[%d] = %v, want %v", i, back[i], b[i])
				}
			}
		})
	}
}

// TestBandFactorIndefinite checks that a matrix with a non-positive pivot
// is reported, not factorised into NaN.
func TestBandFactorIndefinite(t *testing.T) {
	for name, a := range map[string][]float64{
		"negative diagonal": {1, 0.5, -1, 0, 1, 0},
		"singular":          {1, 1, 1, 0, 1, 0}, // [[1 1 0] [1 1 0] [0 0 1]]
		"NaN":               {math.NaN(), 0, 1, 0, 1, 0},
	} {
		if _, ok := factorBand(3, 1, a, make([]float64, 3)); ok {
			t.Errorf("%s: factorBand reported positive definite", name)
		}
	}
}
