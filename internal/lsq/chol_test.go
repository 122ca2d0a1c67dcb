package lsq

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
)

// TestBandCholesky solves random symmetric positive definite band systems
// (diagonally dominant, so positive definite by Gershgorin's theorem) with
// BandCholesky and checks the solution against the matrix itself: the
// residual A x - b must vanish to rounding. Half bandwidths from 0 to
// beyond the order (a full matrix in band storage).
func TestBandCholesky(t *testing.T) {
	rng := rand.New(rand.NewPCG(4, 9))
	for _, c := range []struct{ k, bw int }{{1, 0}, {5, 0}, {12, 1}, {40, 2}, {2, 2}, {40, 3}, {3, 3}, {40, 7}, {9, 8}, {6, 10}} {
		t.Run(fmt.Sprintf("k=%d/bw=%d", c.k, c.bw), func(t *testing.T) {
			k, bw := c.k, c.bw
			w := bw + 1
			dense := make([]float64, k*k)
			for i := range k {
				for j := i + 1; j <= min(k-1, i+bw); j++ {
					v := rng.Float64() - 0.5
					dense[i*k+j], dense[j*k+i] = v, v
				}
			}
			for i := range k {
				var s float64
				for j := range k {
					s += math.Abs(dense[i*k+j])
				}
				dense[i*k+i] = s + 0.1 + rng.Float64()
			}
			a := make([]float64, k*w)
			for i := range k {
				for j := i; j <= min(k-1, i+bw); j++ {
					a[i*w+j-i] = dense[i*k+j]
				}
			}
			b := make([]float64, k)
			for i := range b {
				b[i] = rng.NormFloat64()
			}
			x := append([]float64(nil), b...)
			if !BandCholesky(a, k, bw) {
				t.Fatal("not positive definite")
			}
			BandCholSolve(a, k, bw, x)
			for i := range k {
				var s float64
				for j := range k {
					s += dense[i*k+j] * x[j]
				}
				if math.Abs(s-b[i]) > 1e-12*(1+math.Abs(b[i])) {
					t.Errorf("row %d: A x = %.15g, b = %.15g", i, s, b[i])
				}
			}
		})
	}
}

// refBandSolve is BandCholSolve's plain loops over every row, the
// reference its written-out cases and its skip of leading zeros must
// reproduce to the bit.
func refBandSolve(u []float64, k, bw int, b []float64) {
	w := bw + 1
	for i := range k {
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

// TestBandCholSolveSame solves right-hand sides with two non-zero entries
// after a run of zeros (a local Jacobian's) and dense ones, for half
// bandwidths 1 to 4, and wants BandCholSolve equal to the plain loops to
// the bit (the reference is that code, no outside source).
func TestBandCholSolveSame(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 11))
	for _, k := range []int{1, 2, 3, 4, 30} {
		for bw := 1; bw <= 4; bw++ {
			t.Run(fmt.Sprintf("k=%d/bw=%d", k, bw), func(t *testing.T) {
				w := bw + 1
				a := make([]float64, k*w)
				for i := range k {
					a[i*w] = 2*float64(bw) + 1 + rng.Float64()
					for j := 1; j <= bw && i+j < k; j++ {
						a[i*w+j] = rng.Float64() - 0.5
					}
				}
				if !BandCholesky(a, k, bw) {
					t.Fatal("not positive definite")
				}
				for _, first := range []int{0, k / 2, k - 1} {
					b := make([]float64, k)
					b[first] = rng.NormFloat64()
					if first+1 < k {
						b[first+1] = -b[first]
					}
					dense := make([]float64, k)
					for i := range dense {
						dense[i] = rng.NormFloat64()
					}
					for _, rhs := range [][]float64{b, dense} {
						got, want := append([]float64(nil), rhs...), append([]float64(nil), rhs...)
						BandCholSolve(a, k, bw, got)
						refBandSolve(a, k, bw, want)
						for i := range k {
							if math.Float64bits(got[i]) != math.Float64bits(want[i]) {
								t.Fatalf("first non-zero %d: x[%d] = %v, plain loops %v", first, i, got[i], want[i])
							}
						}
					}
				}
			})
		}
	}
}
