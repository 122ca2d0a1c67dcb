package lsq

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestPCGNSameBits runs pcgN on several systems side by side and pcg on each
// alone: every solution and flag must be the same to the bit (no outside
// source: pcgN is pcg's arithmetic interleaved). The cases cover a zero and
// a given start, a zero right-hand side, the iteration cap reached, and an
// operator that is not positive definite on one system.
func TestPCGNSameBits(t *testing.T) {
	const n = 40
	rng := rand.New(rand.NewPCG(3, 4))
	// A = BᵀB + I, SPD and ill-conditioned enough to take some iterations.
	b := make([][]float64, n)
	for i := range b {
		b[i] = make([]float64, n)
		for j := range b[i] {
			b[i][j] = rng.NormFloat64() * math.Pow(1.3, float64(j%9))
		}
	}
	apply := func(dst, v []float64) {
		bv := make([]float64, n)
		for i := range n {
			for j := range n {
				bv[i] += b[i][j] * v[j]
			}
		}
		for j := range n {
			dst[j] = v[j]
			for i := range n {
				dst[j] += b[i][j] * bv[i]
			}
		}
	}
	indef := func(dst, v []float64) { // -I
		for j := range v {
			dst[j] = -v[j]
		}
	}
	precond := func(dst, r []float64) {
		for j := range dst {
			dst[j] = r[j] / (1 + float64(j%5))
		}
	}
	vec := func(scale float64) []float64 {
		v := make([]float64, n)
		for j := range v {
			v[j] = scale * rng.NormFloat64()
		}
		return v
	}
	for _, c := range []struct {
		name    string
		maxIter int
		indef   bool
	}{{"converged", 500, false}, {"capped", 7, false}, {"not positive definite", 500, true}} {
		t.Run(c.name, func(t *testing.T) {
			op := apply
			if c.indef {
				op = indef
			}
			bs := [][]float64{vec(1), vec(1e3), make([]float64, n), vec(1e-4), vec(1), vec(2)}
			ys0 := [][]float64{nil, vec(1), nil, vec(1e-4), nil, vec(0.5)}
			copies := func(vs [][]float64) [][]float64 {
				out := make([][]float64, len(vs))
				for k, v := range vs {
					if v != nil {
						out[k] = append([]float64(nil), v...)
					}
				}
				return out
			}
			calls := 0
			applyN := func(dst, v [][]float64) {
				calls++
				for k := range dst {
					op(dst[k], v[k])
				}
			}
			ys, oks := pcgN(applyN, precond, bs, copies(ys0), 1e-10, c.maxIter)
			starts := copies(ys0)
			for k := range bs {
				y, ok := pcg(op, precond, bs[k], starts[k], 1e-10, c.maxIter)
				if ok != oks[k] {
					t.Errorf("system %d: converged %v side by side, %v alone", k, oks[k], ok)
				}
				for j := range y {
					if math.Float64bits(y[j]) != math.Float64bits(ys[k][j]) {
						t.Fatalf("system %d, entry %d: %v side by side, %v alone", k, j, ys[k][j], y[j])
					}
				}
			}
			if calls == 0 {
				t.Error("no batched product taken")
			}
		})
	}
}
