package calibrate

import (
	"math"
	"math/rand/v2"
)

// exactHubVariances replaces the probed variances of the header and pump
// parameters by exact ones. Every reading depends on those two, so their
// rows of the inverse information matrix carry most of its off-diagonal
// mass, where the stochastic diagonal estimate is worst (measured on a
// 1000-branch ladder: header and pump sd over-estimated 2-2.6 times while
// the branch resistances were within a few per cent on average). Each exact
// variance is e_jᵀ A⁻¹ e_j with A = JᵀWJ/c + P, from one
// Jacobi-preconditioned conjugate-gradient solve (pcg) with the Jacobian
// products of the problem at res.X; p must have been evaluated there.
func exactHubVariances(p *problem, res *Result) {
	if res.VarMethod != VarProbed {
		return
	}
	op := opProblem{p}
	n, m := p.Dims()
	c := res.CovScale
	if !(c > 0) {
		c = 1
	}
	prec := make([]float64, n)
	for j, par := range p.params {
		if !math.IsInf(par.Sigma, 1) {
			prec[j] = 1 / (par.Sigma * par.Sigma)
		}
	}
	tm := make([]float64, m)
	apply := func(dst, v []float64) {
		op.MulVec(tm, v)
		for i := range tm {
			tm[i] *= res.Weight[i] / c
		}
		op.MulTransVec(dst, tm)
		for j := range n {
			dst[j] += prec[j] * v[j]
		}
	}
	// Jacobi preconditioner from Rademacher probes of Jᵀ W^½ u, unbiased
	// for the squared column norms (the engine's own estimate).
	const probes = 16
	diag := make([]float64, n)
	rng := rand.New(rand.NewPCG(1, 2))
	u := make([]float64, m)
	t := make([]float64, n)
	for range probes {
		for i := range u {
			u[i] = math.Sqrt(res.Weight[i] / c)
			if rng.Uint64()&1 == 1 {
				u[i] = -u[i]
			}
		}
		op.MulTransVec(t, u)
		for j, v := range t {
			diag[j] += v * v / probes
		}
	}
	for j := range diag {
		diag[j] += prec[j]
		if !(diag[j] > 0) {
			return
		}
	}
	for _, j := range []int{p.hIdx, p.pIdx} {
		if j < 0 {
			continue
		}
		e := make([]float64, n)
		e[j] = 1
		y, ok := jacobiCG(apply, diag, e, 1e-10, 2*n+100)
		if !ok || !(y[j] > 0) {
			continue
		}
		sd := math.Sqrt(y[j])
		res.Var[j], res.StdErr[j] = y[j], sd
		res.Lo95[j] = res.X[j] - res.TQuantile*sd
		res.Hi95[j] = res.X[j] + res.TQuantile*sd
		res.Determined[j] = prec[j] == 0 || sd < determinedAt/math.Sqrt(prec[j])
	}
}

// jacobiCG solves A y = b for a symmetric positive definite A given by its
// product, by conjugate gradients with a Jacobi preconditioner (Saad 2003,
// "Iterative Methods for Sparse Linear Systems", Alg. 9.1), to a relative
// residual of tol.
func jacobiCG(apply func(dst, v []float64), diag, b []float64, tol float64, maxIter int) ([]float64, bool) {
	n := len(b)
	y := make([]float64, n)
	r := append([]float64(nil), b...)
	z := make([]float64, n)
	for j := range n {
		z[j] = r[j] / diag[j]
	}
	p := append([]float64(nil), z...)
	ap := make([]float64, n)
	rz := dot(r, z)
	bnorm := math.Sqrt(dot(b, b))
	for range maxIter {
		if math.Sqrt(dot(r, r)) <= tol*bnorm {
			return y, true
		}
		apply(ap, p)
		pap := dot(p, ap)
		if !(pap > 0) {
			return y, false
		}
		alpha := rz / pap
		for j := range n {
			y[j] += alpha * p[j]
			r[j] -= alpha * ap[j]
			z[j] = r[j] / diag[j]
		}
		next := dot(r, z)
		beta := next / rz
		rz = next
		for j := range n {
			p[j] = z[j] + beta*p[j]
		}
	}
	return y, math.Sqrt(dot(r, r)) <= tol*bnorm
}

func dot(a, b []float64) float64 {
	var s float64
	for i, v := range a {
		s += v * b[i]
	}
	return s
}
