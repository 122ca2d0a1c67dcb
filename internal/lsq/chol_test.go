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
	for _, c := range []struct{ k, bw int }{{1, 0}, {5, 0}, {12, 1}, {40, 2}, {40, 7}, {9, 8}, {6, 10}} {
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
