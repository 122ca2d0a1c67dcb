package lsqtest

import (
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/mat"

	"flowset/internal/lsq"
)

func exp(x float64) float64   { return math.Exp(x) }
func expm1(x float64) float64 { return math.Expm1(x) }

// PowerLaw is the fit of a resistance law Δp = k·Q^e to readings, the shape of
// every hydraulic element, with parameters x = (ln k, e). Observations are
// Y_i with standard uncertainty Sigma_i at flows Q_i.
type PowerLaw struct {
	Q, Y, Sigma []float64
}

// NewPowerLaw makes m readings of k·Q^e at flows spread over [0.2, 2] with a
// relative uncertainty rel, adding normal noise of that size when seed is
// not zero (seed zero gives exact readings).
func NewPowerLaw(k, e float64, m int, rel float64, seed uint64) *PowerLaw {
	p := &PowerLaw{Q: make([]float64, m), Y: make([]float64, m), Sigma: make([]float64, m)}
	var rng *rand.Rand
	if seed != 0 {
		rng = rand.New(rand.NewPCG(seed, 1))
	}
	for i := range m {
		q := 0.2 + 1.8*float64(i)/float64(max(m-1, 1))
		v := k * math.Pow(q, e)
		p.Q[i], p.Sigma[i] = q, rel*v
		p.Y[i] = v
		if rng != nil {
			p.Y[i] += p.Sigma[i] * rng.NormFloat64()
		}
	}
	return p
}

// Dims returns 2 parameters and len(Q) observations.
func (p *PowerLaw) Dims() (params, obs int) { return 2, len(p.Q) }

// Residuals sets r_i = (exp(x0)·Q_i^x1 - Y_i)/Sigma_i and its Jacobian.
func (p *PowerLaw) Residuals(x, r []float64, jac *mat.Dense) error {
	if len(x) != 2 || len(r) != len(p.Q) {
		return fmt.Errorf("lsqtest: power law: wrong sizes")
	}
	for i, q := range p.Q {
		v := math.Exp(x[0] + x[1]*math.Log(q))
		r[i] = (v - p.Y[i]) / p.Sigma[i]
		if jac != nil {
			jac.Set(i, 0, v/p.Sigma[i])
			jac.Set(i, 1, v*math.Log(q)/p.Sigma[i])
		}
	}
	return nil
}

// Sparse is a large calibration-like problem: parameters are log-multipliers
// x_j, and reading i is a weighted sum of a few multiplied terms,
// pred_i = Σ_k C_ik·exp(x_{J_ik}), read with standard uncertainty Sigma_i.
// Each observation touches only a few parameters, so J is sparse. Sparse
// implements the matrix-free Operator and Preconditioner paths.
type Sparse struct {
	N     int
	Truth []float64
	Y     []float64
	Sigma []float64
	Idx   [][]int
	Coef  [][]float64

	ex []float64 // exp(x) at the latest Residuals call
}

// NewSparse makes a problem with n parameters and m ≥ n readings. Reading i
// touches parameter i mod n and per-1 others at random; the true
// log-multipliers are normal with sd 0.3, and readings carry a relative
// uncertainty rel with normal noise of that size (none when rel is 0, and
// Sigma is then 1 % for weighting).
func NewSparse(n, m, per int, rel float64, seed uint64) *Sparse {
	rng := rand.New(rand.NewPCG(seed, 2))
	s := &Sparse{N: n, Truth: make([]float64, n), Y: make([]float64, m), Sigma: make([]float64, m),
		Idx: make([][]int, m), Coef: make([][]float64, m), ex: make([]float64, n)}
	for j := range n {
		s.Truth[j] = 0.3 * rng.NormFloat64()
	}
	for i := range m {
		idx := []int{i % n}
		for len(idx) < per {
			j := rng.IntN(n)
			dup := false
			for _, k := range idx {
				dup = dup || k == j
			}
			if !dup {
				idx = append(idx, j)
			}
		}
		coef := make([]float64, per)
		var v float64
		for k, j := range idx {
			coef[k] = 0.5 + rng.Float64()
			v += coef[k] * math.Exp(s.Truth[j])
		}
		s.Idx[i], s.Coef[i] = idx, coef
		sr := rel
		if sr == 0 {
			sr = 0.01
		}
		s.Sigma[i] = sr * v
		s.Y[i] = v
		if rel != 0 {
			s.Y[i] += s.Sigma[i] * rng.NormFloat64()
		}
	}
	return s
}

// Dims returns the number of parameters and observations.
func (s *Sparse) Dims() (params, obs int) { return s.N, len(s.Y) }

// Residuals sets the normalised residuals, fills jac when it is not nil, and
// keeps exp(x) for the products.
func (s *Sparse) Residuals(x, r []float64, jac *mat.Dense) error {
	if len(x) != s.N || len(r) != len(s.Y) {
		return fmt.Errorf("lsqtest: sparse: wrong sizes")
	}
	for j, v := range x {
		s.ex[j] = math.Exp(v)
	}
	if jac != nil {
		jac.Zero()
	}
	for i, idx := range s.Idx {
		var v float64
		for k, j := range idx {
			v += s.Coef[i][k] * s.ex[j]
			if jac != nil {
				jac.Set(i, j, jac.At(i, j)+s.Coef[i][k]*s.ex[j]/s.Sigma[i])
			}
		}
		r[i] = (v - s.Y[i]) / s.Sigma[i]
	}
	return nil
}

// MulVec sets dst = J v at the latest Residuals call.
func (s *Sparse) MulVec(dst, v []float64) {
	for i, idx := range s.Idx {
		var t float64
		for k, j := range idx {
			t += s.Coef[i][k] * s.ex[j] * v[j]
		}
		dst[i] = t / s.Sigma[i]
	}
}

// MulTransVec sets dst = Jᵀ w at the latest Residuals call.
func (s *Sparse) MulTransVec(dst, w []float64) {
	for j := range dst {
		dst[j] = 0
	}
	for i, idx := range s.Idx {
		wi := w[i] / s.Sigma[i]
		for k, j := range idx {
			dst[j] += s.Coef[i][k] * s.ex[j] * wi
		}
	}
}

// Fork implements lsq.Forker: the products keep no scratch (they only read
// exp(x) of the latest Residuals call), so the problem itself serves.
func (s *Sparse) Fork() lsq.Operator { return s }

// DiagJTJ sets dst to the squared column norms of J.
func (s *Sparse) DiagJTJ(dst []float64) {
	for j := range dst {
		dst[j] = 0
	}
	for i, idx := range s.Idx {
		for k, j := range idx {
			v := s.Coef[i][k] * s.ex[j] / s.Sigma[i]
			dst[j] += v * v
		}
	}
}

// DenseOnly hides the Operator methods of a problem, so that it is solved on
// the dense path.
type DenseOnly struct {
	P interface {
		Dims() (int, int)
		Residuals(x, r []float64, jac *mat.Dense) error
	}
}

// Dims forwards to the wrapped problem.
func (d DenseOnly) Dims() (params, obs int) { return d.P.Dims() }

// Residuals forwards to the wrapped problem.
func (d DenseOnly) Residuals(x, r []float64, jac *mat.Dense) error { return d.P.Residuals(x, r, jac) }
